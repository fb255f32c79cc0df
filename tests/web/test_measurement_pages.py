"""Upload form, measurement page and the compound summary (SQLite and PostgreSQL)."""

from __future__ import annotations

import json

import pytest

from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.models import Measurement
from server.synth.ferro import miller_loop
from tests.factories import login_as, soup


def _compound_with_batch(client, csrf):
    client.post("/compounds/new", data={"smiles": "CCCCCCCCOc1ccccc1", "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    return "RVZ-00001-B01"


def _loop(t_K: float, pr: float, ec: float) -> bytes:
    return to_csv_bytes(miller_loop(1.25 * pr, pr, ec, 6 * ec), {"temperature": f"{t_K} K"})


def test_upload_form_then_measurement_page(client, session):
    csrf = login_as(client, session)
    batch = _compound_with_batch(client, csrf)
    form = soup(client.get(f"/batches/{batch}/upload").text)
    assert form.find("aside", class_="caution") is not None  # high-voltage caution
    assert {o["value"] for o in form.select("select[name=kind] option")} >= {"pe_loop", "pund", "dielectric", "dsc"}

    r = client.post(f"/batches/{batch}/upload", data={"kind": "pe_loop", "csrf_token": csrf},
                    files={"file": ("loop.csv", _loop(300, 8, 50))}, follow_redirects=False)
    assert r.status_code == 303
    page = soup(client.get(r.headers["location"]).text)
    fig = json.loads(page.find("script", attrs={"type": "application/json"}).string)
    assert fig["layout"]["xaxis"]["title"]["text"] == "E (kV/cm)"
    rows = {tr.th.text: tr.find("td").text for tr in page.select("table.results tr")}
    assert abs(float(rows["Pr"]) - 8.0) < 0.16
    assert "IEEE Std 180" in page.find("h2", string="How it was analysed").find_next("p").text
    assert page.find("a", string="Raw file")["href"].endswith("/raw")


def test_upload_errors_show_inline_and_store_nothing(client, session):
    csrf = login_as(client, session)
    batch = _compound_with_batch(client, csrf)
    r = client.post(f"/batches/{batch}/upload", data={"kind": "pe_loop", "csrf_token": csrf},
                    files={"file": ("bad.csv", b"E (kV/cm),P (uC/cm^2)\n1,x\n")},
                    headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 422
    frag = soup(r.text)
    assert frag.find("html") is None and "line 2" in frag.find(role="alert").text
    assert session.exec(select(Measurement)).all() == []


def test_viewer_cannot_upload(client, session):
    login_as(client, session, role="viewer")
    r = client.get("/batches/NONE-B01/upload")
    assert r.status_code == 403


def test_compound_page_summarises_loops_against_temperature(client, session):
    csrf = login_as(client, session)
    batch = _compound_with_batch(client, csrf)
    for t, pr, ec in ((280, 9.0, 60), (300, 8.0, 50), (320, 6.5, 38)):
        client.post(f"/batches/{batch}/upload", data={"kind": "pe_loop", "csrf_token": csrf},
                    files={"file": (f"loop{t}.csv", _loop(t, pr, ec))})
    page = soup(client.get("/compounds/RVZ-00001").text)
    assert len(page.select("#measurements tbody tr")) == 3
    fig = json.loads(page.find("script", id="summary-figure").string)
    # One heating run of one sample: one Pr line and one Ec line, named after the sample and direction.
    assert [d["name"] for d in fig["data"]] == [f"{batch}-S01 heating"] * 2
    assert fig["data"][0]["x"] == [280, 300, 320] and fig["data"][0]["mode"] == "lines+markers"
    assert fig["layout"]["xaxis2"]["title"]["text"] == "T (K)"


def test_upload_form_describes_a_new_sample_inline(client, session):
    from server.models import Sample
    from server.synth.ferro import raw_vq

    csrf = login_as(client, session)
    batch = _compound_with_batch(client, csrf)
    # A raw V/Q Miller loop (Miller et al. 1990) on 0.0785 cm² and 150 µm: Ec = 50 kV/cm only with that geometry.
    raw = to_csv_bytes(raw_vq(miller_loop(10, 8, 50, 300), 0.0785, 150.0), {"temperature": "300 K"})
    fields = {"kind": "pe_loop", "csrf_token": csrf, "sample": "new", "new_form": "pellet",
              "new_thickness": "150 um", "new_electrode_area": "7.85 mm^2", "new_electrode": "silver paste"}
    # A bad file: refused, and the sample described with it is not stored either.
    bad = client.post(f"/batches/{batch}/upload", data=fields, files={"file": ("bad.csv", b"E (kV/cm),P (uC/cm^2)\n1,x\n")})
    assert bad.status_code == 422
    assert session.exec(select(Sample)).all() == []
    bad = client.post(f"/batches/{batch}/upload", data={**fields, "new_thickness": "0 um"},
                      files={"file": ("loop.csv", raw)})
    assert bad.status_code == 422 and "greater than zero" in soup(bad.text).find(role="alert").text
    assert session.exec(select(Sample)).all() == [] and session.exec(select(Measurement)).all() == []

    r = client.post(f"/batches/{batch}/upload", data=fields, files={"file": ("loop.csv", raw)}, follow_redirects=False)
    assert r.status_code == 303, r.text
    page = soup(client.get(r.headers["location"]).text)
    assert page.select_one("h1 .sub a[href^='/samples/']").text == f"{batch}-S01"
    ec_row = next(tr for tr in page.select("table.results tr") if tr.th and tr.th.text == "Ec")
    assert float(ec_row.td.text) == pytest.approx(50.0, rel=0.03)  # geometry from the new sample
    sample_page = soup(client.get(f"/samples/{batch}-S01").text)
    assert len(sample_page.select("#history tbody tr")) == 1
    form_page = soup(client.get(f"/batches/{batch}/upload").text)
    assert f"{batch}-S01" in [o["value"] for o in form_page.select("#sample-choice option")]


def test_ellipse_shows_apparent_pr_and_no_ps(client, session):
    # A lossy linear dielectric draws an ellipse (Scott, J. Phys.: Condens. Matter 20, 021001
    # (2008)): its Pr and Ec are apparent, and it has no Ps; the page says so (issue 16).
    from server.synth.ferro import leaky_capacitor

    csrf = login_as(client, session)
    batch = _compound_with_batch(client, csrf)
    frame = leaky_capacitor(10, 1, 100, frequency_Hz=1000).drop(columns=["t (s)"])
    r = client.post(f"/batches/{batch}/upload", data={"kind": "pe_loop", "csrf_token": csrf},
                    files={"file": ("ellipse.csv", to_csv_bytes(frame, {"temperature": "300 K"}))},
                    follow_redirects=False)
    assert r.status_code == 303
    page = soup(client.get(r.headers["location"]).text)
    rows = {tr.th.text: tr.find("td").text for tr in page.select("table.results tr")}
    assert "apparent Pr" in rows and "apparent Ec" in rows and "Pr" not in rows
    assert "Ps" not in rows and "squareness" not in rows  # undefined: not shown
    listing = soup(client.get("/compounds/RVZ-00001").text).select_one("#measurements tbody tr")
    assert "apparent Pr" in listing.get_text(" ")
