"""Computed barrier estimates (GFN2-xTB): queue them as background jobs, store what they find.

A chemist asks for an estimate of one compound or of many; each becomes an ``xtb_estimate`` job
(see :mod:`server.jobs`). A compound that already has a queued or running estimate with the
same options is not queued again: the existing job is returned. The structure is checked
before anything is queued, so an estimate that cannot run is refused at once (422) instead of
failing later in a worker. When a job finishes, :func:`store_estimate` turns its result into a
``BarrierEstimate`` row (method ``gfn2-xtb``) in the same transaction that marks the job done.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, Optional

from rdkit import Chem
from sqlalchemy import func
from sqlmodel import Session, select

from .. import access, bounds
from ..access import Actor
from ..analysis import xtb
from ..analysis.results import jsonable
from ..chem.geometry import core_atoms
from ..errors import AnalysisError, ChemistryError, InputError, OverLimit, QuotaExceeded
from ..jobs import queue
from ..models import JOB_STATES, BarrierEstimate, Compound, Job
from . import audit, stats, verdicts
from .registry import get_scaffold

KIND = "xtb_estimate"
METHOD = "gfn2-xtb"
#: How many queued and recently ended jobs the queue summary lists.
SUMMARY_QUEUED = 20
SUMMARY_RECENT = 10


def check_estimable(smiles: str, *, truncate_side_chains: bool = True) -> str:
    """The SMILES the estimate will compute, or an InputError saying why it cannot run.

    Same checks as :func:`server.analysis.xtb.estimate_barrier` makes before its first energy:
    a readable single-fragment structure with a six-membered-ring core; with truncation, that
    the side chains can be shortened.
    """
    if truncate_side_chains:
        return xtb.truncated_smiles(smiles)
    mol = Chem.MolFromSmiles(smiles or "")
    if mol is None or not smiles:
        raise ChemistryError(f"RDKit cannot read the SMILES '{smiles}'", field="smiles")
    if len(Chem.GetMolFrags(mol)) > 1:
        raise AnalysisError("the structure has several fragments; a computed estimate needs the molecule alone",
                            field="smiles")
    if core_atoms(mol) is None:
        raise AnalysisError("the structure has no six-membered ring, so it has no bowl core to invert",
                            field="smiles")
    return Chem.MolToSmiles(mol)


def job_params(compound: Compound, truncate_side_chains: bool) -> dict[str, Any]:
    return {"compound_id": compound.id, "smiles": compound.smiles, "truncate_side_chains": bool(truncate_side_chains)}


def active_estimate(session: Session, compound: Compound, *, truncate_side_chains: bool = True) -> Optional[Job]:
    """The queued or running estimate of ``compound`` with these options, if there is one."""
    jobs = session.exec(
        select(Job).where(Job.kind == KIND, Job.compound_id == compound.id, Job.state.in_(queue.ACTIVE_STATES))
        .order_by(Job.id).execution_options(populate_existing=True)
    ).all()
    for job in jobs:
        if bool((job.params or {}).get("truncate_side_chains", True)) == bool(truncate_side_chains):
            return job
    return None


def _validate(compound: Compound, truncate_side_chains: bool) -> None:
    if compound.archived:
        raise InputError(f"{compound.code} is archived; restore it before queueing an estimate", field="compound")
    try:
        check_estimable(compound.smiles, truncate_side_chains=truncate_side_chains)
    except InputError as exc:
        raise type(exc)(f"{compound.code}: {exc.message}", field=exc.field) from exc


def _lock(session: Session, compound: Compound) -> None:
    # Serialises two requests for the same compound on PostgreSQL (no-op on SQLite, whose writers
    # are serialised anyway), so the duplicate check and the insert see the same queue.
    session.exec(select(Compound.id).where(Compound.id == compound.id).with_for_update()).one()


def check_bulk(count: int) -> None:
    """Refuse (413, limit ``bulk_estimates``) a bulk request naming more compounds than
    :data:`server.bounds.MAX_BULK_ESTIMATES`, before any of them is looked up."""
    if count > bounds.MAX_BULK_ESTIMATES:
        raise OverLimit(f"{count} compounds in one request; at most {bounds.MAX_BULK_ESTIMATES} estimates may be "
                        "queued at once: split the list", limit="bulk_estimates", value=bounds.MAX_BULK_ESTIMATES)


def active_jobs_of(session: Session, actor: str) -> int:
    """Queued and running jobs that ``actor`` (an actor label) queued."""
    return int(session.exec(select(func.count(Job.id)).where(Job.created_by == actor,
                                                             Job.state.in_(queue.ACTIVE_STATES))).one())


def _check_quota(session: Session, actor: str, new_jobs: int) -> None:
    if new_jobs <= 0:
        return
    active = active_jobs_of(session, actor)
    quota = bounds.MAX_ACTIVE_JOBS_PER_ACCOUNT
    if active + new_jobs > quota:
        raise QuotaExceeded(f"{active} of your jobs are queued or running and this request adds {new_jobs}; "
                            f"one account may have at most {quota} waiting: wait for some to finish or cancel them",
                            limit="job_quota", value=quota)


def queue_estimate(*, session: Session, compound: Compound, truncate_side_chains: bool = True, actor: str) -> Job:
    """Queue a GFN2-xTB estimate of ``compound`` (or return its queued/running one); commits."""
    return queue_estimates(session=session, compounds=[compound], truncate_side_chains=truncate_side_chains,
                           actor=actor)[0]


def queue_estimates(*, session: Session, compounds: Sequence[Compound], truncate_side_chains: bool = True,
                    actor: str) -> list[Job]:
    """Queue estimates of several compounds in one transaction, one job per compound, in order.

    Compounds with a queued or running estimate with the same options get their existing job
    (a compound listed twice gets one job). Every compound is checked before anything is
    queued: one that cannot be estimated refuses the whole request (InputError naming it), and so
    does a request past the bulk limit (413) or past the account's job quota (429).
    """
    if not compounds:
        raise InputError("choose at least one compound", field="compounds")
    check_bulk(len(compounds))
    for compound in compounds:
        _validate(compound, truncate_side_chains)
    jobs: list[Job] = []
    seen: dict[int, Job] = {}
    new: list[Compound] = []
    for compound in compounds:
        if compound.id in seen:
            jobs.append(seen[compound.id])
            continue
        _lock(session, compound)
        job = active_estimate(session, compound, truncate_side_chains=truncate_side_chains)
        if job is None:
            new.append(compound)
        seen[compound.id] = job
        jobs.append(job)
    _check_quota(session, actor, len(new))  # before anything is added: all or nothing
    for compound in new:
        seen[compound.id] = queue.add_job(session, kind=KIND, params=job_params(compound, truncate_side_chains),
                                          compound_id=compound.id, actor=actor)
    jobs = [seen[c.id] for c in compounds]
    session.commit()
    for job in seen.values():
        session.refresh(job)
    return jobs


def store_estimate(session: Session, *, job: Job, estimate_dict: dict[str, Any]) -> BarrierEstimate:
    """Add the BarrierEstimate for a finished estimate job (and its audit event) to ``session``.

    Does not commit: it runs inside :func:`server.jobs.queue.finish`, which commits it together
    with the job's change to done (so no estimate without a done job, and no done job without
    its estimate).
    """
    if job.compound_id is None:
        raise InputError(f"job {job.id} names no compound to store the estimate on", field="compound")
    missing = [k for k in ("barrier_kcal_mol", "model", "planar") if k not in estimate_dict]
    if missing:
        raise InputError(f"the estimate result lacks {', '.join(missing)}", field="result")
    results = jsonable(dict(estimate_dict))
    row = BarrierEstimate(
        compound_id=job.compound_id,
        method=METHOD,
        dg_kcal_mol=results["barrier_kcal_mol"],
        results=results,
        model=str(results["model"])[:200],
        job_id=job.id,
        analysis_version=str(results.get("version") or xtb.VERSION),
        created_by=job.created_by,
    )
    session.add(row)
    session.flush()
    audit.record(session, actor=job.created_by or f"worker:{job.worker}", action="barrier.create", entity="barrier",
                 code=str(row.id), compound_id=job.compound_id, after=audit.snapshot(row))
    compound = session.get(Compound, job.compound_id)
    stats.refresh(session, compound)
    # a planar minimum can contradict measured switching or NMR barriers (analysis/verdict.py)
    verdicts.recompute(session, compound, actor=job.created_by or f"worker:{job.worker}")
    return row


def live_compounds_of_scaffold(session: Session, scaffold_code: str) -> list[Compound]:
    """Every compound of a scaffold that is not archived, oldest first (a bulk estimate's targets)."""
    sc = get_scaffold(session, scaffold_code)
    return list(session.exec(select(Compound).where(Compound.scaffold_id == sc.id,
                                                     Compound.archived == False)  # noqa: E712
                              .order_by(Compound.number)).all())


def estimates_of(session: Session, compound: Compound) -> list[BarrierEstimate]:
    """The compound's computed estimates, oldest first (archived ones left out)."""
    return list(session.exec(
        select(BarrierEstimate).where(BarrierEstimate.compound_id == compound.id, BarrierEstimate.method == METHOD,
                                      BarrierEstimate.archived == False)  # noqa: E712
        .order_by(BarrierEstimate.id)
    ).all())


def queue_summary(session: Session, actor: Optional[Actor] = None) -> dict[str, Any]:
    """What a queue page shows: counts per state, the running jobs with progress, what waits, what ended.

    ``{"counts": {state: n for every state}, "total": n, "running": [job...], "queued": [first 20],
    "recent": [last 10 ended], "workers": [names of workers running jobs]}`` with jobs as
    :func:`server.jobs.queue.job_read` gives them, as ``actor`` may see them (``access.job_as_seen``:
    nothing computed from an embargoed structure for a caller who may not see it; ``actor`` None is
    such a caller).
    """
    withheld = access.withheld_codes(session, actor)
    counts = {state: 0 for state in JOB_STATES}
    for state, n in session.exec(select(Job.state, func.count(Job.id)).group_by(Job.state)).all():
        counts[state] = int(n)
    # populate_existing: workers change jobs behind this session's back; show what the database holds.
    fresh = {"populate_existing": True}
    running = session.exec(select(Job).where(Job.state == "running").order_by(Job.started_at, Job.id)
                           .execution_options(**fresh)).all()
    waiting = session.exec(select(Job).where(Job.state == "queued").order_by(Job.id).limit(SUMMARY_QUEUED)
                           .execution_options(**fresh)).all()
    recent = session.exec(
        select(Job).where(Job.state.in_(queue.FINAL_STATES)).order_by(Job.finished_at.desc(), Job.id.desc())
        .limit(SUMMARY_RECENT).execution_options(**fresh)
    ).all()
    return {
        "counts": counts,
        "total": sum(counts.values()),
        "running": [access.job_as_seen(j, withheld) for j in queue.jobs_read(session, running)],
        "queued": [access.job_as_seen(j, withheld) for j in queue.jobs_read(session, waiting)],
        "recent": [access.job_as_seen(j, withheld) for j in queue.jobs_read(session, recent)],
        "workers": sorted({j.worker for j in running if j.worker}),
    }
