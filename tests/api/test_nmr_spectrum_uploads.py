"""NMR spectra (JCAMP-DX) through the API and the batch page (SQLite and PostgreSQL).

The compound is the invented hexamethoxybenzene C12H18O6 of tests/api/test_measurements.py: its 18 H are one
environment by symmetry (six equivalent OCH3, checked by hand), so a spectrum of one singlet is "as expected".
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from sqlmodel import select

from server.models import Measurement, RawFile
from server.synth.nmr_spectrum import Signal, jcamp_file, signals_for, spectrum
from tests.api.test_measurements import batch, post, uploader  # noqa: F401 - fixtures
from tests.factories import bearer, login_as, make_token, soup

SMILES = "COc1c(OC)c(OC)c(OC)c(OC)c1OC"


def _jdx(**kw) -> bytes:
    ppm, y = spectrum(signals_for(SMILES) + [Signal(7.26, 0.5), Signal(0.0, 1.0)], rng=np.random.default_rng(4),
                      mhz=500.13)
    return jcamp_file(ppm, y, mhz=500.13, solvent="CDCl3", t_K=300.0, title="hexamethoxybenzene", **kw)


def test_upload_reads_conditions_from_the_file_and_finds_the_singlet(client, batch, uploader):  # noqa: F811
    r = post(client, batch, "nmr_spectrum", _jdx(crlf=True, comments=["export"]), uploader, filename="b01.jdx")
    assert r.status_code == 201, r.text
    body = r.json()
    c = body["conditions"]
    assert (c["nucleus"], c["solvent"], c["spectrometer_MHz"], c["temperature_K"]) == ("1H", "CDCl3", 500.13, 300.0)
    res = body["results"]
    sample = [s for s in res["signals"] if not s["assigned"]]
    assert len(sample) == 1 and sample[0]["shift_ppm"] == pytest.approx(3.946, abs=0.005)
    assert sample[0]["n_H"] == pytest.approx(18.0)  # the only signal holds all 18 H
    assert (res["signals_found"], res["environments_expected"], res["environments_check"]) == (1, 1, "as expected")


def test_the_form_wins_over_the_file(client, batch, uploader):  # noqa: F811
    r = post(client, batch, "nmr_spectrum", _jdx(), uploader, filename="b01.jdx", solvent="C6D6",
             temperature="310 K")
    assert r.status_code == 201, r.text
    assert r.json()["conditions"]["solvent"] == "C6D6" and r.json()["conditions"]["temperature_K"] == 310.0


def test_bad_files_answer_422_naming_line_or_form_and_store_nothing(client, session, batch, uploader):  # noqa: F811
    raw = _jdx().decode()
    lines = raw.split("\n")
    at = next(i for i, line in enumerate(lines) if line.startswith("##XYDATA")) + 3
    lines[at] = lines[at][:12] + "?" + lines[at][12:]
    r = post(client, batch, "nmr_spectrum", "\n".join(lines).encode(), uploader, filename="bad.jdx")
    assert r.status_code == 422 and r.json()["line"] == at + 1, r.text  # lines count from 1
    r = post(client, batch, "nmr_spectrum", b"##TITLE= t\n##JCAMP-DX= 5.01\n##NTUPLES= NMR SPECTRUM\n##END=\n",
             uploader, filename="fid.jdx")
    assert r.status_code == 422 and "NTUPLES" in r.json()["detail"]
    r = post(client, batch, "nmr_spectrum", b"##TITLE= t\n##XYDATA= (XY..XY)\n1 2\n##END=\n", uploader)
    assert r.status_code == 422 and "(XY..XY)" in r.json()["detail"]
    assert session.exec(select(Measurement)).all() == [] and session.exec(select(RawFile)).all() == []


def test_identity_summary_si_line_and_batch_page(client, session, batch, uploader):  # noqa: F811
    assert post(client, batch, "nmr_spectrum", _jdx(), uploader, filename="b01.jdx").status_code == 201
    got = client.get(f"/api/v1/batches/{batch}/identity", headers=uploader).json()
    assert got["status"] == "NMR spectrum only"
    ev = got["evidence"]["nmr_spectrum"]
    assert (ev["signals_found"], ev["environments_expected"], ev["solvent"]) == (1, 1, "CDCl3")
    # the model's 3.946 ppm, found within the 0.0009 ppm point spacing: printed 3.94 or 3.95; one line: a singlet
    assert re.search(r"1H NMR \(500 MHz, CDCl3, 300 K\): δ 3\.9[45] \(s, 18H\)\.", got["si_text"]), got["si_text"]
    assert "<sup>1</sup>H NMR (500 MHz, CDCl<sub>3</sub>, 300 K)" in got["si_markdown"]
    login_as(client, session, role="member")
    page = soup(client.get(f"/batches/{batch}").text)
    row = page.select_one("#identity-evidence tr[data-kind=nmr_spectrum]")
    assert row is not None and "1 signals" in row.text and "1 environments" in row.text
    # the listing states the digital resolution its J digits rest on: 13 ppm x 500.13 MHz / 32767 = 0.198 Hz
    note = page.select_one("#si-nmr-note").text
    assert note == got["si_nmr_note"] and "0.2 Hz per point (32768 points)" in note and "to 0.1 Hz" in note


def test_an_embargoed_compound_shows_no_expected_count(client, session, uploader):  # noqa: F811
    writer = bearer(make_token(session, scope="write", name="registrar"))
    client.post("/api/v1/compounds", json={"smiles": SMILES, "embargoed": True}, headers=writer)
    code = client.post("/api/v1/compounds/RVZ-00001/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    assert post(client, code, "nmr_spectrum", _jdx(), uploader, filename="b01.jdx").status_code == 201
    ev = client.get(f"/api/v1/batches/{code}/identity", headers=uploader).json()["evidence"]["nmr_spectrum"]
    assert ev["signals_found"] == 1 and "environments_expected" not in ev and "environments_check" not in ev
