"""The group-server layout: two ``remanence serve`` and two ``remanence worker`` processes on one
PostgreSQL database (issue 21 item 5).

The processes are started as the README's service units start them (``remanence serve --port``,
``remanence worker --name``, one environment for all), on a database created for this test and
dropped after it. Run twice: with the RDKit cartridge, and with its table dropped, so that every
app process holds its own in-process structure index (a PostgreSQL server without the cartridge).

Checked:

* a compound registered through one process is found at once through the other, by substructure
  (``/api/v1/search``) and in the registry list (``/api/v1/compounds``), although the other's
  in-process index was built (by an earlier search) before the compound existed;
* a login made through one process is valid on the other (one secret key, sessions in the database);
* estimates asked of both processes at once, for the same compounds, become one job each, and each
  job runs exactly once (one attempt, one stored estimate) whichever worker takes it;
* uploads spread over both processes, with some files sent to both at once, are each stored exactly
  once, with their bytes, and download identically through either process.

The estimates are of mono- and di-substituted benzenes, which GFN2-xTB finds planar in well under a
second (tests/jobs/test_estimates.py), so the workers' real handlers run. Every wait is bounded.
Without PostgreSQL the test skips, unless REMANENCE_REQUIRE_PG=1.
"""

from __future__ import annotations

import hashlib
import threading
import time
from collections import Counter

import httpx
import pytest
import sqlalchemy as sa

from server.db import make_engine, upgrade
from server.services.search import STRUCTURE_TABLE
from server.settings import Settings
from tests.conftest import fresh_pg_database
from tests.factories import bearer, login_as

from .conftest import CliProcess, counts, loop_bytes, new_token, orphans, seed_batch

pytestmark = pytest.mark.pg

# Invented test compounds: substituted benzenes, all planar, all distinct, all matching c1ccccc1.
BENZENES = ["Cc1ccccc1", "CCc1ccccc1", "COc1ccccc1", "CCOc1ccccc1", "Cc1ccc(C)cc1", "CCCc1ccccc1"]
REQUEST_TIMEOUT_S = 60.0
JOBS_WAIT_S = 240.0


@pytest.fixture(params=["cartridge", "in-process"])
def group(request, tmp_path):
    """(database URL, [serve A, serve B], [worker 1, worker 2]), all running."""
    with fresh_pg_database("remanence_group") as url:
        upgrade(url)
        if request.param == "in-process":
            engine = sa.create_engine(url)
            with engine.begin() as conn:
                conn.execute(sa.text(f"DROP TABLE IF EXISTS {STRUCTURE_TABLE}"))
            engine.dispose()
        procs = [CliProcess("serve", url, tmp_path, "serve-a"), CliProcess("serve", url, tmp_path, "serve-b"),
                 CliProcess("worker", url, tmp_path, "worker-1"), CliProcess("worker", url, tmp_path, "worker-2")]
        try:
            for p in procs:
                p.start()
            yield url, procs[:2], procs[2:], request.param
        finally:
            for p in procs:
                p.stop()


def _settings(url, tmp_path) -> Settings:
    return Settings(data_dir=tmp_path, database_url=url, secret_key="trust-test-secret-not-for-production",
                    embedded_worker=False).resolved()


def test_two_app_processes_and_two_workers_share_one_database(group, tmp_path):
    url, (a, b), workers, backend = group
    engine = make_engine(url)
    try:
        writer = new_token(engine, "write", "chemist")
        http = {p.name: httpx.Client(base_url=p.url, timeout=REQUEST_TIMEOUT_S, headers=bearer(writer)) for p in (a, b)}
        try:
            codes = _registered_through_one_found_through_the_other(http[a.name], http[b.name])
            _login_through_one_valid_on_the_other(a, b, engine)
            _estimates_run_exactly_once(http[a.name], http[b.name], codes, engine, workers)
            _uploads_spread_over_both_are_stored_once(a, b, engine, _settings(url, tmp_path), writer)
        finally:
            for c in http.values():
                c.close()
        for p in (a, b, *workers):
            assert p.alive(), f"{p.name} died:\n{p.output()}"
        print(f"\n[group/{backend}] 2 serve + 2 worker processes: {len(codes)} compounds, searches fresh both ways")
    finally:
        engine.dispose()


def _search_codes(http: httpx.Client, smarts: str) -> set[str]:
    r = http.get("/api/v1/search", params={"substructure": smarts})
    assert r.status_code == 200, r.text
    return {item["code"] for item in r.json()["items"]}


def _registered_through_one_found_through_the_other(a: httpx.Client, b: httpx.Client) -> list[str]:
    # Both processes search first, so each has built whatever it keeps in process before the
    # compounds below exist: a cache that only fills at first use would go stale here.
    assert _search_codes(a, "c1ccccc1") == _search_codes(b, "c1ccccc1") == set()
    codes: list[str] = []
    for i, smiles in enumerate(BENZENES):
        here, there = (a, b) if i % 2 == 0 else (b, a)
        r = here.post("/api/v1/compounds", json={"smiles": smiles})
        assert r.status_code == 201, r.text
        code = r.json()["code"]
        codes.append(code)
        # At once through the other process: its own structure, every benzene so far, and the list.
        assert code in _search_codes(there, smiles), f"{code} ({smiles}) not found through the other process"
        assert _search_codes(there, "c1ccccc1") == set(codes)
        listed = there.get("/api/v1/compounds", params={"limit": 50}).json()
        assert listed["total"] == len(codes) and {c["code"] for c in listed["items"]} == set(codes)
        assert {c["code"] for c in there.get("/api/v1/compounds", params={"substructure": smiles}).json()["items"]} \
            >= {code}
    return codes


