"""Barriers and verdict on the compound page (SQLite and PostgreSQL)."""

from __future__ import annotations

import math

import pytest

from tests.factories import login_as, soup


def test_coalescence_form_and_rate_partial(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": "CN(C)C=O", "csrf_token": csrf})
    # Celsius typed as such is converted: -20 degC = 253.15 K (definition of the Celsius scale).
    r = client.post("/compounds/RVZ-00001/barriers",
                    data={"method": "coalescence", "tc": "-20 degC", "dnu": "85 Hz", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    page = soup(client.get("/compounds/RVZ-00001").text)
    row = page.select("#barriers tbody tr")[0]
    cells = [td.text.strip() for td in row.find_all("td")]
    assert cells[0] == "coalescence" and cells[2] == "253.15"
    frag = client.get("/compounds/RVZ-00001/rates?t=400+K&f=10+Hz", headers={"HX-Request": "true"})
    doc = soup(frag.text)
    assert doc.find("html") is None
    k = float(doc.select("#barriers tbody tr td")[4].text)
    # dG from Gutowsky-Holm at 253.15 K, then Eyring at 400 K: far faster than at Tc (k_c = pi 85/sqrt 2 = 188.8 1/s).
    assert k > 188.8 and math.isfinite(k)
    # a coalescence point gives dG at Tc only: the page says the rate assumes dS = 0 (issue 16)
    assert doc.select_one('#barriers tbody tr [data-flag="ds_assumed_zero"]') is not None
    bad = client.get("/compounds/RVZ-00001/rates?t=hot&f=1+kHz", headers={"HX-Request": "true"})
    assert "field 't'" in soup(bad.text).find(role="alert").text


def test_admin_override_form(client, session):
    csrf = login_as(client, session, role="admin")
    client.post("/compounds/new", data={"smiles": "CCO", "csrf_token": csrf})
    r = client.post("/compounds/RVZ-00001/verdict",
                    data={"code": "nonpolar", "reason": "centrosymmetric powder pattern", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    page = soup(client.get("/compounds/RVZ-00001").text)
    assert page.select_one("#verdict h2 span")["class"] == ["verdict-badge", "v-nonpolar"]
    assert "centrosymmetric powder pattern" in page.select_one("#verdict .warn").text


def test_member_cannot_override(client, session):
    csrf = login_as(client, session, role="member")
    client.post("/compounds/new", data={"smiles": "CCO", "csrf_token": csrf})
    r = client.post("/compounds/RVZ-00001/verdict", data={"code": "nonpolar", "reason": "x", "csrf_token": csrf})
    assert r.status_code == 403
    assert soup(client.get("/compounds/RVZ-00001").text).select_one("#verdict .warn") is None


def test_coalescence_form_takes_the_ab_coupling_and_nmr_conditions(client, session):
    # Kurland, Rubin and Wise, J. Chem. Phys. 40, 2426 (1964): with J the model is the AB pair.
    from server.models import BarrierEstimate
    from sqlmodel import select

    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": "CN(C)C=O", "csrf_token": csrf})
    r = client.post("/compounds/RVZ-00001/barriers",
                    data={"method": "coalescence", "tc": "260 K", "dnu": "40 Hz", "j": "16 Hz",
                          "spectrometer": "0.4 GHz", "nucleus": "1H", "solvent": "CD2Cl2", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    row = session.exec(select(BarrierEstimate)).one()
    assert row.spectrometer_MHz == 400.0 and row.nucleus == "1H" and row.solvent == "CD2Cl2"
    assert row.results["k_s"] == pytest.approx(124.40, rel=1e-4)  # pi 56 / sqrt 2, by hand
    cells = [td.text for td in soup(client.get("/compounds/RVZ-00001").text).select("#barriers tbody tr td")]
    assert "Kurland" in cells[3]
    assert cells[1].startswith("ΔG‡")  # a measured barrier is a free energy
    client.post("/compounds/RVZ-00001/barriers", data={"method": "imported", "dg_kcal_mol": "12.0",
                                                      "level_of_theory": "GFN2-xTB, planar-constrained",
                                                      "csrf_token": csrf})
    page = soup(client.get("/compounds/RVZ-00001").text)
    assert page.select_one('#barriers [data-energy="electronic"]').text == "ΔE‡"  # issue 16, item 10
    bad = client.post("/compounds/RVZ-00001/barriers",
                      data={"method": "coalescence", "tc": "260 K", "dnu": "40 Hz", "spectrometer": "400 K",
                            "csrf_token": csrf})
    assert bad.status_code == 422
