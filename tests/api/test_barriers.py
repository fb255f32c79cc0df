"""Barrier entry over the API: coalescence, Eyring points, imported values, rate tables (SQLite and PostgreSQL)."""

from __future__ import annotations

import math

import pytest

from server.ingest.table import to_csv_bytes
from server.synth.nmr import rate_table
from tests.factories import bearer, make_token


@pytest.fixture
def writer(client, session):
    h = bearer(make_token(session, scope="write"))
    client.post("/api/v1/compounds", json={"smiles": "CN(C)C=O", "label": "rotor test"}, headers=h)
    return h


def test_coalescence_matches_gutowsky_holm_by_hand(client, writer):
    # Gutowsky and Holm, J. Chem. Phys. 25, 1228 (1956): k_c = pi dnu / sqrt(2); Eyring at Tc.
    # Tc 298.15 K, dnu 100 Hz -> k_c 222.144 1/s, dG 59.629 kJ/mol = 14.252 kcal/mol (docs/methods.md, computed).
    r = client.post("/api/v1/compounds/RVZ-00001/barriers",
                    json={"method": "coalescence", "tc_K": 298.15, "dnu_Hz": 100}, headers=writer)
    assert r.status_code == 201, r.text
    body = r.json()
    assert body["k_s"] == pytest.approx(222.144, rel=1e-5)
    assert body["dg_kcal_mol"] == pytest.approx(59.629 / 4.184, abs=0.002)
    assert body["t_K"] == 298.15 and body["measured"] is True


def test_eyring_points_recover_inputs(client, writer):
    # dH 80 kJ/mol, dS -10 J/(mol K) at 300/320/340/360 K -> k 0.022113/0.17508/1.0907/5.5632 1/s (docs/methods.md).
    pts = [[300, 0.022113], [320, 0.17508], [340, 1.0907], [360, 5.5632]]
    body = client.post("/api/v1/compounds/RVZ-00001/barriers", json={"method": "eyring", "points": pts},
                       headers=writer).json()
    assert body["dh_kcal_mol"] == pytest.approx(80 / 4.184, rel=1e-3)
    assert body["ds_cal_molK"] == pytest.approx(-10 / 4.184, abs=0.01)
    # the rate at another temperature comes from dH and dS, not dG(298 K) (Eyring 1935; issue 16)
    rate = client.get(f"/api/v1/barriers/{body['id']}/rate?t_K=360", headers=writer).json()
    assert rate["k_s"] == pytest.approx(5.5632, rel=2e-3)
    assert rate["ds_assumed_zero"] is False
    assert not {f["code"] for f in rate["flags"]} & {"ds_assumed_zero", "electronic_energy"}


def test_imported_and_listing_and_rates(client, writer):
    r = client.post("/api/v1/compounds/RVZ-00001/barriers",
                    json={"method": "imported", "dg_kcal_mol": 10.8, "level_of_theory": "DLPNO-CCSD(T)/def2-TZVP"},
                    headers=writer)
    assert r.status_code == 201
    bid = r.json()["id"]
    listed = client.get("/api/v1/compounds/RVZ-00001/barriers", headers=writer).json()
    assert listed["total"] == 1 and listed["items"][0]["method"] == "imported"
    # A ring inversion of ~10.8 kcal/mol (cyclohexane; fact of the trade) inverts ~1e5 times per second at 298 K.
    rate = client.get(f"/api/v1/barriers/{bid}/rate?t_K=298.15&frequency_Hz=1000", headers=writer).json()
    assert 4.5 < math.log10(rate["k_s"]) < 5.5
    assert rate["keeps_up"] is True
    slow = client.get(f"/api/v1/barriers/{bid}/rate?t_K=150&frequency_Hz=1000", headers=writer).json()
    assert slow["keeps_up"] is False
    # an imported calculation has no dS: the answer says dS is taken as zero and that the
    # barrier is an electronic energy used as if it were dG
    assert slow["ds_assumed_zero"] is True
    assert {"ds_assumed_zero", "electronic_energy"} <= {f["code"] for f in slow["flags"]}


@pytest.mark.parametrize(
    "payload, fragment",
    [
        ({"method": "coalescence", "tc_K": 25, "dnu_Hz": 80}, "degC"),
        ({"method": "coalescence", "tc_K": 300, "dnu_Hz": 0}, "dnu"),
        ({"method": "eyring", "points": [[300, 1.0], [310, 2.0]]}, "three"),
        ({"method": "eyring", "points": [[300, 1.0], [310, -2.0], [320, 4.0]]}, "positive"),
        ({"method": "imported", "dg_kcal_mol": 250, "level_of_theory": "x"}, "kcal"),
        ({"method": "guess", "dg_kcal_mol": 5}, "method"),
    ],
)
def test_bad_barriers_are_refused(client, writer, payload, fragment):
    r = client.post("/api/v1/compounds/RVZ-00001/barriers", json=payload, headers=writer)
    assert r.status_code == 422
    assert fragment.lower() in r.json()["detail"].lower()
    assert client.get("/api/v1/compounds/RVZ-00001/barriers", headers=writer).json()["total"] == 0


