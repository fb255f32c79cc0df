"""The profile editor: read a sample file, map its columns from drop-downs, preview, save (SQLite and PG)."""

from __future__ import annotations

import json
from pathlib import Path

from sqlmodel import select

from server.models import ImportProfile
from tests.factories import login_as, soup

CORPUS = Path(__file__).parent.parent / "data" / "exports"


def test_a_profile_is_written_from_a_sample_file_without_json(client, session):
    csrf = login_as(client, session)
    page = soup(client.get("/import-profiles").text)
    assert page.select_one("#profile-editor") is not None
    raw = (CORPUS / "pe_loop_marker_cp1252.txt").read_bytes()
    base = {"csrf_token": csrf, "name": "tester-web", "kind": "pe_loop", "start_after": r"^\[Data\]",
            "delimiter": ";", "decimal": ",", "encoding": "cp1252", "skip_lines": "0"}
    hx = {"HX-Request": "true", "X-CSRF-Token": csrf}
    r = client.post("/import-profiles/draft", data=base, files={"file": ("x.txt", raw)}, headers=hx)
    assert r.status_code == 200, r.text
    frag = soup(r.text)
    assert [i["value"] for i in frag.select("#map-columns input[type=hidden]")] == ["Point", "Time", "Drive Voltage",
                                                                                    "Charge"]
    keys = [i["value"] for i in frag.select("#map-conditions input[type=hidden]")]
    assert keys[:2] == ["Operator", "Area"]
    assert frag.select_one("#preview") is None  # nothing mapped yet
    mapped = {**base, "source_0": "Point", "to_0": "ignore", "source_1": "Time", "to_1": "t_s", "unit_1": "ms",
              "source_2": "Drive Voltage", "to_2": "V_V", "unit_2": "V", "source_3": "Charge", "to_3": "Q_uC",
              "unit_3": "nC"}
    for i, key in enumerate(keys):
        mapped[f"cond_key_{i}"] = key
    conds = {"Area": ("area", "mm^2"), "Thickness": ("thickness", ""), "Frequency": ("frequency", "Hz"),
             "Temperature": ("temperature", "K")}
    for i, key in enumerate(keys):
        if key in conds:
            mapped[f"cond_to_{i}"], mapped[f"cond_unit_{i}"] = conds[key]
    r = client.post("/import-profiles/draft", data=mapped, files={"file": ("x.txt", raw)}, headers=hx)
    frag = soup(r.text)
    assert "Charge (nC) \u2192 Q (uC)" in [li.text for li in frag.select("#preview ul.conversions li")]
    assert "Pr" in frag.select("#preview-blocks tbody tr")[0].find_all("td")[3].text
    r = client.post("/import-profiles", data=mapped, files={"file": ("x.txt", raw)}, follow_redirects=False)
    assert r.status_code == 303
    row = session.exec(select(ImportProfile).where(ImportProfile.name == "tester-web")).one()
    assert row.spec["columns"]["Charge"] == {"to": "Q_uC", "unit": "nC"} and row.spec["ignore"] == ["Point"]
    assert row.spec["conditions"]["Area"] == {"to": "area", "unit": "mm^2"}
    listed = soup(client.get("/import-profiles").text)
    assert [a.text for a in listed.select("#profiles tbody a")] == ["tester-web"]


def test_a_wrong_mapping_is_refused_naming_the_field(client, session):
    csrf = login_as(client, session)
    data = {"csrf_token": csrf, "name": "bad", "kind": "pe_loop", "source_0": "Charge", "to_0": "Q_uC",
            "unit_0": "mm"}
    r = client.post("/import-profiles", data=data, follow_redirects=False)
    assert r.status_code == 422
    assert "columns.Charge.unit" in soup(r.text).find(role="alert").text
    assert session.exec(select(ImportProfile)).all() == []


