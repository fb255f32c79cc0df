"""The profile editor: read a sample file, map its columns from drop-downs, preview, save (SQLite and PG)."""

from __future__ import annotations

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
