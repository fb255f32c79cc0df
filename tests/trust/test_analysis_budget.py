"""An upload's analysis runs in a child process within a CPU-time, memory and wall-time budget
(server/budget.py, issue 12 item 8).

The pool is tested with tasks that behave like a pathological file's analysis (spinning on the CPU,
allocating without end, blocking), and the upload routes with budgets lowered below what an honest
file needs: the upload is refused with 413 naming the budget, nothing is stored, and the pool goes on
serving. SQLite and PostgreSQL through the ``app`` fixture.
"""

from __future__ import annotations

import dataclasses
import os
import time
from operator import add  # a builtin: a fresh child answers it without importing this module

import pytest

from server.budget import AnalysisPool, Budget, pool_for
from server.errors import InputError, OverLimit
from tests.factories import bearer, make_token

from .conftest import counts, loop_bytes

SMILES = "COc1c(OC)c(OC)c(OC)c(OC)c1OC"  # invented hexa-methoxy benzene (C12H18O6)


# --- tasks a child runs (module level: a child is sent them by name) ---------------------------

def spin(seconds: float) -> int:
    """Burn CPU for ``seconds`` of CPU time (a quadratic loop over a huge input does the same)."""
    end = time.process_time() + seconds
    n = 0
    while time.process_time() < end:
        n += 1
    return n


def hog(mib: int) -> int:
    """Allocate ``mib`` MiB and touch it (a table that unpacks to gigabytes does the same)."""
    block = bytearray(mib * 1024 * 1024)
    return len(block)


def refuse_line() -> None:
    raise InputError("'n/a' is not a number", line=14, column="P (uC/cm^2)")


def refuse_bound() -> None:
    raise OverLimit("the CIF has 90000 atom sites; at most 20000 are analysed", limit="cif_sites", value=20000)


@pytest.fixture
def small_pool():
    pool = AnalysisPool(Budget(cpu_s=1, memory_mb=2048, wall_s=20, workers=1))
    yield pool
    pool.close()


def test_cpu_budget_stops_a_spinning_task_and_the_pool_goes_on(small_pool):
    with pytest.raises(OverLimit) as caught:
        small_pool.run(spin, 30.0)
    assert caught.value.limit == "analysis_cpu_s" and caught.value.value == 1
    assert "REMANENCE_ANALYSIS_CPU_S" in caught.value.message and "nothing was stored" in caught.value.message
    assert small_pool.run(add, 2, 3) == 5
    assert small_pool.run(spin, 0.2) > 0  # the next task has its own second, not what is left of the last one


def test_memory_budget_stops_a_task_that_allocates_without_end(small_pool):
    with pytest.raises(OverLimit) as caught:
        small_pool.run(hog, 4096)  # 4 GiB against a 2 GiB address space
    assert caught.value.limit == "analysis_memory_mb" and caught.value.value == 2048
    assert small_pool.run(hog, 64) == 64 * 1024 * 1024  # an honest allocation still works


def test_wall_budget_kills_a_task_that_never_answers():
    pool = AnalysisPool(Budget(cpu_s=5, memory_mb=2048, wall_s=1.0, workers=1))
    try:
        started = time.monotonic()
        with pytest.raises(OverLimit) as caught:
            pool.run(time.sleep, 60)  # no CPU used, so only the wall clock can stop it
        assert caught.value.limit == "analysis_wall_s"
        assert time.monotonic() - started < 15
        assert pool.run(add, 1, 1) == 2  # a fresh child took the killed one's place
    finally:
        pool.close()


def test_a_tasks_own_errors_arrive_unchanged(small_pool):
    with pytest.raises(InputError) as caught:
        small_pool.run(refuse_line)
    assert (caught.value.line, caught.value.column) == (14, "P (uC/cm^2)")
    assert str(caught.value) == "line 14, column 'P (uC/cm^2)': 'n/a' is not a number"
    with pytest.raises(OverLimit) as bound:
        small_pool.run(refuse_bound)
    assert bound.value.to_dict() == {"detail": "the CIF has 90000 atom sites; at most 20000 are analysed",
                                     "limit": "cif_sites", "limit_value": 20000}


def test_apps_with_one_budget_share_one_pool(settings):
    assert pool_for(settings) is pool_for(dataclasses.replace(settings, code_prefix="XYZ"))
    assert pool_for(settings) is not pool_for(dataclasses.replace(settings, analysis_cpu_s=3.0))


