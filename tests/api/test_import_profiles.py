"""Import profiles through the API: saved and versioned, used for uploads (one measurement per block and
a stated series, in one transaction), dry runs that store nothing (SQLite and PostgreSQL)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from sqlmodel import func, select

from server.models import AuditEvent, Measurement, MeasurementSeries, RawFile
from server.services import accounts, measurements as measurement_service
from tests.factories import bearer, make_token

CORPUS = Path(__file__).parent.parent / "data" / "exports"


def corpus(stem: str) -> tuple[dict, bytes]:
    profile = json.loads((CORPUS / f"{stem}.profile.json").read_text())
    raw = next(p for p in CORPUS.iterdir() if p.stem == stem and ".profile" not in p.name and ".clean" not in p.name)
    return profile, raw.read_bytes()


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write", name="registrar"))


@pytest.fixture
def batch(client, writer):
    # An invented hexa-methoxy benzene test compound: C12H18O6.
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC"}, headers=writer)
    return client.post("/api/v1/compounds/RVZ-00001/batches", json={"chemist": "lab"}, headers=writer).json()["code"]


def post(client, batch, raw, headers, *, query="", **data):
    return client.post(f"/api/v1/batches/{batch}/measurements{query}", data=data,
                       files={"file": ("export.txt", raw, "text/plain")}, headers=headers)


def counts(session) -> tuple[int, int, int, int]:
    session.expire_all()
    return tuple(session.exec(select(func.count()).select_from(t)).one()
                 for t in (Measurement, RawFile, AuditEvent, MeasurementSeries))


def test_a_profile_is_saved_listed_read_and_versioned(client, writer, session):
    profile, _ = corpus("pe_loop_marker_cp1252")
    r = client.post("/api/v1/import-profiles", json=profile, headers=writer)
    assert r.status_code == 201, r.text
    body = r.json()
    assert (body["name"], body["kind"], body["version"]) == ("tester-a", "pe_loop", 1)
    assert body["columns"] == profile["columns"] and isinstance(body["id"], int)
    assert client.post("/api/v1/import-profiles", json=profile, headers=writer).status_code == 409
    r = client.patch("/api/v1/import-profiles/tester-a", json={"ignore": ["Point", "Flag"]}, headers=writer)
    assert r.status_code == 201 and r.json()["version"] == 2
    same = client.patch("/api/v1/import-profiles/tester-a", json={"ignore": ["Point", "Flag"]}, headers=writer)
    assert same.status_code == 200 and same.json()["version"] == 2
    assert [p["version"] for p in client.get("/api/v1/import-profiles", headers=writer).json()] == [2]
    assert client.get("/api/v1/import-profiles/tester-a?version=1", headers=writer).json()["ignore"] == ["Point"]
    assert client.get("/api/v1/import-profiles/nobody", headers=writer).status_code == 404
    actions = session.exec(select(AuditEvent.action).where(AuditEvent.entity == "import_profile")).all()
    assert sorted(actions) == ["import_profile.create", "import_profile.update"]


@pytest.mark.parametrize(("change", "field"), [
    ({"columns": {"Charge": {"to": "Q", "unit": "mm"}}}, "columns.Charge.unit"),
    ({"columns": {"Charge": {"to": "Qx", "unit": "nC"}}}, "columns.Charge.to"),
    ({"columns": {"Charge": {"to": "Q", "unit": "nC"}}}, "columns"),  # a charge alone is no loop
    ({"kind": "crystal"}, "kind"),
])
def test_a_wrong_profile_answers_422_naming_the_field(client, writer, change, field):
    profile, _ = corpus("pe_loop_marker_cp1252")
    r = client.post("/api/v1/import-profiles", json={**profile, **change}, headers=writer)
    assert r.status_code == 422 and r.json()["field"] == field, r.text


def test_a_profiled_upload_stores_the_raw_bytes_and_names_the_profile_version(client, writer, batch, session):
    profile, raw = corpus("pe_loop_marker_cp1252")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    r = post(client, batch, raw, writer, profile="tester-a")
    assert r.status_code == 201, r.text
    (m,) = r.json()["measurements"]
    assert r.json()["series"] is None
    assert (m["profile"], m["profile_version"], m["block"]) == ("tester-a", 1, 0)
    assert m["conditions"]["area_cm2"] == pytest.approx(0.0785) and m["kind"] == "pe_loop"
    assert client.get(f"/api/v1/measurements/{m['id']}/raw", headers=writer).content == raw
    # the same file again: the same measurement
    again = post(client, batch, raw, writer, profile="tester-a")
    assert again.status_code == 200 and again.json()["measurements"][0]["id"] == m["id"]
    # a new version does not change how the stored file is read again
    client.patch("/api/v1/import-profiles/tester-a", json={"columns": {
        "Drive Voltage": {"to": "V", "unit": "kV"}, "Charge": {"to": "Q", "unit": "nC"},
        "Time": {"to": "t", "unit": "ms"}}}, headers=writer)
    stored = session.get(Measurement, m["id"])
    redone = measurement_service.reanalyse_one(session, stored)
    assert redone.results["pr_uC_cm2"] == pytest.approx(m["results"]["pr_uC_cm2"], rel=1e-9)


def test_the_same_figures_as_the_clean_twin_through_the_api(client, writer, batch):
    profile, raw = corpus("dsc_celsius_minutes")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    r = post(client, batch, raw, writer, profile=profile["name"])
    assert r.status_code == 201, r.text
    clean = (CORPUS / "dsc_celsius_minutes.clean1.csv").read_bytes()
    c = post(client, batch, clean, writer, kind="dsc")
    assert c.status_code == 201, c.text
    have, want = r.json()["measurements"][0]["results"], c.json()["results"]
    numbers = [k for k, v in want.items() if isinstance(v, float)]
    assert numbers
    for k in numbers:
        assert math.isclose(have[k], want[k], rel_tol=1e-6, abs_tol=1e-9), k


def test_a_sweep_file_gives_one_measurement_per_block_and_a_series(client, writer, batch, session):
    profile, raw = corpus("pe_loop_sweep_blank_lines")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    r = post(client, batch, raw, writer, profile="sweep-d")
    assert r.status_code == 201, r.text
    ms = r.json()["measurements"]
    assert [m["temperature_K"] for m in ms] == [300.0, 320.0, 340.0]
    assert [m["block"] for m in ms] == [0, 1, 2]
    assert len({m["sha256"] for m in ms}) == 1
    assert session.exec(select(func.count()).select_from(RawFile)).one() == 1
    s = r.json()["series"]
    assert s["measurements"] == [m["id"] for m in ms] and s["variable"] == "temperature"
    assert s["direction"] == "heating"
    assert ms[0]["results"]["pr_uC_cm2"] > ms[2]["results"]["pr_uC_cm2"]
    again = post(client, batch, raw, writer, profile="sweep-d")
    assert again.status_code == 200 and [m["id"] for m in again.json()["measurements"]] == [m["id"] for m in ms]


def test_the_varying_condition_typed_on_the_form_is_refused(client, writer, batch, session):
    profile, raw = corpus("pe_loop_sweep_blank_lines")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    before = counts(session)
    r = post(client, batch, raw, writer, profile="sweep-d", temperature="300 K")
    assert r.status_code == 422 and r.json()["field"] == "temperature"
    assert counts(session) == before


def test_a_dry_run_previews_and_stores_nothing(client, writer, batch, session):
    profile, raw = corpus("pe_loop_marker_cp1252")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    before = counts(session)
    r = post(client, batch, raw, writer, query="?dry_run=true", profile="tester-a")
    assert r.status_code == 200, r.text
    body = r.json()
    p = body["preview"]
    assert p["columns"] == ["t_s", "V_V", "Q_uC"] and p["units"] == ["s", "V", "uC"]
    assert p["rows_total"] == 1001 and len(p["rows_head"]) == 8
    assert "Drive Voltage (V) \u2192 V (V)" in p["conversions"] and "Charge (nC) \u2192 Q (uC)" in p["conversions"]
    assert p["conditions"]["area_cm2"] == pytest.approx(0.0785)
    assert p["blocks"][0]["first_line"] == 9 and p["profile"] == {"name": "tester-a", "version": 1}
    assert body["verdict"] and body["results"]["pr_uC_cm2"] > 0 and isinstance(body["flags"], list)
    assert counts(session) == before


def test_a_plain_dry_run_works_without_a_profile(client, writer, batch, session):
    clean = (CORPUS / "pe_loop_text_header.clean1.csv").read_bytes()
    before = counts(session)
    r = post(client, batch, clean, writer, query="?dry_run=true", kind="pe_loop")
    assert r.status_code == 200, r.text
    assert r.json()["preview"]["blocks"][0]["rows"] == 1001 and r.json()["preview"]["profile"] is None
    assert counts(session) == before


def test_a_profile_that_does_not_fit_answers_422_and_stores_nothing(client, writer, batch, session):
    profile, _ = corpus("pe_loop_marker_cp1252")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    before = counts(session)
    r = post(client, batch, b"[Data]\nPoint;Time;Drive Voltage\n1;0,1;2,0\n", writer, profile="tester-a")
    assert r.status_code == 422
    assert (r.json()["line"], r.json()["column"]) == (2, "Charge") and "tester-a" in r.json()["detail"]
    r = post(client, batch, b"no marker here\n1;2;3\n", writer, profile="tester-a")
    assert r.status_code == 422 and r.json()["field"] == "start_after" and "tester-a" in r.json()["detail"]
    assert counts(session) == before


def test_a_decimal_comma_file_without_a_profile_says_so(client, writer, batch, session):
    _, raw = corpus("dielectric_tab_units_row")
    before = counts(session)
    r = post(client, batch, b"V (V)\tQ (uC)\n1,5\t2,5\n2,5\t3,5\n", writer, kind="pe_loop")
    assert r.status_code == 422 and "decimal commas" in r.json()["detail"]
    assert counts(session) == before


def test_a_token_bound_to_a_profile_posts_files_unchanged(client, writer, batch, session):
    profile, raw = corpus("pund_semicolon_cp1252")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    _, secret = accounts.create_token(session=session, name="pulse-pc", scope="upload", actor="test",
                                      profile="pulse-g")
    pc = bearer(secret)
    r = post(client, batch, raw, pc)
    assert r.status_code == 201, r.text
    assert r.json()["measurements"][0]["profile"] == "pulse-g"
    assert "pulse-pc" not in r.json()["measurements"][0]["created_by"]  # names hidden from upload tokens
    other, _ = corpus("pe_loop_marker_cp1252")
    client.post("/api/v1/import-profiles", json=other, headers=writer)
    r = post(client, batch, raw, pc, profile="tester-a")
    assert r.status_code == 422 and r.json()["field"] == "profile"


def test_a_token_cannot_be_bound_to_a_missing_profile(session):
    from server.errors import InputError

    with pytest.raises(InputError) as err:
        accounts.create_token(session=session, name="pc", scope="upload", actor="test", profile="nobody")
    assert err.value.field == "profile"


def test_a_block_is_corrected_through_its_profile_version(client, writer, batch):
    profile, raw = corpus("pe_loop_sweep_blank_lines")
    client.post("/api/v1/import-profiles", json=profile, headers=writer)
    ms = post(client, batch, raw, writer, profile="sweep-d").json()["measurements"]
    r = client.post(f"/api/v1/measurements/{ms[1]['id']}/revise", data={"thickness": "300 um"}, headers=writer)
    assert r.status_code == 201, r.text
    new = r.json()
    assert (new["profile"], new["profile_version"], new["block"]) == ("sweep-d", 1, 1)
    assert new["temperature_K"] == 320.0 and new["supersedes"] == ms[1]["id"]
    # the same charge over twice the thickness: half the field, the same polarization
    assert new["results"]["pr_uC_cm2"] == pytest.approx(ms[1]["results"]["pr_uC_cm2"], rel=1e-6)
    assert new["results"]["ec_kV_cm"] == pytest.approx(ms[1]["results"]["ec_kV_cm"] / 2, rel=1e-6)
