"""The job queue's state machine (server/jobs/queue.py), on SQLite and PostgreSQL.

No science here: the checks are the queue's own contract (claim order, no double claim,
conditional transitions, stale recovery), each able to fail if a guard is dropped.
"""

from __future__ import annotations

import threading
from datetime import timedelta

import pytest
import sqlalchemy as sa
from sqlmodel import Session, select

from server.errors import InputError
from server.jobs import queue
from server.models import AuditEvent, Job, utcnow
from server.services.errors import NotFound

from . import make_compound


@pytest.fixture
def engine(db_url, engine_for):
    return engine_for(db_url)


@pytest.fixture
def db(engine):
    with Session(engine) as s:
        yield s


def _put(db, n=1, kind="fake", **params):
    return [queue.enqueue(db, kind=kind, params={"n": i, **params}, actor="user:ana") for i in range(n)]


def _get(engine, job_id) -> Job:
    with Session(engine) as s:
        return s.get(Job, job_id)


def _age(engine, job_id, seconds):
    """Pretend the job's last heartbeat was ``seconds`` ago."""
    with engine.begin() as conn:
        conn.execute(sa.update(Job).where(Job.id == job_id).values(heartbeat_at=utcnow() - timedelta(seconds=seconds)))


def _actions(engine, job_id) -> list[str]:
    with Session(engine) as s:
        rows = s.exec(select(AuditEvent).where(AuditEvent.entity == "job", AuditEvent.entity_code == str(job_id))
                      .order_by(AuditEvent.id)).all()
        return [r.action for r in rows]


def test_enqueue_stores_a_queued_job_and_audits_it(db, engine):
    (job,) = _put(db, extra=[1, 2])
    assert job.id is not None and job.state == "queued" and job.progress == 0.0
    assert job.params == {"n": 0, "extra": [1, 2]} and job.created_by == "user:ana"
    assert _actions(engine, job.id) == ["job.queue"]


def test_enqueue_refuses_params_json_cannot_hold(db):
    with pytest.raises(TypeError):
        queue.enqueue(db, kind="fake", params={"x": object()}, actor="user:ana")
    assert db.exec(select(Job)).all() == []


def test_claim_takes_the_oldest_first_and_marks_it_running(db, engine):
    jobs = _put(db, 3)
    before = utcnow()
    claimed = [queue.claim(engine, worker="w1") for _ in range(3)]
    assert [j.id for j in claimed] == [j.id for j in jobs]
    first = claimed[0]
    assert first.state == "running" and first.worker == "w1" and first.attempts == 1
    assert first.started_at >= before - timedelta(seconds=1) and first.heartbeat_at == first.started_at
    assert _get(engine, first.id).state == "running"  # committed, not only in the returned object
    assert queue.claim(engine, worker="w1") is None


def test_claim_takes_only_the_kinds_asked_for(db, engine):
    other, = _put(db, kind="other")
    mine, = _put(db, kind="mine")
    assert queue.claim(engine, worker="w", kinds=["mine"]).id == mine.id
    assert queue.claim(engine, worker="w", kinds=["mine"]) is None
    assert _get(engine, other.id).state == "queued"
    assert queue.claim(engine, worker="w", kinds=[]) is None


