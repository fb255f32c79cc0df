"""The job queue: a ``job`` table and the transitions of its state machine.

::

    queued --claim--> running --finish--> done
      |                  |----fail-----> failed
      |                  |----(cancel requested, worker stops)--> cancelled
      |                  |----release (worker shutting down)--> queued
      |                  '----requeue_stale (no heartbeat)--> queued, or failed after MAX_ATTEMPTS
      '--cancel--> cancelled

Every transition is one short transaction whose UPDATE names the state it expects (and,
for a worker, that the job is still its own), so two processes can never both move the
same job: whoever's UPDATE matches no row has lost the race and is told so (``False``).
No lock is held while a handler computes; the worker only touches the row to claim it,
to heartbeat, and to record the outcome.

Claiming: on PostgreSQL ``SELECT ... FOR UPDATE SKIP LOCKED LIMIT 1`` picks the next
queued job (fewest running jobs of its account first, then oldest: :func:`_fair_order`) that
no other worker is claiming at the same moment, and the same transaction
marks it running. On SQLite a single conditional ``UPDATE ... WHERE id = (SELECT oldest
queued) AND state = 'queued' RETURNING id``: SQLite serialises writers, so the subquery and
the update see the same database and a job is never claimed twice (one worker is the
supported SQLite set-up; several are safe, only slower).

Liveness: a running job's ``heartbeat_at`` is refreshed by its worker (every progress report,
at most every ``worker.HEARTBEAT_MIN_S``, and by a keep-alive thread). :func:`requeue_stale`
puts a running job whose heartbeat is older than a timeout back in the queue, so the job of
a killed worker is claimed again. Times are the workers' clocks (UTC): hosts that run workers
must keep their clocks in sync (NTP); the default timeout of 120 s is far above usual skew.

Functions that change state for a user (:func:`enqueue`, :func:`cancel`) take the caller's
Session, write an AuditEvent and commit once. Worker-side functions take an Engine (or a
Session, whose engine is used) and run their own short transaction; the end states
(done, failed, cancelled, requeued, released) are audited with the actor ``worker:<name>``,
heartbeats are not.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterable, Mapping, Sequence
from datetime import datetime, timedelta
from typing import Any, Literal, Optional, Union

import sqlalchemy as sa
from sqlalchemy.engine import Engine
from sqlalchemy.orm import aliased, object_session
from sqlmodel import Session, select

from ..access import NOT_JOB_OWNER, Refused
from ..analysis.results import jsonable
from ..errors import InputError
from ..models import JOB_STATES, Compound, Job, utcnow
from ..services import audit, notifications
from ..services.errors import NotFound

#: A job whose worker stopped heartbeating this many times is failed instead of requeued.
MAX_ATTEMPTS = 3
ACTIVE_STATES = ("queued", "running")
FINAL_STATES = ("done", "failed", "cancelled")
#: Longest error text kept on a job (a traceback of a deep stack stays well below this).
MAX_ERROR_CHARS = 20_000
MESSAGE_CHARS = 400  # Job.message max_length

Bind = Union[Engine, Session]
#: ``store(session, job, result) -> extra result keys or None``: runs inside the transaction
#: that marks the job done, so whatever it adds is stored if and only if the job is done.
StoreFn = Callable[[Session, Job, dict], Optional[Mapping[str, Any]]]
BeatStatus = Literal["running", "cancel_requested", "lost"]

assert set(ACTIVE_STATES + FINAL_STATES) == set(JOB_STATES)


def _engine(bind: Bind) -> Engine:
    if isinstance(bind, Session):
        return bind.get_bind()
    return bind


def _is_postgres(engine: Engine) -> bool:
    return engine.dialect.name == "postgresql"


def _json_ready(value: Mapping[str, Any], what: str) -> dict[str, Any]:
    """A JSON-ready copy of ``value`` (NaN becomes None via ``jsonable``); anything else is a bug."""
    if not isinstance(value, Mapping):
        raise TypeError(f"{what} must be a mapping, got {type(value).__name__}")
    out = jsonable(dict(value))
    json.dumps(out, allow_nan=False)  # raises TypeError on objects JSON cannot hold
    return out


def _fraction(value: float) -> float:
    f = float(value)
    if f != f:
        raise ValueError("progress is NaN")
    return min(1.0, max(0.0, f))


def _owned(job_id: int, worker: Optional[str]) -> list:
    conds = [Job.id == job_id, Job.state == "running"]
    if worker is not None:
        conds.append(Job.worker == worker)
    return conds


def _update(*conds) -> sa.Update:
    return sa.update(Job).where(*conds).execution_options(synchronize_session=False)


def _worker_actor(worker: str) -> str:
    return f"worker:{worker}" if worker else "worker"


def _audit_state(session: Session, job: Job, *, actor: str, action: str, before: str, **after: Any) -> None:
    """Every change of a job's state is audited here; an end (done, failed) is also its owner's notification."""
    audit.record(session, actor=actor, action=action, entity="job", code=str(job.id), compound_id=job.compound_id,
                 before={"state": before}, after={"state": job.state, "kind": job.kind, **jsonable(after)})
    if job.state in ("done", "failed"):
        notifications.job_ended(session, job, actor=actor)


# --------------------------------------------------------------------------- user side


def add_job(session: Session, *, kind: str, params: Mapping[str, Any], compound_id: Optional[int] = None,
            actor: str) -> Job:
    """Add a queued job and its audit event to ``session`` without committing (for services that
    queue several jobs, or a job with other rows, in one transaction)."""
    if not kind or len(kind) > 40:
        raise ValueError(f"job kind must be 1-40 characters, got {kind!r}")
    job = Job(kind=kind, params=_json_ready(params, "params"), compound_id=compound_id, created_by=actor,
              message="waiting for a worker")
    session.add(job)
    session.flush()
    audit.record(session, actor=actor, action="job.queue", entity="job", code=str(job.id), compound_id=compound_id,
                 after={"state": "queued", "kind": kind, "params": job.params})
    return job


def enqueue(session: Session, *, kind: str, params: Mapping[str, Any], compound_id: Optional[int] = None,
            actor: str) -> Job:
    """Queue one job of ``kind`` with JSON ``params``; commits. Returns the stored Job."""
    job = add_job(session, kind=kind, params=params, compound_id=compound_id, actor=actor)
    session.commit()
    session.refresh(job)
    return job


def get_job(session: Session, job_id: int) -> Job:
    """The job as the database holds it now (workers change jobs behind any session's back)."""
    job = session.get(Job, job_id, populate_existing=True)
    if job is None:
        raise NotFound(f"no job {job_id}")
    return job


def cancel(session: Session, job_id: int, *, actor: str, allowed: Optional[Callable[[str], bool]] = None) -> Job:
    """Cancel a job: a queued one at once, a running one by asking its worker to stop.

    ``allowed(created_by)`` (the routers pass ``access.may_cancel_job`` for the caller) decides
    whether this caller may cancel the job; a refusal raises :class:`access.Refused` (403).

    A running job gets ``cancel_requested``; its worker sees that at its next check (within
    about a second for the xtb estimate), stops and marks the job cancelled. A job that has
    ended already cannot be cancelled (InputError, 422).
    """
    job = get_job(session, job_id)
    if allowed is not None and not allowed(job.created_by):
        raise Refused(NOT_JOB_OWNER)
    if job.state in FINAL_STATES:
        raise InputError(f"job {job_id} is {job.state} already; only queued or running jobs can be cancelled",
                         field="job")
    now = utcnow()
    before = job.state
    took = session.execute(
        _update(Job.id == job_id, Job.state == "queued").values(
            state="cancelled", cancel_requested=True, finished_at=now, message=f"cancelled by {actor}"[:MESSAGE_CHARS])
    ).rowcount
    if took == 1:
        before = "queued"
    else:
        took = session.execute(
            _update(Job.id == job_id, Job.state == "running").values(
                cancel_requested=True, message=f"cancel requested by {actor}; stopping"[:MESSAGE_CHARS])
        ).rowcount
        before = "running"
    if took != 1:
        # It ended between the read and the update.
        session.rollback()
        session.refresh(job)
        raise InputError(f"job {job_id} is {job.state} already; only queued or running jobs can be cancelled",
                         field="job")
    session.expire(job)
    audit.record(session, actor=actor, action="job.cancel", entity="job", code=str(job_id),
                 compound_id=job.compound_id, before={"state": before},
                 after={"state": "cancelled" if before == "queued" else "running", "cancel_requested": True})
    session.commit()
    session.refresh(job)
    return job


# --------------------------------------------------------------------------- worker side


def _fair_order() -> tuple:
    """Claim order: first the accounts with the fewest jobs running now, then the oldest job.

    So one account's long queue cannot hold every worker: while its job runs, another account's
    younger job goes first (fair scheduling across accounts, issue 12 item 10). Served by the
    index on ``job(created_by, state)`` (migration 0020).
    """
    other = aliased(Job)
    running = (select(sa.func.count(other.id)).where(other.created_by == Job.created_by, other.state == "running")
               .correlate(Job).scalar_subquery())
    return running, Job.id


def claim(engine: Bind, *, worker: str, kinds: Optional[Iterable[str]] = None) -> Optional[Job]:
    """Take the next queued job (of one of ``kinds``, default any) for ``worker``, atomically:
    the oldest one of the accounts with the fewest running jobs (:func:`_fair_order`).

    The job comes back running, with ``worker``, ``started_at``, ``heartbeat_at`` set,
    ``attempts`` counted up and progress reset; ``None`` when nothing is queued.
    """
    if not worker:
        raise ValueError("a worker needs a name")
    engine = _engine(engine)
    kinds = sorted(set(kinds)) if kinds is not None else None
    if kinds is not None and not kinds:
        return None
    now = utcnow()
    running = dict(state="running", worker=worker[:120], started_at=now, heartbeat_at=now, progress=0.0,
                   message="started", attempts=Job.attempts + 1)
    with Session(engine, expire_on_commit=False) as session:
        if _is_postgres(engine):
            stmt = (select(Job.id).where(Job.state == "queued").order_by(*_fair_order()).limit(1)
                    .with_for_update(skip_locked=True, of=Job))
            if kinds is not None:
                stmt = stmt.where(Job.kind.in_(kinds))
            job_id = session.exec(stmt).first()
            if job_id is not None:
                session.execute(_update(Job.id == job_id).values(**running))
        else:
            oldest = select(Job.id).where(Job.state == "queued")
            if kinds is not None:
                oldest = oldest.where(Job.kind.in_(kinds))
            oldest = oldest.order_by(*_fair_order()).limit(1).scalar_subquery()
            job_id = session.execute(
                _update(Job.id == oldest, Job.state == "queued").values(**running).returning(Job.id)
            ).scalar_one_or_none()
        if job_id is None:
            session.rollback()
            return None
        job = session.get(Job, job_id)
        session.commit()
        return job


def heartbeat_status(engine: Bind, job_id: int, *, progress: Optional[float], message: Optional[str],
                     worker: Optional[str] = None) -> BeatStatus:
    """Record progress and liveness of a running job; say whether to go on.

    Returns ``"running"`` (go on), ``"cancel_requested"`` (stop and mark cancelled) or
    ``"lost"`` (the job is no longer running for ``worker``: requeued after a missed
    heartbeat, or ended; stop without recording anything). ``None`` leaves progress or
    message as they are.
    """
    values: dict[str, Any] = {"heartbeat_at": utcnow()}
    if progress is not None:
        values["progress"] = _fraction(progress)
    if message is not None:
        values["message"] = str(message)[:MESSAGE_CHARS]
    with _engine(engine).begin() as conn:
        row = conn.execute(_update(*_owned(job_id, worker)).values(**values).returning(Job.cancel_requested)).first()
    if row is None:
        return "lost"
    return "cancel_requested" if row[0] else "running"


def heartbeat(engine: Bind, job_id: int, *, progress: Optional[float], message: Optional[str],
              worker: Optional[str] = None) -> bool:
    """Record progress; ``False`` when cancel was requested or the job is no longer running (for ``worker``)."""
    return heartbeat_status(engine, job_id, progress=progress, message=message, worker=worker) == "running"


def finish(engine: Bind, job_id: int, *, result: Mapping[str, Any], worker: Optional[str] = None,
           message: str = "done", store: Optional[StoreFn] = None) -> bool:
    """Mark a running job done with its JSON ``result``; ``store`` adds its rows in the same transaction.

    Returns ``False`` (and stores nothing) when the job is no longer running for ``worker`` or a
    cancel was requested meanwhile: a cancelled job never gets a result.
    """
    payload = _json_ready(result, "result")
    now = utcnow()
    with Session(_engine(engine)) as session:
        took = session.execute(
            _update(*_owned(job_id, worker), Job.cancel_requested == sa.false()).values(
                state="done", progress=1.0, message=str(message)[:MESSAGE_CHARS], result=payload, error="",
                finished_at=now, heartbeat_at=now)
        ).rowcount
        if took != 1:
            session.rollback()
            return False
        job = session.get(Job, job_id)
        if store is not None:
            extra = store(session, job, payload)
            if extra:
                job.result = {**payload, **_json_ready(extra, "store() result")}
                session.add(job)
        _audit_state(session, job, actor=_worker_actor(job.worker), action="job.done", before="running",
                     result_keys=sorted((job.result or {}).keys()))
        session.commit()
    return True


def _end(engine: Bind, job_id: int, *, worker: Optional[str], values: dict[str, Any], action: str) -> bool:
    with Session(_engine(engine)) as session:
        took = session.execute(_update(*_owned(job_id, worker)).values(**values)).rowcount
        if took != 1:
            session.rollback()
            return False
        job = session.get(Job, job_id)
        _audit_state(session, job, actor=_worker_actor(job.worker), action=action, before="running",
                     message=job.message)
        session.commit()
    return True


def fail(engine: Bind, job_id: int, *, error: str, worker: Optional[str] = None) -> bool:
    """Mark a running job failed with ``error`` (shown to people; first line the message)."""
    text = str(error) or "failed without a message"
    if len(text) > MAX_ERROR_CHARS:
        text = text[: MAX_ERROR_CHARS - 40] + "\n... (error text shortened)"
    first = text.splitlines()[0] if text.strip() else text
    now = utcnow()
    return _end(engine, job_id, worker=worker, action="job.failed",
                values=dict(state="failed", error=text, message=f"failed: {first}"[:MESSAGE_CHARS], finished_at=now,
                            heartbeat_at=now))


def mark_cancelled(engine: Bind, job_id: int, *, worker: Optional[str] = None,
                   message: str = "cancelled on request") -> bool:
    """The worker stopped a running job because a cancel was requested."""
    now = utcnow()
    return _end(engine, job_id, worker=worker, action="job.cancelled",
                values=dict(state="cancelled", message=message[:MESSAGE_CHARS], finished_at=now, heartbeat_at=now))


def release(engine: Bind, job_id: int, *, worker: str, message: str = "returned to the queue: worker stopped") -> bool:
    """Put a running job back in the queue because its worker is shutting down (not the job's fault:
    the attempt is not counted)."""
    return _end(engine, job_id, worker=worker, action="job.release",
                values=dict(state="queued", worker="", started_at=None, heartbeat_at=None, progress=0.0,
                            message=message[:MESSAGE_CHARS], attempts=sa.case((Job.attempts > 0, Job.attempts - 1),
                                                                                else_=0)))


def requeue_stale(engine: Bind, *, timeout_s: float, max_attempts: int = MAX_ATTEMPTS) -> dict[str, list[int]]:
    """Recover running jobs whose worker stopped heartbeating for more than ``timeout_s`` seconds.

    Such a job goes back to queued (claimable by any worker), or to failed with an explanation
    once it has been tried ``max_attempts`` times (a job that kills its worker every time, for
    example by running out of memory, must not loop forever), or to cancelled if a cancel was
    requested. Returns the job ids by outcome: ``{"requeued": [...], "failed": [...],
    "cancelled": [...]}``.
    """
    if not timeout_s > 0:
        raise ValueError("timeout_s must be positive")
    engine = _engine(engine)
    now = utcnow()
    cutoff = now - timedelta(seconds=float(timeout_s))
    stale = sa.or_(Job.heartbeat_at < cutoff, Job.heartbeat_at.is_(None))
    out: dict[str, list[int]] = {"requeued": [], "failed": [], "cancelled": []}
    with Session(engine) as session:
        stmt = select(Job).where(Job.state == "running", stale).order_by(Job.id)
        if _is_postgres(engine):
            stmt = stmt.with_for_update(skip_locked=True)
        found = [(j.id, j.worker, j.attempts, j.cancel_requested, j.heartbeat_at) for j in session.exec(stmt).all()]
        for job_id, worker, attempts, cancel_requested, beat in found:
            last = _when(beat)
            if cancel_requested:
                outcome = "cancelled"
                values = dict(state="cancelled", finished_at=now,
                              message=f"cancelled: worker {worker} stopped responding after the cancel request")
            elif attempts >= max_attempts:
                outcome = "failed"
                error = (f"gave up after {attempts} attempts: worker {worker} stopped sending heartbeats "
                         f"(last at {last}, timeout {timeout_s:g} s). Each attempt ended with its worker gone; "
                         "the job may be too heavy for the worker (memory, time limits), or workers were killed.")
                values = dict(state="failed", finished_at=now, error=error,
                              message=f"failed: worker stopped responding ({attempts} attempts)")
            else:
                outcome = "requeued"
                values = dict(state="queued", worker="", started_at=None, heartbeat_at=None, progress=0.0,
                              message=f"requeued: worker {worker} stopped responding (last heartbeat {last})")
            values["message"] = values["message"][:MESSAGE_CHARS]
            # Re-check staleness and owner in the UPDATE: a heartbeat may have landed since the SELECT.
            took = session.execute(
                _update(Job.id == job_id, Job.state == "running", Job.worker == worker, stale).values(**values)
            ).rowcount
            if took != 1:
                continue
            job = session.get(Job, job_id, populate_existing=True)
            audit.record(session, actor="worker:stale-check", action=f"job.{outcome}", entity="job", code=str(job_id),
                         compound_id=job.compound_id, before={"state": "running", "worker": worker},
                         after={"state": job.state, "attempts": attempts, "last_heartbeat": last})
            if outcome == "failed":
                notifications.job_ended(session, job, actor="worker:stale-check")
            out[outcome].append(job_id)
        session.commit()
    return out


def _when(moment: Optional[datetime]) -> str:
    return moment.strftime("%Y-%m-%d %H:%M:%S UTC") if moment is not None else "never"


# --------------------------------------------------------------------------- reading


def _iso(moment: Optional[datetime]) -> Optional[str]:
    return moment.isoformat() if moment is not None else None


def list_jobs(session: Session, *, state: Optional[str] = None, kind: Optional[str] = None,
              compound_id: Optional[int] = None, limit: int = 50, offset: int = 0) -> tuple[list[Job], int]:
    """Jobs newest first, optionally of one state, kind or compound; returns (page, total)."""
    if state is not None and state not in JOB_STATES:
        raise InputError(f"state must be one of {', '.join(JOB_STATES)}", field="state")
    conds = []
    if state is not None:
        conds.append(Job.state == state)
    if kind is not None:
        conds.append(Job.kind == kind)
    if compound_id is not None:
        conds.append(Job.compound_id == compound_id)
    total = session.exec(select(sa.func.count(Job.id)).where(*conds)).one()
    rows = session.exec(select(Job).where(*conds).order_by(Job.id.desc()).offset(offset).limit(limit)
                        .execution_options(populate_existing=True)).all()
    return list(rows), int(total)


def job_read(job: Job, *, compound_code: Optional[str] = None, session: Optional[Session] = None) -> dict[str, Any]:
    """The API shape of a job; ``compound`` is the compound's code (looked up through ``session``,
    or the session the job belongs to, unless ``compound_code`` is given)."""
    code = compound_code
    if code is None and job.compound_id is not None:
        s = session or object_session(job)
        if s is None:
            raise ValueError("job_read needs a session (or compound_code) for a job that names a compound")
        code = s.exec(select(Compound.code).where(Compound.id == job.compound_id)).one()
    params = job.params or {}
    return {
        "id": job.id,
        "kind": job.kind,
        "state": job.state,
        "progress": job.progress,
        "message": job.message,
        "result": job.result,
        "error": job.error or None,
        "compound": code,
        "options": {k: v for k, v in params.items() if k not in ("smiles", "compound_id")},
        "attempts": job.attempts,
        "cancel_requested": job.cancel_requested,
        "created_by": job.created_by,
        "created_at": _iso(job.created_at),
        "started_at": _iso(job.started_at),
        "heartbeat_at": _iso(job.heartbeat_at),
        "finished_at": _iso(job.finished_at),
        "worker": job.worker or None,
    }


def jobs_read(session: Session, jobs: Sequence[Job]) -> list[dict[str, Any]]:
    """:func:`job_read` for many jobs, with the compound codes fetched in one query."""
    ids = {j.compound_id for j in jobs if j.compound_id is not None}
    codes = dict(session.exec(select(Compound.id, Compound.code).where(Compound.id.in_(ids))).all()) if ids else {}
    return [job_read(j, compound_code=codes.get(j.compound_id), session=session) if j.compound_id is not None
            else job_read(j) for j in jobs]