def _login_through_one_valid_on_the_other(a: CliProcess, b: CliProcess, engine) -> None:
    from sqlmodel import Session

    with httpx.Client(base_url=a.url, timeout=REQUEST_TIMEOUT_S) as via_a, Session(engine) as s:
        login_as(via_a, s, "member", name="groupmember")
        cookies = dict(via_a.cookies)
    with httpx.Client(base_url=b.url, timeout=REQUEST_TIMEOUT_S, cookies=cookies) as via_b:
        r = via_b.get("/compounds/new", follow_redirects=False)
        assert r.status_code == 200, f"a login through {a.name} is not valid on {b.name}: {r.status_code}"
    with httpx.Client(base_url=b.url, timeout=REQUEST_TIMEOUT_S) as stranger:
        assert stranger.get("/compounds/new", follow_redirects=False).status_code in (302, 303)


def _estimates_run_exactly_once(a: httpx.Client, b: httpx.Client, codes: list[str], engine, workers) -> None:
    answers: list[httpx.Response] = []
    barrier = threading.Barrier(2)

    def ask(http: httpx.Client) -> None:
        barrier.wait(timeout=30)
        answers.append(http.post("/api/v1/estimates", json={"compounds": codes}))

    threads = [threading.Thread(target=ask, args=(h,), daemon=True) for h in (a, b)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=REQUEST_TIMEOUT_S)
    assert len(answers) == 2 and all(r.status_code == 202 for r in answers), [r.text for r in answers]
    job_ids = [sorted(item["id"] for item in r.json()["items"]) for r in answers]
    assert job_ids[0] == job_ids[1] and len(job_ids[0]) == len(codes), "the same compounds were queued twice"

    deadline = time.monotonic() + JOBS_WAIT_S
    while time.monotonic() < deadline:
        with engine.connect() as conn:
            states = Counter(conn.execute(sa.text("SELECT state FROM job")).scalars())
        if states.get("done", 0) == len(codes) or states.get("failed") or states.get("cancelled"):
            break
        assert all(w.alive() for w in workers), "\n".join(w.output() for w in workers)
        time.sleep(0.5)
    with engine.connect() as conn:
        jobs = conn.execute(sa.text("SELECT id, state, attempts, worker, error FROM job ORDER BY id")).all()
        per_job = dict(conn.execute(sa.text(
            "SELECT job_id, count(*) FROM barrierestimate GROUP BY job_id")).all())
    assert [j.state for j in jobs] == ["done"] * len(codes), [(j.id, j.state, j.error) for j in jobs]
    assert all(j.attempts == 1 for j in jobs), "a job was claimed more than once"
    assert per_job == {j.id: 1 for j in jobs}, "an estimate was stored twice or not at all"
    assert {j.worker for j in jobs} <= {w.name for w in workers}
    print(f"\n[group] {len(jobs)} estimates, run by {dict(Counter(j.worker for j in jobs))}")


def _uploads_spread_over_both_are_stored_once(a: CliProcess, b: CliProcess, engine, settings, writer: str) -> None:
    _, batch = seed_batch(engine, settings, smiles="COc1c(OC)c(OC)c(OC)c(OC)c1OC")
    tokens = [new_token(engine, "upload", f"instrument-{i}") for i in range(4)]
    before = counts(engine)
    files = [loop_bytes(i, instrument=f"pc{i % 4}") for i in range(24)]
    # Each file goes to one process; every fourth goes to both at once (an instrument PC retrying
    # through the proxy onto the other process while the first request is still running).
    sends = [(files[i], tokens[i % 4], (a, b)[i % 2]) for i in range(len(files))]
    sends += [(files[i], tokens[(i + 1) % 4], (b, a)[i % 2]) for i in range(0, len(files), 4)]
    results: list[tuple[str, int, dict | None, str]] = []
    lock = threading.Lock()
    barrier = threading.Barrier(len(sends))

    def send(raw: bytes, token: str, proc: CliProcess) -> None:
        with httpx.Client(base_url=proc.url, timeout=REQUEST_TIMEOUT_S, headers=bearer(token)) as http:
            barrier.wait(timeout=30)
            try:
                r = http.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                              files={"file": ("loop.csv", raw, "text/csv")})
                out = (hashlib.sha256(raw).hexdigest(), r.status_code, r.json() if r.status_code < 500 else None,
                       r.text[:300])
            except httpx.HTTPError as exc:
                out = (hashlib.sha256(raw).hexdigest(), 0, None, f"{type(exc).__name__}: {exc}")
            with lock:
                results.append(out)

    threads = [threading.Thread(target=send, args=s, daemon=True) for s in sends]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=REQUEST_TIMEOUT_S * 2)
    assert not any(t.is_alive() for t in threads), "uploads still running"
    assert all(status in (200, 201) for _, status, _, _ in results), [(s, t) for _, s, _, t in results if s >= 300 or not s]
    ids: dict[str, set[int]] = {}
    for sha, _, body, _ in results:
        assert body["sha256"] == sha
        ids.setdefault(sha, set()).add(body["id"])
    assert len(ids) == len(files) and all(len(v) == 1 for v in ids.values()), "a file was stored twice"
    assert sum(status == 201 for _, status, _, _ in results) == len(files)
    assert counts(engine) == (before[0] + len(files), before[1] + len(files))
    assert orphans(engine) == {"measurement_without_raw": [], "raw_without_measurement": [], "sha_mismatch": []}
    for proc in (a, b):
        with httpx.Client(base_url=proc.url, timeout=REQUEST_TIMEOUT_S, headers=bearer(writer)) as http:
            for raw in files[::5]:
                (mid,) = ids[hashlib.sha256(raw).hexdigest()]
                got = http.get(f"/api/v1/measurements/{mid}/raw")
                assert got.status_code == 200 and got.content == raw