def test_concurrent_claims_never_take_a_job_twice(db, db_url, engine_for):
    # Four threads, each with its own engine (own connections), race for 24 jobs.
    jobs = _put(db, 24)
    taken: list[tuple[str, int]] = []
    lock = threading.Lock()
    start = threading.Barrier(4)
    errors = []

    def grab(name):
        eng = engine_for(db_url)
        try:
            start.wait()
            while (job := queue.claim(eng, worker=name)) is not None:
                with lock:
                    taken.append((name, job.id))
        except Exception as exc:  # surfaced below; a thread's exception would otherwise vanish
            errors.append(exc)

    threads = [threading.Thread(target=grab, args=(f"w{k}",)) for k in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(60)
    assert not errors
    ids = [job_id for _, job_id in taken]
    assert sorted(ids) == sorted(j.id for j in jobs)  # every job once, none twice
    with Session(engine_for(db_url)) as s:
        rows = s.exec(select(Job)).all()
        assert all(r.state == "running" and r.attempts == 1 for r in rows)
        assert {(r.worker, r.id) for r in rows} == set(taken)


def test_heartbeat_records_progress_and_says_when_to_stop(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")
    assert queue.heartbeat(engine, job.id, progress=0.25, message="a quarter", worker="w1") is True
    row = _get(engine, job.id)
    assert (row.progress, row.message) == (0.25, "a quarter")
    assert queue.heartbeat(engine, job.id, progress=7.0, message=None, worker="w1") is True
    assert _get(engine, job.id).progress == 1.0  # clamped into 0..1
    assert _get(engine, job.id).message == "a quarter"  # None leaves the message alone
    with pytest.raises(ValueError):
        queue.heartbeat(engine, job.id, progress=float("nan"), message="x", worker="w1")
    # Not this worker's job: lost, and nothing written.
    assert queue.heartbeat_status(engine, job.id, progress=0.5, message="intruder", worker="w2") == "lost"
    assert _get(engine, job.id).message == "a quarter"
    queue.cancel(db, job.id, actor="user:ana")
    assert queue.heartbeat_status(engine, job.id, progress=0.5, message="x", worker="w1") == "cancel_requested"
    assert queue.heartbeat(engine, job.id, progress=0.5, message="x", worker="w1") is False


def test_heartbeat_of_a_job_that_is_not_running_is_false(db, engine):
    job, = _put(db)
    assert queue.heartbeat(engine, job.id, progress=0.1, message="x") is False  # still queued
    queue.claim(engine, worker="w1")
    assert queue.finish(engine, job.id, result={"ok": 1}, worker="w1")
    assert queue.heartbeat(engine, job.id, progress=0.1, message="x") is False


def test_finish_stores_the_result_with_its_rows_in_one_transaction(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")

    def store(session, j, result):
        assert j.state == "done" and result == {"value": 1.5, "bad": None}
        session.add(AuditEvent(actor="test", action="store.ran", entity="test"))
        return {"stored_id": 42}

    assert queue.finish(engine, job.id, result={"value": 1.5, "bad": float("nan")}, worker="w1", store=store)
    row = _get(engine, job.id)
    assert row.state == "done" and row.progress == 1.0 and row.finished_at is not None
    assert row.result == {"value": 1.5, "bad": None, "stored_id": 42}  # NaN never reaches the JSON column
    with Session(engine) as s:
        assert s.exec(select(AuditEvent).where(AuditEvent.action == "store.ran")).one()
    assert _actions(engine, job.id) == ["job.queue", "job.done"]


def test_a_failing_store_leaves_nothing_behind(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")

    def store(session, j, result):
        session.add(AuditEvent(actor="test", action="store.ran", entity="test"))
        raise InputError("the result is unusable", field="result")

    with pytest.raises(InputError):
        queue.finish(engine, job.id, result={"value": 1}, worker="w1", store=store)
    row = _get(engine, job.id)
    assert row.state == "running" and row.result is None
    with Session(engine) as s:
        assert s.exec(select(AuditEvent).where(AuditEvent.action == "store.ran")).first() is None


def test_finish_is_refused_for_another_worker_or_after_a_cancel_request(db, engine):
    a, b = _put(db, 2)
    queue.claim(engine, worker="w1")
    queue.claim(engine, worker="w1")
    ran = []
    assert queue.finish(engine, a.id, result={"x": 1}, worker="w2", store=lambda *args: ran.append(1)) is False
    assert _get(engine, a.id).state == "running" and _get(engine, a.id).result is None and not ran
    queue.cancel(db, b.id, actor="user:ana")
    assert queue.finish(engine, b.id, result={"x": 1}, worker="w1", store=lambda *args: ran.append(1)) is False
    assert _get(engine, b.id).result is None and not ran
    assert queue.mark_cancelled(engine, b.id, worker="w1") is True
    assert _get(engine, b.id).state == "cancelled"


def test_fail_keeps_the_error(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")
    assert queue.fail(engine, job.id, error="field 'smiles': no SMILES\nmore detail", worker="w1")
    row = _get(engine, job.id)
    assert row.state == "failed" and row.error.startswith("field 'smiles': no SMILES")
    assert row.message == "failed: field 'smiles': no SMILES" and row.finished_at is not None
    assert queue.fail(engine, job.id, error="again", worker="w1") is False  # ended jobs stay ended
    assert _get(engine, job.id).error.startswith("field 'smiles'")


def test_cancel_a_queued_job_ends_it_at_once(db, engine):
    job, = _put(db)
    out = queue.cancel(db, job.id, actor="user:ana")
    assert out.state == "cancelled" and out.finished_at is not None and out.cancel_requested
    assert queue.claim(engine, worker="w1") is None
    assert _actions(engine, job.id) == ["job.queue", "job.cancel"]


def test_cancel_a_running_job_asks_its_worker(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")
    out = queue.cancel(db, job.id, actor="user:ana")
    assert out.state == "running" and out.cancel_requested is True and "cancel requested" in out.message


def test_cancel_an_ended_or_missing_job_is_refused(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")
    queue.finish(engine, job.id, result={}, worker="w1")
    with pytest.raises(InputError, match="done already"):
        queue.cancel(db, job.id, actor="user:ana")
    with pytest.raises(NotFound):
        queue.cancel(db, 9999, actor="user:ana")


def test_release_returns_a_job_without_counting_the_attempt(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="w1")
    assert queue.release(engine, job.id, worker="w1")
    row = _get(engine, job.id)
    assert (row.state, row.worker, row.attempts, row.started_at) == ("queued", "", 0, None)
    assert queue.claim(engine, worker="w2").id == job.id


def test_requeue_stale_recovers_only_silent_jobs(db, engine):
    silent, alive = _put(db, 2)
    queue.claim(engine, worker="dead")
    queue.claim(engine, worker="alive")
    _age(engine, silent.id, 300)
    found = queue.requeue_stale(engine, timeout_s=120)
    assert found == {"requeued": [silent.id], "failed": [], "cancelled": []}
    row = _get(engine, silent.id)
    assert (row.state, row.worker, row.progress) == ("queued", "", 0.0)
    assert "dead stopped responding" in row.message
    assert _get(engine, alive.id).state == "running"
    again = queue.claim(engine, worker="w3")
    assert again.id == silent.id and again.attempts == 2
    assert "job.requeued" in _actions(engine, silent.id)


def test_requeue_stale_gives_up_after_max_attempts(db, engine):
    job, = _put(db)
    for attempt in range(1, 4):
        claimed = queue.claim(engine, worker=f"w{attempt}")
        assert claimed.attempts == attempt
        _age(engine, job.id, 300)
        found = queue.requeue_stale(engine, timeout_s=120, max_attempts=3)
    assert found["failed"] == [job.id]
    row = _get(engine, job.id)
    assert row.state == "failed" and row.error.startswith("gave up after 3 attempts")
    assert queue.claim(engine, worker="w4") is None


def test_requeue_stale_cancels_a_silent_job_whose_cancel_was_requested(db, engine):
    job, = _put(db)
    queue.claim(engine, worker="dead")
    queue.cancel(db, job.id, actor="user:ana")
    _age(engine, job.id, 300)
    assert queue.requeue_stale(engine, timeout_s=120)["cancelled"] == [job.id]
    assert _get(engine, job.id).state == "cancelled"


def test_job_read_shape_with_the_compound_code(db, engine):
    compound = make_compound(db, "c1ccccc1")
    job = queue.enqueue(db, kind="fake", params={"compound_id": compound.id, "smiles": "c1ccccc1", "deep": True},
                        compound_id=compound.id, actor="user:ana")
    out = queue.job_read(job)
    assert {"id", "kind", "state", "progress", "message", "result", "error", "compound", "created_at",
            "started_at", "finished_at", "worker"} <= set(out)
    assert out["compound"] == compound.code and out["state"] == "queued" and out["worker"] is None
    assert out["options"] == {"deep": True}  # the structure itself is not repeated
    assert out["created_at"].endswith("+00:00")
    plain, = _put(db)
    assert queue.jobs_read(db, [job, plain])[0]["compound"] == compound.code
    assert queue.jobs_read(db, [job, plain])[1]["compound"] is None


def test_list_jobs_newest_first_with_filters(db, engine):
    a, b, c = _put(db, 3)
    other, = _put(db, kind="other")
    queue.claim(engine, worker="w1")  # takes a
    rows, total = queue.list_jobs(db)
    assert total == 4 and [r.id for r in rows] == [other.id, c.id, b.id, a.id]
    rows, total = queue.list_jobs(db, state="running")
    assert total == 1 and rows[0].id == a.id and rows[0].state == "running"
    rows, total = queue.list_jobs(db, kind="fake", state="queued", limit=1)
    assert total == 2 and [r.id for r in rows] == [c.id]
    with pytest.raises(InputError):
        queue.list_jobs(db, state="sleeping")
