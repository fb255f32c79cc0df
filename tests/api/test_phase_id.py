"""Phase identification through the API (SQLite and PostgreSQL): a powder pattern is compared with the
CIFs registered for its compound, and only with that compound's live ones."""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.models import Measurement, RawFile
from server.kinds.base import EXAMPLE_SMILES
from server.kinds.pxrd import example_structure
from server.synth.cif import bowl_crystal
from server.synth.pxrd import powder_pattern
from tests.api.test_measurements import post, uploader  # noqa: F401 - fixtures
from tests.factories import bearer, make_token


@pytest.fixture
def bowl_batch(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    r = client.post("/api/v1/compounds", json={"smiles": EXAMPLE_SMILES}, headers=writer)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    return client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]


def _pattern(cifs, seed=1, shift=0.05) -> bytes:
    frame = powder_pattern(cifs, rng=np.random.default_rng(seed), zero_shift_deg=shift)
    return to_csv_bytes(frame, {"temperature": "295 K", "wavelength": "Cu Ka1"})


def test_pattern_is_compared_with_the_compounds_cif(client, bowl_batch, uploader):  # noqa: F811
    own = example_structure()
    none = post(client, bowl_batch, "pxrd", _pattern([(own, 1.0)], seed=2), uploader)
    assert none.status_code == 201, none.text
    assert none.json()["results"]["reference"] is None
    assert [f["code"] for f in none.json()["flags"]] == ["no_structure"]
    cif = post(client, bowl_batch, "crystal", own, uploader, filename="form1.cif")
    assert cif.status_code == 201, cif.text
    other = bowl_crystal(EXAMPLE_SMILES, "P2_1/c", stacking_A=3.8, head_to_tail=False, seed=7).cif
    assert post(client, bowl_batch, "crystal", other, uploader, filename="form2.cif").status_code == 201
    r = post(client, bowl_batch, "pxrd", _pattern([(own, 1.0)]), uploader)
    assert r.status_code == 201, r.text
    res = r.json()["results"]
    assert res["reference"] == cif.json()["id"] and res["verdict"] == "matches"
    assert res["zero_shift_deg"] == pytest.approx(0.05, abs=0.01)
    assert [c["reference"] for c in res["candidates"]][0] == cif.json()["id"] and len(res["candidates"]) == 2
    mixed = post(client, bowl_batch, "pxrd", _pattern([(own, 1.0), (other, 0.5)], seed=3), uploader)
    assert mixed.json()["results"]["verdict"] == "extra_phase"


def test_pattern_without_wavelength_is_refused_and_nothing_stored(client, session, bowl_batch, uploader):  # noqa: F811
    frame = powder_pattern([(example_structure(), 1.0)], rng=np.random.default_rng(4))
    r = post(client, bowl_batch, "pxrd", to_csv_bytes(frame, {"temperature": "295 K"}), uploader)
    assert r.status_code == 422 and r.json()["field"] == "wavelength"
    bad = post(client, bowl_batch, "pxrd", to_csv_bytes(frame, {"wavelength": "Ag Kb"}), uploader)
    assert bad.status_code == 422 and "anode line" in bad.json()["detail"]
    assert session.exec(select(Measurement)).all() == [] and session.exec(select(RawFile)).all() == []


def test_vt_pxrd_run_places_a_phase_boundary_in_the_verdict(client, session, bowl_batch, uploader):  # noqa: F811
    # A heating run in 20 K steps (counting noise, thermal expansion) whose structure changes between 340 and
    # 360 K: the changed pattern is a changed phase (Pecharsky and Zavalij 2009), so the verdict's phase model
    # has a transition at 350 K from the PXRD run alone, and the unchanged steps count as scanned.
    # The verdict recomputes on each upload; the run is re-read from the raw files (server/services/pattern_runs.py).
    from server.models import Compound

    low = example_structure()
    high = bowl_crystal(EXAMPLE_SMILES, "P-1", stacking_A=4.2, head_to_tail=False, seed=7).cif
    for i, t in enumerate((300.0, 320.0, 340.0, 360.0, 380.0)):
        frame = powder_pattern([(low if t < 350 else high, 1.0)], rng=np.random.default_rng(20 + i),
                               lattice_strain=1e-4 * (t - 300))
        raw = to_csv_bytes(frame, {"temperature": f"{t:g} K", "wavelength": "Cu Ka1", "sweep": "heating"})
        assert post(client, bowl_batch, "pxrd", raw, uploader, filename=f"vt{i}.csv").status_code == 201
    comp = session.exec(select(Compound)).one()
    session.refresh(comp)
    v = comp.verdict
    assert v["transitions_K"] == [350.0]
    assert v["transitions"][0]["sources"] == ["pxrd"]
    assert v["code"] == "transition_only"
    # 300-340 K unchanged (scanned); the step holding the change, and above it, only bracketed
    rows = [(p["t_from_K"], p["t_to_K"], p["scanned"]) for p in v["phases"]]
    assert rows[0] == (300.0, 340.0, True) and (360.0, 380.0, True) in rows
