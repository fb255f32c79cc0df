"""The upload page through an import profile: a preview that stores nothing, then the upload (SQLite and PG)."""

from __future__ import annotations

import json
from pathlib import Path

from sqlmodel import func, select

from server.models import AuditEvent, Measurement, MeasurementSeries
from server.services import import_profiles
from tests.factories import login_as, soup

CORPUS = Path(__file__).parent.parent / "data" / "exports"


def _setup(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": "CCCCCCCCOc1ccccc1", "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    spec = json.loads((CORPUS / "pe_loop_sweep_blank_lines.profile.json").read_text())
    import_profiles.create_profile(session=session, data=spec, actor="test")
    return csrf, "RVZ-00001-B01", (CORPUS / "pe_loop_sweep_blank_lines.csv").read_bytes()


def _count(session, table) -> int:
    session.expire_all()
    return session.exec(select(func.count()).select_from(table)).one()


def test_the_preview_shows_blocks_conversions_and_rows_and_stores_nothing(client, session):
    csrf, batch, raw = _setup(client, session)
    page = soup(client.get(f"/batches/{batch}/upload").text)
    assert [o["value"] for o in page.select("select[name=profile] option")] == ["", "sweep-d"]
    audits = _count(session, AuditEvent)
    r = client.post(f"/batches/{batch}/upload", data={"profile": "sweep-d", "action": "preview", "csrf_token": csrf},
                    files={"file": ("sweep.csv", raw)}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 200, r.text
    frag = soup(r.text)
    assert frag.find("html") is None  # the fragment for the preview target
    blocks = frag.select("#preview-blocks tbody tr")
    assert [tr.find_all("td")[3].text for tr in blocks] == ["300 K", "320 K", "340 K"]
    assert "Pr" in blocks[0].find_all("td")[4].text
    assert "Voltage (V) \u2192 V (V)" in [li.text for li in frag.select("ul.conversions li")]
    assert [th.text for th in frag.select("#preview-rows th")] == ["V_V", "Q_uC"]
    assert frag.find("script", attrs={"type": "application/json"}) is not None  # the plot
    assert _count(session, Measurement) == 0 and _count(session, AuditEvent) == audits


def test_a_preview_error_is_shown_and_the_upload_stores_every_block(client, session):
    csrf, batch, raw = _setup(client, session)
    r = client.post(f"/batches/{batch}/upload", data={"profile": "sweep-d", "action": "preview", "csrf_token": csrf},
                    files={"file": ("bad.csv", b"Voltage (V),Charge (nC)\n1,x\n")})
    assert r.status_code == 422
    assert "line 2" in soup(r.text).select_one("#preview [role=alert]").text
    r = client.post(f"/batches/{batch}/upload", data={"profile": "sweep-d", "action": "upload", "csrf_token": csrf},
                    files={"file": ("sweep.csv", raw)}, follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"].startswith("/samples/")
    assert _count(session, Measurement) == 3 and _count(session, MeasurementSeries) == 1


def test_a_multi_block_file_becomes_a_series_of_a_sample_described_inline(client, session):
    """The upload form's "a new sample" with a profiled three-block file: the sample, its three measurements
    and the series are stored in one transaction; a refused file, a bad sample field or a missing CSRF
    token leave nothing behind, and the error names the field."""
    from server.models import Sample

    csrf, batch, raw = _setup(client, session)
    fields = {"profile": "sweep-d", "action": "upload", "csrf_token": csrf, "sample": "new", "new_form": "film",
              "new_thickness": "150 um", "new_electrode_area": "7.85 mm^2", "new_electrode": "gold, sputtered"}

    def nothing_stored() -> bool:
        return (_count(session, Sample), _count(session, Measurement), _count(session, MeasurementSeries)) == (0, 0, 0)

    r = client.post(f"/batches/{batch}/upload", data=fields, files={"file": ("bad.csv", raw.replace(b"1", b"x", 40))})
    assert r.status_code == 422 and "line " in soup(r.text).find(role="alert").text
    assert nothing_stored()
    r = client.post(f"/batches/{batch}/upload", data={**fields, "new_thickness": "-3 um"},
                    files={"file": ("sweep.csv", raw)})
    assert r.status_code == 422 and "thickness" in soup(r.text).find(role="alert").text
    assert nothing_stored()
    r = client.post(f"/batches/{batch}/upload", data={**fields, "csrf_token": "forged"},
                    files={"file": ("sweep.csv", raw)}, follow_redirects=False)
    assert r.status_code == 403
    assert nothing_stored()

    r = client.post(f"/batches/{batch}/upload", data=fields, files={"file": ("sweep.csv", raw)},
                    follow_redirects=False)
    assert r.status_code == 303, r.text
    session.expire_all()
    sample = session.exec(select(Sample).where(Sample.is_default == False)).one()  # noqa: E712
    assert r.headers["location"] == f"/samples/{sample.code}"
    assert sample.form == "film" and sample.electrode == "gold, sputtered" and abs(sample.thickness_um - 150) < 1e-9
    series = session.exec(select(MeasurementSeries)).one()
    assert series.sample_id == sample.id
    assert {m.sample_id for m in session.exec(select(Measurement)).all()} == {sample.id}
    assert _count(session, Measurement) == 3
