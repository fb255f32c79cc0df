"""The DSC page's transitions table (issue 16): each heating peak with ΔH, ΔS and its cooling partner, paired
as the phase model pairs them (server/analysis/phases.pair_dsc), units as the trade prints them
(SQLite and PostgreSQL).

The file is tests.factories.heat_cool_dsc_file (server/synth/dsc.py; Hoehne, Hemminger and Flammersheim,
Differential Scanning Calorimetry, Springer 2003, ch. 5): 8 J/g at 335 K (333 K on cooling) and 60 J/g melting
from 410 K (freezing from 398 K), 5 mg at 10 K/min. Expected values are the generating ones: ΔH in kJ/mol is
dH (J/g) × M / 1000 with M of the registered molecule, ΔS = ΔH / T_peak (the analysis' own definition,
ISO 11357-1 for the peak), the hysteresis the heating minus the cooling peak temperature."""

from __future__ import annotations

import pytest
from sqlmodel import select

from server.analysis import phases
from server.kinds import KINDS
from server.models import Measurement
from tests.factories import DSC_COOLING, DSC_HEATING, heat_cool_dsc_file, login_as, soup

SMILES = "CCCCCCOc1ccc(OCCC)c(C(=O)OCC)c1"  # an invented alkoxy benzoate, C18H28O4
MOLAR_MASS_G_MOL = 308.41  # IUPAC standard atomic weights; melting dS = 60 J/g x M / 411.5 K = 45 J/(mol K)


def _lines(cell) -> dict[str, str]:
    """A cell's numbers by their line label (the first line of a label: ΔH in kJ/mol before J/g)."""
    out: dict[str, str] = {}
    for ln in cell.select(".line"):
        if ln.find(class_="num"):
            out.setdefault(ln.find(class_="line-label").text if ln.find(class_="line-label") else "",
                           ln.find(class_="num").text)
    return out


