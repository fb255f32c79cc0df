"""The worker loop (server/jobs/worker.py): outcomes, progress, cancellation, liveness, processes.

Fake handlers stand in for computations; the real GFN2-xTB handler runs in test_estimates.py.
Worker subprocesses import their handlers from tests/jobs/fake_handlers.py.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
import sqlalchemy as sa
from sqlmodel import Session, select

from server.analysis.xtb import EstimateCancelled
from server.errors import AnalysisError
from server.jobs import queue, worker as worker_mod
from server.jobs.worker import Worker, run_worker, start_embedded, stop_embedded
from server.models import Job

from .fake_handlers import poll_until_stopped

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def engine(db_url, engine_for):
    return engine_for(db_url)


@pytest.fixture
def db(engine):
    with Session(engine) as s:
        yield s


def _put(db, kind="fake", n=1, **params):
    return [queue.enqueue(db, kind=kind, params={"n": i, **params}, actor="user:ana") for i in range(n)]


def _get(engine, job_id) -> Job:
    with Session(engine) as s:
        return s.get(Job, job_id)


def _wait(predicate, timeout_s=10.0, step_s=0.02, what="condition"):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(step_s)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")


def _in_thread(target):
    errors = []

    def run():
        try:
            target()
        except BaseException as exc:  # surfaced by the test through `errors`
            errors.append(exc)

    t = threading.Thread(target=run, daemon=True)
    t.start()
    return t, errors


def test_a_returned_dict_makes_the_job_done(db, engine):
    job, = _put(db, value=3)
    w = Worker(engine, name="w1", handlers={"fake": lambda p, progress, cancel: {"twice": 2 * p["value"]}})
    assert w.run_once() is True
    row = _get(engine, job.id)
    assert row.state == "done" and row.result == {"twice": 6} and row.worker == "w1" and row.progress == 1.0
    assert w.run_once() is False  # queue empty


def test_a_worker_leaves_kinds_it_cannot_run(db, engine):
    job, = _put(db, kind="elsewhere")
    w = Worker(engine, name="w1", handlers={"fake": lambda p, progress, cancel: {}})
    assert w.run_once() is False
    assert _get(engine, job.id).state == "queued"


def test_a_failing_handler_stores_the_error_with_its_traceback(db, engine):
    job, = _put(db)

    def broken(params, progress, should_cancel):
        raise RuntimeError("the optimiser diverged")

    Worker(engine, name="w1", handlers={"fake": broken}).run_once()
    row = _get(engine, job.id)
    assert row.state == "failed"
    assert row.error.startswith("RuntimeError: the optimiser diverged")  # the message first
    assert "Traceback (most recent call last)" in row.error and "in broken" in row.error
    assert row.result is None and row.finished_at is not None


def test_an_input_error_is_stored_as_its_message_alone(db, engine):
    job, = _put(db)

    def refuses(params, progress, should_cancel):
        raise AnalysisError("the structure has no bowl core", field="smiles")

    Worker(engine, name="w1", handlers={"fake": refuses}).run_once()
    row = _get(engine, job.id)
    assert row.state == "failed" and row.error == "field 'smiles': the structure has no bowl core"


def test_a_result_json_cannot_hold_fails_the_job(db, engine):
    job, = _put(db)
    Worker(engine, name="w1", handlers={"fake": lambda p, progress, cancel: {"x": object()}}).run_once()
    row = _get(engine, job.id)
    assert row.state == "failed" and row.error.startswith("TypeError") and row.result is None


def test_progress_rises_monotonically_and_ends_at_one(db, engine, db_url, engine_for):
    job, = _put(db)
    steps = [0.1, 0.3, 0.25, 0.5, 0.45, 0.7, 0.9]  # two steps back: the stored progress must not follow them

    def handler(params, progress, should_cancel):
        for f in steps:
            progress(f, f"at {f}")
            time.sleep(0.12)
        return {"ok": True}

    seen: list[tuple[str, float]] = []
    done = threading.Event()
    watcher_engine = engine_for(db_url)

    def watch():
        while not done.is_set():
            with Session(watcher_engine) as s:
                row = s.get(Job, job.id)
                seen.append((row.state, row.progress))
            time.sleep(0.02)

    t = threading.Thread(target=watch, daemon=True)
    t.start()
    Worker(engine, name="w1", handlers={"fake": handler}, heartbeat_min_s=0.1).run_once()
    done.set()
    t.join()
    fractions = [f for _, f in seen]
    assert all(b >= a for a, b in zip(fractions, fractions[1:])), fractions
    assert len({f for state, f in seen if state == "running"}) >= 3  # progress was visible while running
    row = _get(engine, job.id)
    assert row.state == "done" and row.progress == 1.0


def test_progress_writes_are_throttled(db, engine, monkeypatch):
    job, = _put(db)
    writes = []
    real = queue.heartbeat_status

    def counting(*args, **kwargs):
        writes.append(time.monotonic())
        return real(*args, **kwargs)

    monkeypatch.setattr(queue, "heartbeat_status", counting)

    def chatty(params, progress, should_cancel):
        t0 = time.monotonic()
        k = 0
        while time.monotonic() - t0 < 1.2:
            k += 1
            progress(k / 1e6, f"step {k}")
            should_cancel()
        return {"calls": k}

    Worker(engine, name="w1", handlers={"fake": chatty}).run_once()
    calls = _get(engine, job.id).result["calls"]
    assert calls > 1000
    # 1.2 s at one write per 0.5 s: two or three writes, not one per call.
    assert 1 <= len(writes) <= 4, len(writes)
    assert all(b - a >= 0.45 for a, b in zip(writes, writes[1:]))


def test_the_keepalive_beats_while_a_handler_is_silent(db, engine, db_url, engine_for):
    job, = _put(db)
    other = engine_for(db_url)
    beats = []
    requeued = []

    def silent(params, progress, should_cancel):
        for _ in range(8):
            time.sleep(0.1)
            beats.append(_get(other, job.id).heartbeat_at)
            # Another worker's stale check with the same timeout finds nothing to take.
            requeued.extend(queue.requeue_stale(other, timeout_s=0.4)["requeued"])
        return {}

    Worker(engine, name="w1", handlers={"fake": silent}, stale_timeout_s=0.4).run_once()
    assert len(set(beats)) >= 3  # keep-alive every 0.1 s (timeout / 4) without any progress call
    assert requeued == []
    assert _get(engine, job.id).state == "done"


def test_cancel_a_running_job_stops_it(db, engine):
    job, = _put(db)
    w = Worker(engine, name="w1", handlers={"fake": poll_until_stopped}, heartbeat_min_s=0.1)
    t, errors = _in_thread(w.run_once)
    _wait(lambda: _get(engine, job.id).progress > 0.02, what="the job to run")
    t0 = time.monotonic()
    queue.cancel(db, job.id, actor="user:ana")
    t.join(10)
    assert not t.is_alive() and not errors
    assert time.monotonic() - t0 < 2.0  # stopped at a check, not at the handler's 30 s limit
    row = _get(engine, job.id)
    assert row.state == "cancelled" and row.result is None and row.finished_at is not None


def test_a_handler_that_finishes_after_a_cancel_request_is_cancelled(db, engine):
    job, = _put(db)

    def ignores_cancel(params, progress, should_cancel):
        with Session(engine) as s:
            queue.cancel(s, job.id, actor="user:ana")
        return {"late": True}

    Worker(engine, name="w1", handlers={"fake": ignores_cancel}).run_once()
    row = _get(engine, job.id)
    assert row.state == "cancelled" and row.result is None


def test_a_job_taken_away_is_not_overwritten(db, engine):
    job, = _put(db)
    w = Worker(engine, name="w1", handlers={"fake": poll_until_stopped}, heartbeat_min_s=0.05)
    t, errors = _in_thread(w.run_once)
    _wait(lambda: _get(engine, job.id).state == "running", what="the job to run")
    with engine.begin() as conn:  # as if requeued after a missed heartbeat and claimed by w2
        conn.execute(sa.update(Job).where(Job.id == job.id).values(worker="w2"))
    t.join(10)
    assert not t.is_alive() and not errors
    row = _get(engine, job.id)
    assert row.state == "running" and row.worker == "w2" and row.result is None


def test_stopping_a_worker_returns_its_job_to_the_queue(db, engine):
    job, = _put(db)
    w = Worker(engine, name="w1", handlers={"fake": poll_until_stopped}, poll_s=0.05)
    stop = threading.Event()
    t, errors = _in_thread(lambda: w.run_forever(stop))
    _wait(lambda: _get(engine, job.id).state == "running", what="the job to run")
    stop.set()
    t.join(10)
    assert not t.is_alive() and not errors
    row = _get(engine, job.id)
    assert (row.state, row.worker, row.attempts) == ("queued", "", 0)  # not the job's fault: attempt not counted


@pytest.mark.pg
def test_two_workers_on_postgresql_run_each_job_exactly_once(db_url, engine_for):
    if not db_url.startswith("postgresql"):
        pytest.skip("two concurrent workers are the PostgreSQL set-up")
    engine = engine_for(db_url)
    with Session(engine) as s:
        job_ids = [j.id for j in _put(s, n=30)]
    executed: list[tuple[str, int]] = []
    lock = threading.Lock()

    def make_handler(name):
        def handler(params, progress, should_cancel):
            with lock:
                executed.append((name, params["n"]))
            progress(0.5, "half")
            time.sleep(0.02)
            return {"n": params["n"], "by": name}
        return handler

    stop = threading.Event()
    workers = [Worker(engine_for(db_url), name=f"w{k}", handlers={"fake": make_handler(f"w{k}")}, poll_s=0.05)
               for k in (1, 2)]
    threads = [_in_thread(lambda w=w: w.run_forever(stop)) for w in workers]
    _wait(lambda: len(executed) >= 30 and all(_get(engine, i).state == "done" for i in job_ids[-3:]),
          timeout_s=30, what="30 jobs done")
    time.sleep(0.2)  # a double execution would show up now
    stop.set()
    for t, errors in threads:
        t.join(10)
        assert not errors
    ns = sorted(n for _, n in executed)
    assert ns == list(range(30))  # each job exactly once
    with Session(engine) as s:
        rows = s.exec(select(Job)).all()
    assert all(r.state == "done" and r.attempts == 1 for r in rows)
    assert all(r.result["by"] == r.worker for r in rows)
    assert {r.worker for r in rows} == {"w1", "w2"}  # both took part


def _worker_process(db_url: str, tmp_path: Path, name: str) -> subprocess.Popen:
    code = (
        "from server.settings import Settings\n"
        "from server.jobs.worker import run_worker\n"
        "from tests.jobs.fake_handlers import HANDLERS\n"
        f"run_worker(Settings(data_dir={str(tmp_path)!r}, database_url={db_url!r}, secret_key='test').resolved(),"
        f" name={name!r}, handlers=HANDLERS, poll_s=0.1)\n"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT), "OMP_NUM_THREADS": "1"}
    return subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT)


def test_a_killed_worker_leaves_its_job_reclaimable(db, engine, db_url, tmp_path):
    job, = _put(db, kind="sleep", sleep_s=60)
    proc = _worker_process(db_url, tmp_path, "victim")
    try:
        _wait(lambda: _get(engine, job.id).state == "running", timeout_s=15, what="the subprocess to claim")
        assert _get(engine, job.id).worker == "victim"
        proc.send_signal(signal.SIGKILL)
        proc.wait(5)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(5)
    assert proc.returncode == -signal.SIGKILL
    assert _get(engine, job.id).state == "running"  # nobody told the database
    assert queue.requeue_stale(engine, timeout_s=60)["requeued"] == []  # heartbeat still fresh: not yet stale
    time.sleep(0.6)
    assert queue.requeue_stale(engine, timeout_s=0.5)["requeued"] == [job.id]
    w = Worker(engine, name="rescuer", handlers={"sleep": lambda p, progress, cancel: {"rescued": True}})
    assert w.run_once() is True
    row = _get(engine, job.id)
    assert (row.state, row.worker, row.attempts, row.result) == ("done", "rescuer", 2, {"rescued": True})


def test_sigterm_stops_a_worker_process_cleanly(db, engine, db_url, tmp_path):
    job, = _put(db, kind="poll")
    proc = _worker_process(db_url, tmp_path, "terminated")
    try:
        _wait(lambda: _get(engine, job.id).progress > 0.02, timeout_s=15, what="the subprocess to run the job")
        proc.send_signal(signal.SIGTERM)
        out, _ = proc.communicate(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(5)
    assert proc.returncode == 0, out.decode()
    row = _get(engine, job.id)
    assert (row.state, row.worker, row.attempts) == ("queued", "", 0)
    assert b"SIGTERM received" in out


def test_run_worker_once_runs_one_job(db, engine, settings):
    a, b = _put(db, n=2)
    handlers = {"fake": lambda p, progress, cancel: {"n": p["n"]}}
    assert run_worker(settings, name="cli", once=True, handlers=handlers) == 1
    assert _get(engine, a.id).state == "done" and _get(engine, b.id).state == "queued"
    assert run_worker(settings, name="cli", once=True, handlers=handlers) == 1
    assert run_worker(settings, name="cli", once=True, handlers=handlers) == 0


def test_embedded_worker_runs_jobs_and_stops(db, engine):
    thread, stop = start_embedded(engine, None, handlers={"fake": lambda p, progress, cancel: {"n": p["n"]}})
    try:
        assert thread.daemon and thread.is_alive()
        job, = _put(db)
        _wait(lambda: _get(engine, job.id).state == "done", what="the embedded worker")
        assert _get(engine, job.id).worker.endswith(":embedded")
        assert _get(engine, job.id).worker.startswith(worker_mod.default_name())
    finally:
        assert stop_embedded(thread, stop, timeout_s=10)


def test_default_name_is_host_and_pid():
    host, pid = worker_mod.default_name().rsplit(":", 1)
    assert host and int(pid) == os.getpid()


def test_cancelled_handlers_raise_the_estimate_exception():
    # The worker maps exactly this exception to "cancelled"; the fake handlers raise it too.
    with pytest.raises(EstimateCancelled):
        poll_until_stopped({}, lambda f, m: None, lambda: True)
