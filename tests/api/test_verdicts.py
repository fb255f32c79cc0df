"""Crystal uploads and the evidence-based compound verdict over the API (SQLite and PostgreSQL)."""

from __future__ import annotations

import pytest
from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS
from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.models import CrystalPhase
from server.synth.cif import bowl_crystal_cif
from server.synth.ferro import leaky_capacitor, miller_loop
from tests.factories import bearer, login_as, make_token

# The CH2-bridged parent bowl, C21H12, with H at every rim position.
PARENT = "C1c2ccc3Cc4ccc5Cc6ccc1c7c6c5c4c3c27"


@pytest.fixture
def h(client, session):
    headers = bearer(make_token(session, scope="write"))
    assert client.post("/api/v1/compounds", json={"smiles": PARENT}, headers=headers).status_code == 201
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=headers)
    return headers


def upload(client, h, kind, raw, name, **fields):
    r = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": kind, **fields},
                    files={"file": (name, raw)}, headers=h)
    assert r.status_code == 201, r.text
    return r.json()


def verdict(client, h):
    return client.get("/api/v1/compounds/RVZ-00001", headers=h).json()


def test_untested_then_switching_then_proven(client, session, h):
    assert verdict(client, h)["verdict"] == "untested"
    upload(client, h, "pe_loop", to_csv_bytes(miller_loop(10, 8, 50, 300)), "loop.csv", temperature="300 K")
    # a loop alone is the weaker class (Scott 2008: loops can come from leakage)
    assert verdict(client, h)["verdict"] == "loop_switching_only"
    cif = bowl_crystal_cif(PARENT, "P2_1", head_to_tail=True, temperature_K=300.0)
    m = upload(client, h, "crystal", cif, "bowl.cif")
    # P2_1 is polar (one of the ten polar classes, point group 2; International Tables Vol. A).
    assert m["results"]["polar"] is True and m["verdict"] == "polar"
    assert m["results"]["column_polar"] is True
    assert verdict(client, h)["verdict"] == "loop_switching_only"
    p = upload(client, h, "pund", KINDS["pund"].example().raw, "pund.csv", temperature="300 K")
    assert p["verdict"] == "switching"
    body = verdict(client, h)
    assert body["verdict"] == "polar_switching_supported"
    used = {u["measurement_id"] for u in body["verdict_evidence"]["computed"]["used"]}
    assert m["id"] in used and len(used) == 3
    # issue 15 API keys: criteria and phases at the top of verdict_evidence
    crit = {c["name"]: c for c in body["verdict_evidence"]["criteria"]}
    assert crit["switching shown by PUND"]["state"] == "met" and crit["switching shown by PUND"]["measurements"] == [p["id"]]
    assert all(set(c) == {"name", "state", "measurements"} for c in crit.values())
    assert all(set(ph) == {"t_from_K", "t_to_K", "scanned", "identified_by"}
               for ph in body["verdict_evidence"]["phases"])
    assert "transitions_K" in body["verdict_evidence"]["computed"]
    phase = session.exec(select(CrystalPhase)).one()
    assert phase.space_group_number == 4 and phase.polar is True


def test_centrosymmetric_with_switching_is_conflicting(client, h):
    upload(client, h, "pe_loop", to_csv_bytes(miller_loop(10, 8, 50, 300)), "loop.csv", temperature="150 K")
    upload(client, h, "crystal", bowl_crystal_cif(PARENT, "P2_1/c", head_to_tail=False, temperature_K=150.0), "c.cif")
    body = verdict(client, h)
    assert body["verdict"] == "conflicting"
    assert body["verdict_evidence"]["computed"]["conflicts"]


def test_leaky_loop_and_centrosymmetric_is_nonpolar(client, h):
    upload(client, h, "pe_loop", to_csv_bytes(leaky_capacitor(10, 1, 100, frequency_Hz=100)), "leak.csv",
           temperature="150 K")
    upload(client, h, "crystal", bowl_crystal_cif(PARENT, "P-1", head_to_tail=False, temperature_K=150.0), "c.cif")
    assert verdict(client, h)["verdict"] == "nonpolar"