def test_a_profile_is_edited_on_its_page_as_a_new_version_with_a_preview(client, session):
    """The edit page opens the newest version filled in; the dry run previews the edit on a sample file and
    stores nothing; saving makes version 2 (audited), and a key the form leaves out goes back to its default."""
    from server.models import AuditEvent

    csrf = login_as(client, session)
    spec = json.loads((CORPUS / "pe_loop_marker_cp1252.profile.json").read_text())
    r = client.post("/api/v1/import-profiles", json={**spec, "description": "room 2 tracer"},
                    headers={"X-CSRF-Token": csrf})
    assert r.status_code == 201, r.text
    listed = soup(client.get("/import-profiles").text)
    assert listed.select_one("#profiles tbody a")["href"] == "/import-profiles/tester-a"
    page = soup(client.get("/import-profiles/tester-a").text)
    editor = page.select_one("#profile-editor")
    assert editor["action"] == "/import-profiles/tester-a"
    assert editor.select_one("input[name=name]").has_attr("readonly")
    fields = {i["name"]: i.get("value", "") for i in editor.select("input") if i.get("name")}
    for sel in editor.select("select"):
        chosen = sel.select_one("option[selected]")
        fields[sel["name"]] = chosen["value"] if chosen else ""
    assert fields["start_after"] == r"^\[Data\]" and fields["delimiter"] == ";" and fields["decimal"] == ","
    mapped = {fields[f"source_{i}"]: (fields[f"to_{i}"], fields[f"unit_{i}"]) for i in range(4)}
    assert mapped == {"Drive Voltage": ("V_V", "V"), "Charge": ("Q_uC", "nC"), "Time": ("t_s", "ms"),
                      "Point": ("ignore", "")}
    assert [td.text for td in page.select("#profile-versions tbody td:first-child")] == ["1"]

    fields.pop("csrf_token")
    edit = {**fields, "csrf_token": csrf, "varies": "", "separator": ""}  # one table per file from now on
    raw = (CORPUS / "pe_loop_marker_cp1252.txt").read_bytes()
    hx = {"HX-Request": "true", "X-CSRF-Token": csrf}
    r = client.post("/import-profiles/draft", data=edit, files={"file": ("x.txt", raw)}, headers=hx)
    assert r.status_code == 200, r.text
    frag = soup(r.text)
    assert "Charge (nC) \u2192 Q (uC)" in [li.text for li in frag.select("#preview ul.conversions li")]
    # the mapping stays on its column although the file's order (Point, Time, ...) is not the profile's
    rows = {tr.select_one("input[type=hidden]")["value"]: tr.select_one("select option[selected]")["value"]
            for tr in frag.select("#map-columns tbody tr")}
    assert rows == {"Point": "ignore", "Time": "t_s", "Drive Voltage": "V_V", "Charge": "Q_uC"}
    assert len(session.exec(select(ImportProfile)).all()) == 1  # the dry run stored nothing

    r = client.post("/import-profiles/tester-a", data=edit, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/import-profiles/tester-a"
    session.expire_all()
    rows = session.exec(select(ImportProfile).where(ImportProfile.name == "tester-a")
                        .order_by(ImportProfile.version)).all()
    assert [p.version for p in rows] == [1, 2]
    assert "blocks" in rows[0].spec and "blocks" not in rows[1].spec
    assert rows[1].spec["description"] == "room 2 tracer" and rows[1].spec["columns"]["Charge"]["unit"] == "nC"
    audit = session.exec(select(AuditEvent).where(AuditEvent.action == "import_profile.update")).one()
    assert audit.before["version"] == 1 and audit.after["version"] == 2
    page = soup(client.get("/import-profiles/tester-a").text)
    assert [td.text for td in page.select("#profile-versions tbody td:first-child")] == ["2", "1"]
    assert "version 3" in page.select_one("#profile-editor button:not(.secondary)").text

    r = client.post("/import-profiles/tester-a", data={**edit, "unit_1": "mm"}, follow_redirects=False)
    assert r.status_code == 422
    assert "columns.Charge.unit" in soup(r.text).find(role="alert").text
    assert len(session.exec(select(ImportProfile)).all()) == 2
    assert client.get("/import-profiles/nobody").status_code == 404


def test_a_mapping_by_symbol_shows_its_column_or_says_why_the_unit_does_not_settle_it(client, session):
    """A profile written by hand maps columns by symbol (``V``, ``t``) or by one that only the unit tells apart
    (``T``: time or temperature). The editor selects the column the symbol and unit read; where no unit is
    given it says in words which columns the symbol may mean, and that each file's unit decides."""
    csrf = login_as(client, session)
    spec = json.loads((CORPUS / "pe_loop_marker_cp1252.profile.json").read_text())
    spec["columns"]["Time"] = {"to": "T"}  # no unit: the file's header decides between time and temperature
    r = client.post("/api/v1/import-profiles", json=spec, headers={"X-CSRF-Token": csrf})
    assert r.status_code == 201, r.text
    page = soup(client.get("/import-profiles/tester-a").text)
    rows = {tr.select_one("input[type=hidden]")["value"]: tr for tr in page.select("#map-columns tbody tr")}
    chosen = {k: tr.select_one("select option[selected]") for k, tr in rows.items()}
    assert chosen["Drive Voltage"]["value"] == "V_V" and chosen["Charge"]["value"] == "Q_uC"
    assert chosen["Point"]["value"] == "ignore"
    assert all("as the profile says" not in tr.text for tr in rows.values())
    time_row = rows["Time"]
    assert chosen["Time"]["value"] == "T"  # kept as written, so saving the page keeps the profile's meaning
    assert chosen["Time"].text == "T: time (s) or temperature (K), by each file's unit"
    note = time_row.select_one("p.hint")
    assert time_row.select_one("select")["aria-describedby"] == note["id"]
    assert "names more than one column" in note.text and "each file's header or units row decides" in note.text
    # With a unit, the same symbol is one column, selected as such.
    spec["columns"]["Time"] = {"to": "T", "unit": "ms"}
    assert client.patch("/api/v1/import-profiles/tester-a", json={"columns": spec["columns"]},
                        headers={"X-CSRF-Token": csrf}).status_code == 201
    page = soup(client.get("/import-profiles/tester-a").text)
    row = next(tr for tr in page.select("#map-columns tbody tr") if tr.select_one("input")["value"] == "Time")
    assert row.select_one("select option[selected]")["value"] == "t_s" and row.select_one("p.hint") is None
