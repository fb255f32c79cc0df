"""Computed estimates as jobs (server/services/estimates.py, server/jobs/handlers.py).

Reference facts:

* Triphenylene (C18H12) and benzene are planar aromatic hydrocarbons (textbook fact): they
  have no bowl, so the estimate must report ``planar`` and a barrier of exactly 0 (the xtb
  module defines the barrier of a planar minimum as 0; independent of the energies).
  That GFN2-xTB's optimisation indeed ends flat (depth < 0.05 A) is a regression check of
  tblite's GFN2-xTB, not a literature value.
* CH2-bridged C21 bowl: used only as a molecule slow enough to cancel mid-computation.
"""

from __future__ import annotations

import threading
import time

import pytest
from rdkit import Chem
from rdkit.Chem.rdMolDescriptors import CalcMolFormula
from sqlmodel import Session, select

from server.analysis import xtb
from server.errors import AnalysisError, ChemistryError, InputError
from server.jobs import queue
from server.jobs.handlers import HANDLERS, XTB_ESTIMATE
from server.jobs.worker import Worker
from server.models import AuditEvent, BarrierEstimate, Job
from server.services import estimates

from . import make_compound

TRIPHENYLENE = "c1ccc2c(c1)c1ccccc1c1ccccc21"
CH2_BOWL = "C1c2ccc3Cc4ccc5Cc6ccc1c7c2c3c4c5c67"
HEXA_DODECYLOXY_TRIPHENYLENE = "CCCCCCCCCCCCOc1cc2c3cc(OCCCCCCCCCCCC)c(OCCCCCCCCCCCC)cc3c3cc(OCCCCCCCCCCCC)c(OCCCCCCCCCCCC)cc3c2cc1OCCCCCCCCCCCC"


@pytest.fixture
def engine(db_url, engine_for):
    return engine_for(db_url)


@pytest.fixture
def db(engine):
    with Session(engine) as s:
        yield s


def _get(engine, job_id) -> Job:
    with Session(engine) as s:
        return s.get(Job, job_id)


def test_planar_triphenylene_estimate_end_to_end(db, engine):
    compound = make_compound(db, TRIPHENYLENE)
    job = estimates.queue_estimate(session=db, compound=compound, actor="user:ana")
    assert job.kind == XTB_ESTIMATE and job.state == "queued"
    assert job.params == {"compound_id": compound.id, "smiles": compound.smiles, "truncate_side_chains": True}
    worker = Worker(engine, name="w1", handlers=HANDLERS)
    assert worker.run_once() is True
    row = _get(engine, job.id)
    assert row.state == "done", row.error
    assert row.progress == 1.0
    # Planar aromatic: no bowl, barrier 0 (textbook fact; see the module docstring).
    assert row.result["planar"] is True and row.result["barrier_kcal_mol"] == 0.0
    assert row.result["bowl_depth_A"] < 0.05  # GFN2-xTB regression: the optimised minimum stays flat
    assert {"barrier_kcal_mol", "bowl_depth_A", "dipole_D", "model", "estimate_id"} <= set(row.result)
    with Session(engine) as s:
        est = s.exec(select(BarrierEstimate).where(BarrierEstimate.job_id == job.id)).one()
        assert est.id == row.result["estimate_id"]
        assert (est.compound_id, est.method, est.dg_kcal_mol) == (compound.id, "gfn2-xtb", 0.0)
        assert est.results["planar"] is True and est.results["atoms"] == 30  # C18H12
        assert est.model == row.result["model"] and "planar-core" in est.model
        assert est.analysis_version == xtb.VERSION and est.created_by == "user:ana"
        assert s.exec(select(AuditEvent).where(AuditEvent.action == "barrier.create",
                                               AuditEvent.entity_code == str(est.id))).one()
        assert estimates.estimates_of(s, compound)[0].id == est.id


def test_cancel_a_running_xtb_estimate(db, engine):
    compound = make_compound(db, CH2_BOWL)
    job = estimates.queue_estimate(session=db, compound=compound, actor="user:ana")
    worker = Worker(engine, name="w1", handlers=HANDLERS)
    t = threading.Thread(target=worker.run_once, daemon=True)
    t.start()
    deadline = time.monotonic() + 30
    while _get(engine, job.id).state != "running" and time.monotonic() < deadline:
        time.sleep(0.05)
    queue.cancel(db, job.id, actor="user:ana")
    t.join(30)
    assert not t.is_alive()
    row = _get(engine, job.id)
    assert row.state == "cancelled" and row.result is None
    with Session(engine) as s:
        assert s.exec(select(BarrierEstimate)).all() == []