def test_cif_formula_mismatch_is_flagged(client, session):
    headers = bearer(make_token(session, scope="write"))
    client.post("/api/v1/compounds", json={"smiles": "c1ccc2ccccc2c1"}, headers=headers)  # naphthalene, C10H8
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=headers)
    m = upload(client, headers, "crystal", bowl_crystal_cif(PARENT, "P2_1", head_to_tail=True), "x.cif")
    assert "formula_mismatch" in {f["code"] for f in m["flags"]}


def test_unreadable_cif_is_422(client, session, h):
    r = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": "crystal"},
                    files={"file": ("x.cif", b"data_x\n_cell_length_a 5\n")}, headers=h)
    assert r.status_code == 422
    assert session.exec(select(CrystalPhase)).all() == []


def test_override_needs_admin_and_keeps_computed(client, session, h):
    upload(client, h, "pe_loop", to_csv_bytes(miller_loop(10, 8, 50, 300)), "loop.csv", temperature="300 K")
    body = {"code": "polar_switching_supported", "reason": "polar phase seen by powder SHG in the group's notebook"}
    assert client.post("/api/v1/compounds/RVZ-00001/verdict/override", json=body, headers=h).status_code == 403
    csrf = login_as(client, session, role="admin")
    r = client.post("/api/v1/compounds/RVZ-00001/verdict/override", json=body, headers={"X-CSRF-Token": csrf})
    assert r.status_code == 200, r.text
    assert r.json()["verdict"] == "polar_switching_supported"
    assert r.json()["verdict_evidence"]["computed"]["code"] == "loop_switching_only"
    assert r.json()["verdict_evidence"]["override"]["reason"].startswith("polar phase")
    bad = client.post("/api/v1/compounds/RVZ-00001/verdict/override", json={"code": "great", "reason": "x"},
                      headers={"X-CSRF-Token": csrf})
    assert bad.status_code == 422
    # The retired code (it claimed a proof) is refused with its replacement named.
    retired = client.post("/api/v1/compounds/RVZ-00001/verdict/override",
                          json={"code": "proven_ferroelectric", "reason": "x"}, headers={"X-CSRF-Token": csrf})
    assert retired.status_code == 422 and "polar_switching_supported" in retired.json()["detail"]
    assert retired.json()["field"] == "code"
    cleared = client.post("/api/v1/compounds/RVZ-00001/verdict/clear", headers={"X-CSRF-Token": csrf}).json()
    assert cleared["verdict"] == "loop_switching_only"


def test_melting_is_not_a_phase_transition(client, h):
    from server.synth.dsc import dsc_trace

    # Melting with dS far above R ln 2: the parent C21H12 (264.3 g/mol) at 420 K with 100 J/g gives
    # dS = 100 x 264.3 / 420 = 62.9 J/(mol K) (by hand), near Walden's rule, so no transition evidence.
    melt = dsc_trace([{"t_K": 420.0, "dh_J_g": 100.0, "width_K": 1.5, "kind": "melting"}], t_start_K=330,
                     t_end_K=450, rate_K_min=10, mass_mg=4.0)
    upload(client, h, "dsc", to_csv_bytes(melt), "melt.csv", mass="4 mg", rate="10 K/min")
    # melting is a phase boundary (it is listed) but no evidence of a ferroic transition
    body = verdict(client, h)
    assert body["verdict"] == "untested"
    assert body["verdict_evidence"]["computed"]["transitions"][0]["transition_class"] == "isotropisation"
    # A solid-solid peak with dS = R ln 2: 5.763 J/(mol K) x 300 K / 264.3 g/mol = 6.54 J/g (by hand).
    solid = dsc_trace([{"t_K": 300.0, "dh_J_g": 6.54, "width_K": 4.0, "kind": "gaussian"}], t_start_K=250,
                      t_end_K=350, rate_K_min=10, mass_mg=4.0)
    upload(client, h, "dsc", to_csv_bytes(solid), "solid.csv", mass="4 mg", rate="10 K/min")
    assert verdict(client, h)["verdict"] == "transition_only"