def test_rate_table_upload_adds_an_eyring_barrier(client, writer):
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=writer)
    raw = to_csv_bytes(rate_table(80.0, -10.0, [300, 310, 320, 330, 340, 350], noise_rel=0.02))
    r = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": "nmr_rates"},
                    files={"file": ("rates.csv", raw)}, headers=writer)
    assert r.status_code == 201, r.text
    items = client.get("/api/v1/compounds/RVZ-00001/barriers", headers=writer).json()["items"]
    assert [i["method"] for i in items] == ["eyring"] and items[0]["measurement"] == r.json()["id"]
    assert items[0]["results"]["dh_kcal_mol"] == pytest.approx(80 / 4.184, rel=0.05)


def test_rate_table_carries_its_nmr_conditions(client, writer):
    # "# spectrometer: 500 MHz", "# nucleus: 1H", "# solvent: toluene-d8" lines in the file land on the barrier.
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=writer)
    raw = to_csv_bytes(rate_table(80.0, -10.0, [300, 310, 320, 330], noise_rel=0.02),
                       {"spectrometer": "500 MHz", "nucleus": "1H", "solvent": "toluene-d8"})
    r = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": "nmr_rates"},
                    files={"file": ("rates.csv", raw)}, headers=writer)
    assert r.status_code == 201, r.text
    item = client.get("/api/v1/compounds/RVZ-00001/barriers", headers=writer).json()["items"][0]
    assert (item["spectrometer_MHz"], item["nucleus"], item["solvent"]) == (500, "1H", "toluene-d8")


def test_coupled_coalescence_stores_nmr_conditions(client, writer):
    # Bridge CH2 protons of a bowl: an AB pair, 2J 16 Hz. Kurland, Rubin and Wise, J. Chem. Phys.
    # 40, 2426 (1964): k_c = pi sqrt(40^2 + 6 16^2)/sqrt(2) = pi 56/sqrt(2) = 124.40 1/s (by hand).
    r = client.post("/api/v1/compounds/RVZ-00001/barriers",
                    json={"method": "coalescence", "tc_K": 260, "dnu_Hz": 40, "j_Hz": 16,
                          "spectrometer_MHz": 400, "nucleus": "1H", "solvent": "CD2Cl2"}, headers=writer)
    assert r.status_code == 201
    body = r.json()
    assert body["k_s"] == pytest.approx(124.40, rel=1e-4)
    assert (body["spectrometer_MHz"], body["nucleus"], body["solvent"]) == (400, "1H", "CD2Cl2")
    listed = client.get("/api/v1/compounds/RVZ-00001/barriers", headers=writer).json()["items"][0]
    assert listed["solvent"] == "CD2Cl2" and "Kurland" in listed["model"]
    bad = client.post("/api/v1/compounds/RVZ-00001/barriers",
                      json={"method": "coalescence", "tc_K": 260, "dnu_Hz": 40, "spectrometer_MHz": -400},
                      headers=writer)
    assert bad.status_code == 422


def test_planar_computed_minimum_against_a_coalescence_barrier_is_flagged(client, session, writer):
    """Issue 15 item 4: a GFN2-xTB estimate that relaxed to planar (barrier 0.07 kcal/mol) beside a barrier
    measured by coalescence (Gutowsky and Holm, J. Chem. Phys. 25, 1228 (1956): Tc 298.15 K, dnu 100 Hz ->
    14.25 kcal/mol) is a conflict for review in the compound's verdict, raised when the barrier is entered."""
    from server.models import BarrierEstimate, Compound
    from sqlmodel import select

    compound = session.exec(select(Compound)).one()
    session.add(BarrierEstimate(compound_id=compound.id, method="gfn2-xtb", dg_kcal_mol=0.07, model="GFN2-xTB",
                                results={"barrier_kcal_mol": 0.07, "bowl_depth_A": 0.01, "planar": True}))
    session.commit()
    assert client.post("/api/v1/compounds/RVZ-00001/barriers", json={"method": "coalescence", "tc_K": 298.15,
                                                                      "dnu_Hz": 100}, headers=writer).status_code == 201
    verdict = client.get("/api/v1/compounds/RVZ-00001", headers=writer).json()["verdict_evidence"]
    [conflict] = verdict["computed"]["conflicts"]
    assert "relaxed to a planar minimum" in conflict["message"] and "14.3 kcal/mol (coalescence)" in conflict["message"]
    assert conflict["blocking"] is False
