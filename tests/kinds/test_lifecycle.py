"""Archive, restore and re-analysis of every kind go through one path that refreshes every derived row.

For each kind, a compound with one example file of every kind is snapshotted (verdict,
CompoundStats, barriers, crystal phases and the registry filters a chemist uses); archiving
that kind's measurement must change what depends on it, and restoring and re-analysing must
bring back exactly the snapshot. Runs on SQLite and PostgreSQL.
"""

from __future__ import annotations

import pytest
from sqlmodel import select

from server.kinds import KINDS
from server.kinds.base import EXAMPLE_SMILES
from server.models import BarrierEstimate, Compound, CompoundStats, CrystalPhase, Measurement
from server.services.measurements import reanalyse
from tests.factories import bearer, make_token

FILTERS = ("polar=yes", "polar=no", "polar=unknown", "barrier_min=15", "barrier_max=15",
           *(f"has={k}" for k in KINDS), "verdict=untested", "verdict=switching_phase_unknown")


@pytest.fixture
def world(client, session):
    """One compound (the example bowl) with each kind's example file uploaded, and a writer token."""
    writer = bearer(make_token(session, scope="write", name="lifecycle"))
    r = client.post("/api/v1/compounds", json={"smiles": EXAMPLE_SMILES, "label": "example bowl"}, headers=writer)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    ids = {}
    for kind in KINDS.values():
        ex = kind.example()
        r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind.name},
                        files={"file": (ex.filename, ex.raw, "text/plain")}, headers=writer)
        assert r.status_code == 201, r.text
        ids[kind.name] = r.json()["id"]
    return {"code": code, "h": writer, "ids": ids}


def snapshot(client, session, world) -> dict:
    session.expire_all()
    compound = session.exec(select(Compound).where(Compound.code == world["code"])).one()
    stats = session.get(CompoundStats, compound.id).model_dump(exclude={"last_activity_at"})
    barriers = [(b["id"], b["method"], b["dg_kcal_mol"], b["measurement"]) for b in
                client.get(f"/api/v1/compounds/{world['code']}/barriers", headers=world["h"]).json()["items"]]
    phases = [(p.id, p.measurement_id, p.space_group, p.polar, p.archived) for p in
              session.exec(select(CrystalPhase).where(CrystalPhase.compound_id == compound.id)
                           .order_by(CrystalPhase.id))]
    matches = {}
    for f in FILTERS:
        r = client.get(f"/api/v1/compounds?{f}", headers=world["h"])
        assert r.status_code == 200, (f, r.text)
        matches[f] = world["code"] in [c["code"] for c in r.json()["items"]]
    return {"verdict_code": compound.verdict_code, "verdict": compound.verdict, "stats": stats,
            "barriers": barriers, "phases": phases, "matches": matches}


@pytest.mark.parametrize("kind", list(KINDS))
def test_archive_restore_reanalyse_leaves_everything_as_before(client, session, world, kind):
    before = snapshot(client, session, world)
    mid = world["ids"][kind]
    r = client.post(f"/api/v1/measurements/{mid}/archive", headers=world["h"])
    assert r.status_code == 200 and r.json()["archived"] is True
    archived = snapshot(client, session, world)
    # What hangs on this measurement is gone while it is archived.
    assert archived["matches"][f"has={kind}"] is False and before["matches"][f"has={kind}"] is True
    assert f",{kind}," not in archived["stats"]["kinds"]
    assert archived["stats"]["n_measurements"] == before["stats"]["n_measurements"] - 1

    r = client.post(f"/api/v1/measurements/{mid}/restore", headers=world["h"])
    assert r.status_code == 200 and r.json()["archived"] is False
    assert snapshot(client, session, world) == before
    changes = reanalyse(session=session, kind=kind, actor="test")
    assert [c.error for c in changes] == [None] * len(changes)
    assert snapshot(client, session, world) == before


def test_archiving_a_structure_or_a_rate_table_takes_its_derived_rows_with_it(client, session, world):
    """Regression: the verdict was reset, but the polar-phase filter still matched and the archived
    barrier still counted as measured."""
    before = snapshot(client, session, world)
    assert before["matches"]["polar=yes"] and before["stats"]["polar_phase"] is True
    assert before["matches"]["barrier_min=15"] and before["stats"]["barrier_measured_kcal_mol"] is not None

    client.post(f"/api/v1/measurements/{world['ids']['crystal']}/archive", headers=world["h"])
    after = snapshot(client, session, world)
    assert after["matches"]["polar=yes"] is False and after["matches"]["polar=unknown"] is True
    assert after["stats"]["polar_phase"] is None and after["stats"]["space_groups"] == ""
    assert [p[-1] for p in after["phases"]] == [True]  # kept, archived with its measurement

    client.post(f"/api/v1/measurements/{world['ids']['nmr_rates']}/archive", headers=world["h"])
    after = snapshot(client, session, world)
    assert after["barriers"] == []
    assert after["stats"]["barrier_measured_kcal_mol"] is None
    assert after["matches"]["barrier_min=15"] is False
    row = session.exec(select(BarrierEstimate).where(BarrierEstimate.measurement_id == world["ids"]["nmr_rates"])).one()
    assert row.archived is True


def test_reanalysis_rewrites_the_derived_rows(client, session, world):
    """Regression: re-analysis stored new results but left the barrier and the crystal phase as they were."""
    before = snapshot(client, session, world)
    # Results as an older analysis might have left them, with derived rows to match.
    rates = session.get(Measurement, world["ids"]["nmr_rates"])
    rates.results = {**rates.results, "dg298_kcal_mol": 12.0}
    rates.analysis_version = "kinetics/0.1"
    structure = session.get(Measurement, world["ids"]["crystal"])
    structure.results = {**structure.results, "polar": False, "space_group": "P-1"}
    session.add_all([rates, structure])
    for row in session.exec(select(BarrierEstimate).where(BarrierEstimate.measurement_id == rates.id)):
        row.dg_kcal_mol = 12.0
        session.add(row)
    for row in session.exec(select(CrystalPhase).where(CrystalPhase.measurement_id == structure.id)):
        row.polar, row.space_group = False, "P-1"
        session.add(row)
    session.commit()

    moved = {c.measurement_id for c in reanalyse(session=session, actor="test")}
    assert {rates.id, structure.id} <= moved
    after = snapshot(client, session, world)
    assert after["barriers"] == before["barriers"] and after["phases"] == before["phases"]
    assert after["stats"] == before["stats"] and after["matches"] == before["matches"]
