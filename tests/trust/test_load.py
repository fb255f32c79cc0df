"""Concurrent uploads against a real uvicorn server on 127.0.0.1 (SQLite file and PostgreSQL).

Five simulated instrument PCs, each with its own upload token, post 40 distinct P-E loop files at
once (8 threads per instrument, one httpx.Client each, released together by a barrier). Afterwards:

* no request was answered 5xx (a SQLite "database is locked" would surface here as a 503 and fail
  the test with the server's message: it is reported, never retried away);
* every upload is stored exactly once, with the SHA-256 of the bytes sent (checked against hashlib
  and against the raw file downloaded back);
* posting the same bytes again answers 200 with the same measurement id.

Throughput and latency percentiles are printed (``-s``), never asserted: the machine is shared.
"""

from __future__ import annotations

import hashlib
import statistics
import threading
import time
from dataclasses import dataclass

import httpx

from tests.factories import bearer

from .conftest import counts, loop_bytes, new_token, orphans, seed_batch, thread_server

INSTRUMENTS = 5
PER_INSTRUMENT = 8  # 40 uploads in all, all in flight at once
REQUEST_TIMEOUT_S = 60.0
WALL_LIMIT_S = 120.0


@dataclass
class Outcome:
    instrument: int
    index: int
    sha256: str
    status: int = 0
    body: dict | None = None
    text: str = ""
    seconds: float = 0.0
    error: str = ""


def percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(round(q * (len(ordered) - 1))))]


def fire(url: str, batch: str, jobs: list[tuple[str, bytes, Outcome]]) -> float:
    """Post every (token, file, outcome) from its own thread at once; returns the wall time."""
    barrier = threading.Barrier(len(jobs))

    def one(token: str, raw: bytes, out: Outcome) -> None:
        with httpx.Client(base_url=url, timeout=REQUEST_TIMEOUT_S, headers=bearer(token)) as http:
            barrier.wait(timeout=30)
            t0 = time.perf_counter()
            try:
                r = http.post(f"/api/v1/batches/{batch}/measurements",
                              data={"kind": "pe_loop", "instrument": f"pc-{out.instrument}"},
                              files={"file": (f"loop-{out.instrument}-{out.index}.csv", raw, "text/csv")})
                out.status, out.text = r.status_code, r.text[:500]
                if r.headers.get("content-type", "").startswith("application/json"):
                    out.body = r.json()
            except httpx.HTTPError as exc:
                out.error = f"{type(exc).__name__}: {exc}"
            out.seconds = time.perf_counter() - t0

    threads = [threading.Thread(target=one, args=job, daemon=True) for job in jobs]
    t0 = time.perf_counter()
    for t in threads:
        t.start()
    deadline = t0 + WALL_LIMIT_S
    for t in threads:
        t.join(timeout=max(0.1, deadline - time.perf_counter()))
    wall = time.perf_counter() - t0
    assert not any(t.is_alive() for t in threads), f"uploads still running after {WALL_LIMIT_S} s"
    return wall


def test_concurrent_uploads_are_all_stored_once(app, settings, db_url):
    engine = app.state.engine
    code, batch = seed_batch(engine, settings)
    tokens = [new_token(engine, "upload", f"instrument-{i}") for i in range(INSTRUMENTS)]
    writer = new_token(engine, "write", "auditor")
    jobs = []
    for i in range(INSTRUMENTS):
        for j in range(PER_INSTRUMENT):
            raw = loop_bytes(i * PER_INSTRUMENT + j, instrument=f"pc{i}")
            jobs.append((tokens[i], raw, Outcome(i, j, hashlib.sha256(raw).hexdigest())))
    assert len({o.sha256 for _, _, o in jobs}) == len(jobs), "the test files must be distinct"

    with thread_server(app) as url:
        wall = fire(url, batch, jobs)
        outs = [o for _, _, o in jobs]
        lat = [o.seconds for o in outs]
        backend = "sqlite" if settings.is_sqlite else "postgresql"
        print(f"\n[load/{backend}] {len(outs)} uploads from {INSTRUMENTS} instruments in {wall:.2f} s: "
              f"{len(outs) / wall:.1f} uploads/s, latency p50 {statistics.median(lat) * 1e3:.0f} ms, "
              f"p95 {percentile(lat, 0.95) * 1e3:.0f} ms, max {max(lat) * 1e3:.0f} ms; "
              f"statuses {sorted({o.status for o in outs})}")

        broken = [o for o in outs if o.error or o.status >= 500]
        assert not broken, "server errors under load:\n" + "\n".join(
            f"instrument {o.instrument} file {o.index}: {o.status} {o.error or o.text}" for o in broken)
        wrong = [o for o in outs if o.status != 201]
        assert not wrong, "\n".join(f"{o.instrument}/{o.index}: {o.status} {o.text}" for o in wrong)
        assert all(o.body["sha256"] == o.sha256 for o in outs)
        assert len({o.body["id"] for o in outs}) == len(outs)

        with httpx.Client(base_url=url, timeout=REQUEST_TIMEOUT_S, headers=bearer(writer)) as http:
            listed = http.get("/api/v1/measurements", params={"batch": batch, "limit": 1000}).json()
            assert listed["total"] == len(outs)
            stored = [m["sha256"] for m in listed["items"]]
            assert sorted(stored) == sorted(o.sha256 for o in outs), "an upload is missing or stored twice"
            for token, raw, o in jobs[:: max(1, len(jobs) // 10)]:
                got = http.get(f"/api/v1/measurements/{o.body['id']}/raw")
                assert hashlib.sha256(got.content).hexdigest() == o.sha256 and got.content == raw
            # The same bytes again from the same instrument: the stored measurement, not a new one.
            for token, raw, o in jobs[:3]:
                again = http.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                                  files={"file": ("again.csv", raw, "text/csv")}, headers=bearer(token))
                assert again.status_code == 200, again.text
                assert again.json()["id"] == o.body["id"]
    assert counts(engine) == (len(outs), len(outs))
    assert orphans(engine) == {"measurement_without_raw": [], "raw_without_measurement": [], "sha_mismatch": []}


def test_the_same_file_from_two_instruments_at_once_is_stored_once(app, settings):
    """A race on the unique (batch, sha256, kind) key: both get the one measurement, 201 or 200."""
    engine = app.state.engine
    code, batch = seed_batch(engine, settings)
    tokens = [new_token(engine, "upload", f"twin-{i}") for i in range(6)]
    raw = loop_bytes(500)
    sha = hashlib.sha256(raw).hexdigest()
    jobs = [(tokens[i], raw, Outcome(i, 0, sha)) for i in range(6)]
    with thread_server(app) as url:
        fire(url, batch, jobs)
    outs = [o for _, _, o in jobs]
    assert all(not o.error and o.status in (200, 201) for o in outs), [(o.status, o.error, o.text) for o in outs]
    assert len({o.body["id"] for o in outs}) == 1
    assert sum(o.status == 201 for o in outs) == 1
    assert counts(engine) == (1, 1)
