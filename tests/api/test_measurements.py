"""Instrument uploads through the API: storage, analysis, bad input, re-analysis (SQLite and PostgreSQL)."""

from __future__ import annotations

import hashlib

import numpy as np
import pytest
from sqlmodel import select

from server.ingest.table import to_csv_bytes, to_xlsx_bytes
from server.models import AuditEvent, Measurement, RawFile
from server.services.measurements import reanalyse
from server.synth.dielectric import curie_weiss_scan
from server.synth.dsc import dsc_trace
from server.synth.ferro import leaky_capacitor, miller_loop, pund_train, raw_vq
from tests.factories import bearer, make_token


@pytest.fixture
def batch(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    # An invented hexa-methoxy benzene test compound: C12H18O6, 258.27 g/mol.
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC"}, headers=writer)
    return client.post("/api/v1/compounds/RVZ-00001/batches", json={"chemist": "lab"}, headers=writer).json()["code"]


@pytest.fixture
def uploader(session):
    return bearer(make_token(session, scope="upload", name="tester-pc"))


def post(client, batch, kind, raw, headers, filename="data.csv", **fields):
    return client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind, **fields},
                       files={"file": (filename, raw, "text/csv")}, headers=headers)


def loop_bytes(**kw) -> bytes:
    # Miller et al., J. Appl. Phys. 68, 6463 (1990) analytic loop: Ps 10, Pr 8, Ec 50, Emax 300.
    return to_csv_bytes(miller_loop(10, 8, 50, 300, **kw), {"temperature": "300 K", "frequency": "100 Hz"})


def test_loop_upload_stores_raw_and_results(client, session, batch, uploader):
    raw = loop_bytes()
    r = post(client, batch, "pe_loop", raw, uploader)
    assert r.status_code == 201, r.text
    body = r.json()
    assert set(body) >= {"id", "kind", "batch", "sha256", "results", "verdict", "flags", "analysis_version"}
    assert body["sha256"] == hashlib.sha256(raw).hexdigest()
    assert body["results"]["pr_uC_cm2"] == pytest.approx(8.0, rel=0.02)
    assert body["results"]["ec_kV_cm"] == pytest.approx(50.0, rel=0.02)
    assert body["verdict"] == "switching"
    assert body["analysis_version"].startswith("hysteresis/")
    assert body["temperature_K"] == 300.0  # from the file's '# temperature: 300 K' line
    got = client.get(f"/api/v1/measurements/{body['id']}/raw", headers=uploader)
    assert got.content == raw and got.headers["x-content-sha256"] == body["sha256"]

    again = post(client, batch, "pe_loop", raw, uploader)
    assert again.status_code == 200 and again.json()["id"] == body["id"]
    assert len(session.exec(select(Measurement)).all()) == 1
    assert len(session.exec(select(RawFile)).all()) == 1


def test_leaky_capacitor_is_not_ferroelectric(client, batch, uploader):
    # Scott, J. Phys.: Condens. Matter 20, 021001 (2008): a lossy linear dielectric draws an ellipse.
    raw = to_csv_bytes(leaky_capacitor(10, 1, 100, frequency_Hz=100))
    body = post(client, batch, "pe_loop", raw, uploader).json()
    assert body["verdict"] != "switching"
    assert "elliptical" in {f["code"] for f in body["flags"]}


def test_raw_vq_with_form_conditions_matches_ep(client, batch, uploader):
    # P = Q/A and E = V/d: the same loop written as charge and voltage for A = 0.00785 cm^2, d = 150 um.
    frame = raw_vq(miller_loop(10, 8, 50, 300), area_cm2=0.00785, thickness_um=150)
    r = post(client, batch, "pe_loop", to_csv_bytes(frame), uploader, area="0.785 mm^2", thickness="150 um")
    assert r.status_code == 201, r.text
    assert r.json()["results"]["pr_uC_cm2"] == pytest.approx(8.0, rel=0.02)
    missing = post(client, batch, "pe_loop", to_csv_bytes(frame) + b"\n", uploader)
    assert missing.status_code == 422 and missing.json()["field"] == "area"


def test_pund_dielectric_dsc_and_xlsx(client, batch, uploader):
    pund = pund_train(8, 10, 50, 200, area_cm2=0.01, thickness_um=100)
    r = post(client, batch, "pund", to_csv_bytes(pund), uploader, area="1 mm^2", thickness="100 um")
    assert r.status_code == 201, r.text
    assert r.json()["verdict"] == "switching"

    scan = curie_weiss_scan(3.0e3, 290.0, 300.0, 4.0, t_min_K=250, t_max_K=380, step_K=1.0,
                            frequencies_Hz=(1e3, 1e4), area_cm2=0.1, thickness_um=500)
    r = post(client, batch, "dielectric", to_xlsx_bytes(scan), uploader, filename="scan.xlsx",
             area="0.1 cm^2", thickness="500 um")
    assert r.status_code == 201, r.text
    assert r.json()["results"]["curie_constant_K"] == pytest.approx(3.0e3, rel=0.05)

    trace = dsc_trace([{"t_K": 340.0, "dh_J_g": 20.0, "width_K": 2.0, "kind": "melting"}], t_start_K=300,
                      t_end_K=380, rate_K_min=10, mass_mg=4.2)
    r = post(client, batch, "dsc", to_csv_bytes(trace), uploader, mass="4.2 mg", rate="10 K/min")
    assert r.status_code == 201, r.text
    peak = r.json()["results"]["peaks"][0]
    assert peak["dh_J_g"] == pytest.approx(20.0, rel=0.02)
    # dh_kJ_mol uses the registered molar mass: 20 J/g x 258.27 g/mol = 5.165 kJ/mol (by hand).
    assert peak["dh_kJ_mol"] == pytest.approx(20.0 * 258.27 / 1000, rel=0.02)

    listed = client.get(f"/api/v1/measurements?batch={batch}&kind=dsc", headers=uploader).json()
    assert listed["total"] == 1 and listed["items"][0]["kind"] == "dsc"
    assert client.get("/api/v1/measurements?compound=RVZ-00001", headers=uploader).json()["total"] == 3