def test_a_queued_or_running_estimate_is_not_queued_again(db, engine):
    compound = make_compound(db, TRIPHENYLENE)
    first = estimates.queue_estimate(session=db, compound=compound, actor="user:ana")
    again = estimates.queue_estimate(session=db, compound=compound, actor="user:ben")
    assert again.id == first.id
    full = estimates.queue_estimate(session=db, compound=compound, truncate_side_chains=False, actor="user:ana")
    assert full.id != first.id and full.params["truncate_side_chains"] is False
    queue.claim(engine, worker="w1")  # the first is running now: still a duplicate
    assert estimates.queue_estimate(session=db, compound=compound, actor="user:ana").id == first.id
    queue.finish(engine, first.id, result={}, worker="w1")
    fresh = estimates.queue_estimate(session=db, compound=compound, actor="user:ana")
    assert fresh.id not in (first.id, full.id)  # after it ended, a new estimate may be asked for


def test_queue_estimates_in_one_go(db, engine):
    a = make_compound(db, TRIPHENYLENE)
    b = make_compound(db, CH2_BOWL)
    existing = estimates.queue_estimate(session=db, compound=b, actor="user:ana")
    jobs = estimates.queue_estimates(session=db, compounds=[a, b, a], actor="user:ana")
    assert [j.compound_id for j in jobs] == [a.id, b.id, a.id]
    assert jobs[1].id == existing.id and jobs[0].id == jobs[2].id
    assert len(db.exec(select(Job)).all()) == 2


def test_a_bad_compound_refuses_the_whole_request(db):
    good = make_compound(db, TRIPHENYLENE)
    no_ring = make_compound(db, "CCCCO")
    with pytest.raises(AnalysisError, match="RMX-0002.*no six-membered ring"):
        estimates.queue_estimates(session=db, compounds=[good, no_ring], actor="user:ana")
    assert db.exec(select(Job)).all() == []  # nothing half-queued
    archived = make_compound(db, CH2_BOWL, archived=True)
    with pytest.raises(InputError, match="archived"):
        estimates.queue_estimate(session=db, compound=archived, actor="user:ana")
    with pytest.raises(InputError, match="at least one"):
        estimates.queue_estimates(session=db, compounds=[], actor="user:ana")


def test_check_estimable():
    # Twelve-carbon chains are shortened to OMe for the computation (common practice):
    # 2,3,6,7,10,11-hexamethoxytriphenylene is C18H6(OCH3)6 = C24H24O6.
    assert CalcMolFormula(Chem.MolFromSmiles(estimates.check_estimable(HEXA_DODECYLOXY_TRIPHENYLENE))) == "C24H24O6"
    assert "CCCCCCCCCCCC" in estimates.check_estimable(HEXA_DODECYLOXY_TRIPHENYLENE, truncate_side_chains=False)
    with pytest.raises(ChemistryError):
        estimates.check_estimable("C1CC", truncate_side_chains=False)
    with pytest.raises(AnalysisError, match="fragments"):
        estimates.check_estimable("c1ccccc1.[Na+].[Cl-]", truncate_side_chains=False)


def test_a_job_without_a_smiles_fails_with_a_message(db, engine):
    job = queue.enqueue(db, kind=XTB_ESTIMATE, params={"compound_id": None}, actor="user:ana")
    Worker(engine, name="w1", handlers=HANDLERS).run_once()
    row = _get(engine, job.id)
    assert row.state == "failed" and row.error == "field 'smiles': the estimate job has no SMILES to compute"


def test_store_estimate_needs_a_compound_and_the_contract_keys(db):
    job = queue.enqueue(db, kind=XTB_ESTIMATE, params={}, actor="user:ana")
    with pytest.raises(InputError, match="names no compound"):
        estimates.store_estimate(db, job=job, estimate_dict={"barrier_kcal_mol": 1.0, "model": "m", "planar": False})
    compound = make_compound(db, TRIPHENYLENE)
    job.compound_id = compound.id
    with pytest.raises(InputError, match="lacks model, planar"):
        estimates.store_estimate(db, job=job, estimate_dict={"barrier_kcal_mol": 1.0})


def test_queue_summary(db, engine):
    a = make_compound(db, TRIPHENYLENE)
    b = make_compound(db, CH2_BOWL)
    ja, jb = estimates.queue_estimates(session=db, compounds=[a, b], actor="user:ana")
    queue.claim(engine, worker="w1")
    queue.heartbeat(engine, ja.id, progress=0.4, message="bowl optimisation", worker="w1")
    summary = estimates.queue_summary(db)
    assert summary["counts"] == {"queued": 1, "running": 1, "done": 0, "failed": 0, "cancelled": 0}
    assert summary["total"] == 2 and summary["workers"] == ["w1"]
    (running,) = summary["running"]
    assert (running["id"], running["compound"], running["progress"], running["message"]) == (
        ja.id, a.code, 0.4, "bowl optimisation")
    assert [j["id"] for j in summary["queued"]] == [jb.id]
    queue.fail(engine, ja.id, error="boom", worker="w1")
    summary = estimates.queue_summary(db)
    assert summary["counts"]["failed"] == 1 and summary["running"] == []
    assert summary["recent"][0]["id"] == ja.id and summary["recent"][0]["error"] == "boom"