def test_transitions_table_pairs_heating_and_cooling_peaks(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    r = client.post("/batches/RVZ-00001-B01/upload", data={"kind": "dsc", "csrf_token": csrf},
                    files={"file": ("heat-cool.csv", heat_cool_dsc_file())}, follow_redirects=False)
    assert r.status_code == 303, r.text
    page = soup(client.get(r.headers["location"]).text)
    table = page.find("table", id="compact-peaks")
    heads = [th.text for th in table.thead.find_all("th")]
    assert heads == ["Transition", "T (K)", "ΔH (kJ\u202fmol⁻¹)", "ΔS (J\u202fmol⁻¹\u202fK⁻¹)", "Paired cooling peak"]
    rows = table.tbody.find_all("tr")
    assert len(rows) == 2  # both cooling peaks found their heating partner: no cooling-only rows
    for row, heat, cool in zip(rows, DSC_HEATING, DSC_COOLING):
        assert "heating, endothermic" in row.th.text
        t, dh, ds, partner = (_lines(td) for td in row.find_all("td"))
        assert float(dh[""]) == pytest.approx(heat["dh_J_g"] * MOLAR_MASS_G_MOL / 1000, rel=0.02)
        assert float(ds[""]) == pytest.approx(float(dh[""]) * 1000 / float(t["peak"]), rel=0.01)
        assert float(partner["ΔH"]) == pytest.approx(-float(dh[""]), rel=0.02)  # heat given back on cooling
        assert float(partner["peak"]) <= cool["t_K"] + 0.5 < float(t["peak"]) + 0.5
        assert float(partner["hysteresis"]) == pytest.approx(float(t["peak"]) - float(partner["peak"]), abs=0.06)
    # the melting row (|ΔS| above the 40 J/(mol K) of phases.MELTING_DS_J_MOLK) is marked so; every column is named beside its value for the phone layout
    assert "taken as melting" in rows[1].th.text and "taken as melting" not in rows[0].th.text
    assert rows[0].find("td").find(class_="cell-label").text == "T (K)"
    # the wide table of every value is still there, behind a disclosure
    assert page.find("details", id="all-peaks").find("table") is not None
    assert page.find("table", id="compact-segments") is not None


def test_the_page_pairs_as_the_phase_model_does(client, session):
    """The cooling partner the page shows is the one the verdict's phase model uses (one pairing, one home)."""
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    client.post("/batches/RVZ-00001-B01/upload", data={"kind": "dsc", "csrf_token": csrf},
                files={"file": ("heat-cool.csv", heat_cool_dsc_file(seed=5))})
    m = session.exec(select(Measurement)).one()
    ev = KINDS["dsc"].evidence(m.results, None).details
    model = phases.build(dsc_peaks=[phases.ThermalPeak(m.id, p["peak_K"], p["scan"], p["endothermic"], p["onset_K"],
                                                       p["ds_J_molK"]) for p in ev["peaks"]])
    [table] = [t for t in KINDS["dsc"].compact(m.results) if t.replaces == "peaks"]
    shown = [(row[1][1].value, row[4][0].value) for row in table.rows]  # (heating peak, cooling peak)
    assert shown == [(tr.t_heating_K, tr.t_cooling_K) for tr in model.transitions]


def test_a_heating_run_alone_and_no_molar_mass():
    """Without a cooling scan the partner column says so; without a molar mass ΔH is per gram."""
    results = {"peaks": [{"segment": 0, "segment_direction": "heating", "direction": "endo", "onset_K": 331.0,
                          "peak_K": 335.0, "dh_J_g": 8.0, "dh_kJ_mol": None, "ds_J_molK": None, "n_states": None}],
               "segments": [{"index": 0, "direction": "heating", "t_start_K": 300.0, "t_end_K": 430.0,
                             "rate_K_min": 10.0, "n_points": 1561, "integrated_over": "time"}]}
    [peaks, scans] = KINDS["dsc"].compact(results)
    assert peaks.columns[2] == ("ΔH", "J/g")
    [row] = peaks.rows
    assert row[2][0].value == 8.0 and [ln.label for ln in row[4]] == ["no cooling scan"]
    assert scans.replaces == "segments" and scans.rows[0][1][1].value == 430.0


def test_enthalpy_and_entropy_digits_follow_their_uncertainty(client, session):
    """ΔH and ΔS print as value ± u with the value rounded to u's last digit and u to two significant digits
    (JCGM 100:2008, 7.2.6, through server.precision.with_uncertainty), in the compact table and in the table of
    every value, where the uncertainty columns fold into their values; the stored results keep full precision."""
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    r = client.post("/batches/RVZ-00001-B01/upload", data={"kind": "dsc", "csrf_token": csrf},
                    files={"file": ("heat-cool.csv", heat_cool_dsc_file())}, follow_redirects=False)
    page = soup(client.get(r.headers["location"]).text)
    m = session.exec(select(Measurement)).one()
    heating = sorted((p for p in m.results["peaks"] if p["segment_direction"] == "heating"), key=lambda p: p["peak_K"])
    rows = page.find("table", id="compact-peaks").tbody.find_all("tr")
    for row, p in zip(rows, heating):
        _, dh_cell, ds_cell, _ = row.find_all("td")
        for cell, key, err_key in ((dh_cell, "dh_kJ_mol", "dh_err_kJ_mol"), (ds_cell, "ds_J_molK", "ds_err_J_molK")):
            line = cell.select(".line")[0]
            value, err = line.find(class_="num").text, line.find(class_="err").text
            assert p[err_key] > 0
            assert err.startswith("± ")
            err_digits = err[2:].replace(".", "").lstrip("0")
            assert len(err_digits) == 2  # two significant digits in the uncertainty
            decimals = len(err[2:].partition(".")[2])
            assert len(value.partition(".")[2]) == decimals  # the value ends on the uncertainty's last digit
            assert float(value) == pytest.approx(p[key], abs=10 ** -decimals)
    every = page.find("details", id="all-peaks").find("table")
    heads = [th.text for th in every.thead.find_all("th")]
    assert not any("uncertainty" in h for h in heads) and "ΔS (J\u202fmol⁻¹\u202fK⁻¹)" in heads
    assert every.find(class_="err") is not None
