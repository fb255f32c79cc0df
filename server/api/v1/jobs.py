"""Computed estimates as background jobs, and the job queue."""

from __future__ import annotations

from typing import Any, Optional

from fastapi import APIRouter, Query
from pydantic import BaseModel, Field

from ... import access
from ...deps import Offset, Reader, RowId, SessionDep, Writer
from ...errors import InputError
from ...jobs import queue
from ...services import accounts, estimates, registry
from .responses import AUTH_ERRORS, INPUT_ERRORS, LIMIT_ERRORS, NOT_FOUND, QUOTA_ERRORS

router = APIRouter(tags=["estimates and jobs"])


class EstimateIn(BaseModel):
    truncate_side_chains: bool = Field(True, description="replace side chains by methyl (OMe/SMe/Me) for speed")


class BulkEstimateIn(EstimateIn):
    compounds: Optional[list[str]] = Field(None, description="compound codes")
    scaffold: Optional[str] = Field(None, description="every live compound of this scaffold")


class JobRead(BaseModel):
    """A job as ``server.jobs.queue.job_read`` gives it (times ISO 8601 UTC)."""

    id: int
    kind: str
    state: str = Field(description="queued, running, done, failed or cancelled")
    progress: float = Field(description="0 to 1")
    message: str
    result: Optional[dict[str, Any]] = Field(description="the estimate keys when done")
    error: Optional[str]
    compound: Optional[str] = Field(description="the compound's code")
    options: dict[str, Any]
    attempts: int
    cancel_requested: bool
    created_by: str
    created_at: Optional[str]
    started_at: Optional[str]
    heartbeat_at: Optional[str]
    finished_at: Optional[str]
    worker: Optional[str]


class QueuedJobRead(JobRead):
    """A job just queued; ``job`` is its id, the one to poll at ``/api/v1/jobs/{job}``."""

    job: int


class JobPage(BaseModel):
    items: list[JobRead]
    total: int


class JobSummaryRead(BaseModel):
    """What the queue page shows."""

    counts: dict[str, int] = Field(description="jobs per state, every state named")
    total: int
    running: list[JobRead]
    queued: list[JobRead] = Field(description="the first to run")
    recent: list[JobRead] = Field(description="the last to end")
    workers: list[str] = Field(description="the workers running jobs")


def _visible_job(job: dict[str, Any], actor, withheld: frozenset[str]) -> dict[str, Any]:  # noqa: ANN001
    """A job as ``actor`` may see it: nothing computed from an embargoed structure it may not see
    (``access.job_as_seen``), and for callers who may not see embargoed structures no ``smiles_used``
    at all (the truncated structure of any compound), as before."""
    job = access.job_as_seen(job, withheld)
    if not access.sees_embargoed(actor) and isinstance(job.get("result"), dict):
        job = {**job, "result": {k: v for k, v in job["result"].items() if k != "smiles_used"}}
    return accounts.hide_people(job, sees_people=actor.sees_people)


@router.post("/compounds/{code}/estimates", status_code=202,
             response_model=QueuedJobRead, responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS, **QUOTA_ERRORS})
def queue_estimate(code: str, session: SessionDep, actor: Writer, data: Optional[EstimateIn] = None) -> dict[str, Any]:
    """Queue a GFN2-xTB estimate of the barrier, bowl depth and dipole; answers the job to poll."""
    data = data or EstimateIn()
    compound = registry.get_compound(session, code)
    job = estimates.queue_estimate(session=session, compound=compound, truncate_side_chains=data.truncate_side_chains,
                                   actor=actor.label)
    return {"job": job.id, **queue.job_read(job, session=session)}


@router.post("/estimates", status_code=202,
             response_model=JobPage,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS, **LIMIT_ERRORS, **QUOTA_ERRORS})
def queue_many(data: BulkEstimateIn, session: SessionDep, actor: Writer) -> dict[str, Any]:
    """Queue estimates for many compounds at once: a list of codes, or every compound of a scaffold."""
    if data.compounds:
        estimates.check_bulk(len(data.compounds))
        compounds = [registry.get_compound(session, c) for c in data.compounds]
    elif data.scaffold:
        compounds = estimates.live_compounds_of_scaffold(session, data.scaffold)
    else:
        raise InputError("give compounds (codes) or a scaffold", field="compounds")
    jobs = estimates.queue_estimates(session=session, compounds=compounds,
                                     truncate_side_chains=data.truncate_side_chains, actor=actor.label)
    return {"items": queue.jobs_read(session, jobs), "total": len(jobs)}


@router.get("/jobs", response_model=JobPage, responses=AUTH_ERRORS)
def list_jobs(session: SessionDep, actor: Reader, state: Optional[str] = None, kind: Optional[str] = None,
              compound: Optional[str] = None, limit: int = Query(50, ge=1, le=500),
              offset: Offset = 0) -> dict[str, Any]:
    cid = registry.get_compound(session, compound).id if compound else None
    jobs, total = queue.list_jobs(session, state=state, kind=kind, compound_id=cid, limit=limit, offset=offset)
    withheld = access.withheld_codes(session, actor)
    return {"items": [_visible_job(j, actor, withheld) for j in queue.jobs_read(session, jobs)], "total": total}


@router.get("/jobs/summary", response_model=JobSummaryRead, responses=AUTH_ERRORS)
def jobs_summary(session: SessionDep, actor: Reader) -> dict[str, Any]:
    summary = estimates.queue_summary(session, actor)
    if not access.sees_embargoed(actor):
        for part in ("running", "queued", "recent"):
            summary[part] = [_visible_job(j, actor, frozenset()) for j in summary[part]]
    return accounts.hide_people(summary, sees_people=actor.sees_people)


@router.get("/jobs/{job_id}", response_model=JobRead, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_job(job_id: RowId, session: SessionDep, actor: Reader) -> dict[str, Any]:
    """`state` is queued, running, done, failed or cancelled; `result` holds the estimate keys when done."""
    return _visible_job(queue.job_read(queue.get_job(session, job_id), session=session), actor,
                        access.withheld_codes(session, actor))


@router.post("/jobs/{job_id}/cancel", response_model=JobRead, responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def cancel_job(job_id: RowId, session: SessionDep, actor: Writer) -> dict[str, Any]:
    """Only whoever queued the job (same account or token) or an admin may cancel it (403 otherwise)."""
    job = queue.cancel(session, job_id, actor=actor.label,
                       allowed=lambda created_by: access.may_cancel_job(actor, created_by))
    return queue.job_read(job, session=session)