BAD_FILES = [
    (b"", "empty"),
    (b"1,2\n3,4\n5,6\n", "header"),
    (b"E (kV/cm),Z (furlongs)\n1,2\n", "Z (furlongs)"),
    (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,n/a\n", "line 3"),
    (b"E (kV/cm),P (uC/cm^2)\n1,2\n2,3\n", "points"),
    ("\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR".encode("latin-1"), "binary"),
]


@pytest.mark.parametrize("raw, fragment", BAD_FILES)
def test_bad_files_are_refused_and_nothing_is_stored(client, session, batch, uploader, raw, fragment):
    r = post(client, batch, "pe_loop", raw, uploader)
    assert r.status_code == 422, r.text
    assert fragment.lower() in r.json()["detail"].lower()
    assert session.exec(select(Measurement)).all() == []
    assert session.exec(select(RawFile)).all() == []


def test_loop_that_never_crosses_zero(client, session, batch, uploader):
    e = np.linspace(10, 300, 400)
    raw = to_csv_bytes(__import__("pandas").DataFrame({"E (kV/cm)": np.r_[e, e[::-1]], "P (uC/cm^2)": 1 + 0.01 * np.r_[e, e[::-1]]}))
    r = post(client, batch, "pe_loop", raw, uploader)
    assert r.status_code == 422 and "zero" in r.json()["detail"]
    assert session.exec(select(RawFile)).all() == []


def test_condition_errors_name_the_field(client, batch, uploader):
    raw = loop_bytes()
    r = post(client, batch, "pe_loop", raw, uploader, temperature="300 kg")
    assert r.status_code == 422 and r.json()["field"] == "temperature"
    r = post(client, batch, "nonsense", raw, uploader)
    assert r.status_code == 422 and r.json()["field"] == "kind"


def test_token_kinds_and_scopes(client, session, batch):
    dsc_only = bearer(make_token(session, scope="upload", name="dsc-pc", kinds=["dsc"]))
    assert post(client, batch, "pe_loop", loop_bytes(), dsc_only).status_code == 403
    reader = bearer(make_token(session, scope="read", name="viewer"))
    assert post(client, batch, "pe_loop", loop_bytes(), reader).status_code == 403
    assert post(client, batch, "pe_loop", loop_bytes(), {}).status_code == 401
    assert session.exec(select(Measurement)).all() == []


def test_upload_limit(client, app, batch, uploader):
    app.state.settings = app.state.settings.__class__(**{**app.state.settings.__dict__, "max_upload_mb": 0.001})
    r = post(client, batch, "pe_loop", loop_bytes(), uploader)
    assert r.status_code == 413


def test_reanalysis_reports_and_stores_changes(client, session, batch, uploader):
    mid = post(client, batch, "pe_loop", loop_bytes(), uploader).json()["id"]
    m = session.get(Measurement, mid)
    m.results = {**m.results, "pr_uC_cm2": 1.0}
    m.analysis_version = "hysteresis/0.9"
    session.add(m)
    session.commit()
    changes = reanalyse(session=session)
    assert len(changes) == 1 and changes[0].old_version == "hysteresis/0.9"
    assert changes[0].changed["pr_uC_cm2"][0] == 1.0
    session.refresh(m)
    assert m.results["pr_uC_cm2"] == pytest.approx(8.0, rel=0.02)
    assert reanalyse(session=session) == []
    assert session.exec(select(AuditEvent).where(AuditEvent.action == "measurement.reanalyse")).first() is not None


def test_reanalysis_reuses_form_conditions(client, session, batch, uploader):
    # Conditions typed on the form (not in the file) must survive re-analysis unchanged.
    scan = curie_weiss_scan(3.0e3, 290.0, 300.0, 4.0, t_min_K=250, t_max_K=380, step_K=1.0,
                            frequencies_Hz=(1e3,), area_cm2=0.1, thickness_um=500)
    r = post(client, batch, "dielectric", to_csv_bytes(scan), uploader, area="10 mm^2", thickness="0.5 mm",
             temperature="25 degC")
    assert r.status_code == 201, r.text
    assert r.json()["conditions"]["sources"]["area"] == "form"
    assert reanalyse(session=session) == []


def test_oversized_body_refused_while_streaming(settings, batch, uploader):
    # Content-Length over the limit: refused before the body is read.
    import dataclasses

    from fastapi.testclient import TestClient

    from server.app import create_app

    client = TestClient(create_app(dataclasses.replace(settings, max_upload_mb=0.05)))
    big = b"E (kV/cm),P (uC/cm^2)\n" + b"1.0,2.0\n" * 40000  # ~320 kB
    r = post(client, batch, "pe_loop", big, uploader)
    assert r.status_code == 413

    # Chunked (no Content-Length): counted as it streams and refused once past the limit.
    def chunks():
        yield b"--b\r\nContent-Disposition: form-data; name=\"kind\"\r\n\r\npe_loop\r\n"
        yield b"--b\r\nContent-Disposition: form-data; name=\"file\"; filename=\"x.csv\"\r\n\r\n"
        for _ in range(100):
            yield b"1.0,2.0\n" * 1000
        yield b"\r\n--b--\r\n"

    r = client.post(f"/api/v1/batches/{batch}/measurements", content=chunks(),
                    headers={**uploader, "Content-Type": "multipart/form-data; boundary=b"})
    assert r.status_code == 413