def test_a_warmed_pool_serves_its_first_task_from_the_child_it_started(small_pool):
    """``warm`` starts one child ahead of the first task (so the first upload does not wait for the forkserver);
    a second ``warm`` starts none, and the first task runs in that very child."""
    small_pool.warm()
    small_pool.warm()
    assert small_pool._idle.qsize() == 1
    child = small_pool._idle.queue[0]
    assert child.process.is_alive()
    assert small_pool.run(os.getpid) == child.process.pid
    assert small_pool._idle.qsize() == 1


def test_a_closed_pool_is_not_warmed():
    pool = AnalysisPool(Budget(cpu_s=1, memory_mb=2048, wall_s=20, workers=1))
    pool.close()
    pool.warm()
    assert pool._idle.qsize() == 0


def test_the_app_warms_its_pool_at_start_up_without_waiting_for_it(settings):
    """Start-up hands the warming to a thread of its own and goes on; the thread leaves a live child idle in the
    app's pool. (A budget of its own, so the pool is this test's alone.)"""
    from fastapi.testclient import TestClient

    from server import budget as budgets
    from server.app import create_app

    mine = dataclasses.replace(settings, analysis_cpu_s=settings.analysis_cpu_s + 0.25)
    app = create_app(mine)
    try:
        with TestClient(app) as client:
            warming = app.state.analysis_warm
            assert warming.daemon and warming.name == "remanence-analysis-warm"
            warming.join(120)
            assert not warming.is_alive()
            pool = pool_for(mine)
            assert pool._idle.qsize() == 1 and pool._idle.queue[0].process.is_alive()
            assert client.get("/healthz").status_code == 200
    finally:
        app.state.engine.dispose()
        with budgets._pools_lock:
            budgets._pools.pop(budgets.Budget.of(mine)).close()


# --- through the upload routes -------------------------------------------------------------------

@pytest.fixture
def target(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    code = client.post("/api/v1/compounds", json={"smiles": SMILES}, headers=writer).json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    return {"batch": batch, "writer": writer,
            "uploader": bearer(make_token(session, scope="upload", name="instrument-pc"))}


def _upload(client, target, raw: bytes):
    return client.post(f"/api/v1/batches/{target['batch']}/measurements", data={"kind": "pe_loop"},
                       files={"file": ("loop.csv", raw, "text/csv")}, headers=target["uploader"])


@pytest.mark.parametrize("budget, limit, points", [({"analysis_wall_s": 1e-4}, "analysis_wall_s", 200),
                                                   ({"analysis_memory_mb": 64}, "analysis_memory_mb", 50_000)])
def test_an_upload_past_its_budget_is_refused_with_413_and_nothing_stored(app, client, settings, target, budget,
                                                                          limit, points):
    # 0.1 ms is less than any P-E loop needs. 64 MiB is below what the loaded analysis code itself takes, so every
    # new block fails: a 100 000-point loop (3 MB) needs new ones for its columns, where a small file could be
    # read in memory the child holds already.
    app.state.settings = dataclasses.replace(settings, **budget)
    before = counts(app.state.engine)
    raw = loop_bytes(1, points_per_cycle=points)
    r = _upload(client, target, raw)
    assert r.status_code == 413, r.text
    assert r.json()["limit"] == limit and r.json()["limit_value"] == next(iter(budget.values()))
    assert "nothing was stored" in r.json()["detail"]
    assert counts(app.state.engine) == before
    app.state.settings = settings  # the default budget: the same file is analysed and stored
    ok = _upload(client, target, raw)
    assert ok.status_code == 201, ok.text
    assert counts(app.state.engine) == (before[0] + 1, before[1] + 1)


def test_the_web_upload_form_is_budgeted_too(app, client, session, settings, target):
    from tests.factories import csrf_of, login_as

    login_as(client, session, role="member")
    page = client.get(f"/batches/{target['batch']}/upload")
    app.state.settings = dataclasses.replace(settings, analysis_wall_s=1e-4)
    before = counts(app.state.engine)
    r = client.post(f"/batches/{target['batch']}/upload", data={"kind": "pe_loop", "csrf_token": csrf_of(page.text)},
                    files={"file": ("loop.csv", loop_bytes(2), "text/csv")})
    assert r.status_code == 413 and "REMANENCE_ANALYSIS_WALL_S" in r.text
    assert counts(app.state.engine) == before
