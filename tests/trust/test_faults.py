"""Faults: the server killed in the middle of uploads, an unreachable database, a locked database.

* SIGKILL: the server runs as a child process (SQLite file, and PostgreSQL); threads post uploads;
  the server is killed with SIGKILL while requests are in flight, restarted on the same database,
  and the storage is checked: every upload answered 2xx is there with its raw file and the right
  SHA-256; no measurement lacks its raw file; no raw file is left without a measurement; SQLite's
  ``PRAGMA integrity_check`` says ok. New uploads work after the restart, and a file whose answer
  was lost in the kill can be posted again (200 or 201, never a duplicate).
* An unreachable PostgreSQL (a closed port on 127.0.0.1) and a SQLite file under an exclusive lock
  held by another connection answer 503 with a message people can act on, never a 500 or a trace.
"""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
import threading
import time
from dataclasses import dataclass, field

import httpx
import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from sqlalchemy.engine import make_url

from server.app import create_app
from server.settings import Settings
from tests.factories import bearer, make_token

from .conftest import counts, loop_bytes, new_token, orphans, seed_batch

THREADS = 4
PER_THREAD = 25
KILL_AFTER_OK = 6  # kill once this many uploads were answered (so the kill lands mid-stream)
BUSY = "the database is busy or unreachable"


@dataclass
class Sent:
    sha256: str
    raw: bytes
    status: int = 0
    body: dict | None = None
    error: str = ""


@dataclass
class Stream:
    url: str
    batch: str
    token: str
    offset: int
    sent: list[Sent] = field(default_factory=list)

    def run(self, stop: threading.Event) -> None:
        with httpx.Client(base_url=self.url, headers=bearer(self.token), timeout=15.0) as http:
            for i in range(PER_THREAD):
                if stop.is_set():
                    return
                # 2 000-point loops: long enough that the kill finds requests mid-analysis or mid-commit.
                raw = loop_bytes(self.offset + i, points_per_cycle=1000)
                s = Sent(hashlib.sha256(raw).hexdigest(), raw)
                self.sent.append(s)
                try:
                    r = http.post(f"/api/v1/batches/{self.batch}/measurements", data={"kind": "pe_loop"},
                                  files={"file": (f"f{self.offset + i}.csv", raw, "text/csv")})
                    s.status = r.status_code
                    s.body = r.json() if r.headers.get("content-type", "").startswith("application/json") else None
                except httpx.HTTPError as exc:
                    s.error = f"{type(exc).__name__}: {exc}"
                    return  # the server is gone; an instrument PC would retry later


def test_sigkill_in_the_middle_of_uploads_leaves_a_consistent_store(server_process, db_url, settings, engine_for):
    engine = engine_for(db_url)
    _, batch = seed_batch(engine, settings)
    tokens = [new_token(engine, "upload", f"pc-{i}") for i in range(THREADS)]
    t_start = time.monotonic()
    url = server_process.start()
    print(f"\n[faults] server up in {time.monotonic() - t_start:.1f} s")
    streams = [Stream(url, batch, tokens[i], offset=i * 100) for i in range(THREADS)]
    stop = threading.Event()
    threads = [threading.Thread(target=s.run, args=(stop,), daemon=True) for s in streams]
    for t in threads:
        t.start()

    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if sum(1 for s in streams for x in s.sent if 200 <= x.status < 300) >= KILL_AFTER_OK:
            break
        time.sleep(0.02)
    server_process.kill()
    stop.set()
    for t in threads:
        t.join(timeout=30)
    assert not any(t.is_alive() for t in threads)

    sent = [x for s in streams for x in s.sent]
    ok = [x for x in sent if 200 <= x.status < 300]
    in_flight = [x for x in sent if x.error]
    server_errors = [x for x in sent if x.status >= 500]
    print(f"\n[faults] {len(sent)} posted, {len(ok)} answered 2xx before SIGKILL, {len(in_flight)} cut off")
    assert len(ok) >= KILL_AFTER_OK, server_process.output()
    assert not server_errors, [(x.status, x.body) for x in server_errors]

    if settings.is_sqlite:
        path = make_url(db_url).database
        with sqlite3.connect(path) as conn:  # opening it replays the WAL the killed server left
            assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
            assert conn.execute("PRAGMA foreign_key_check").fetchall() == []

    t_restart = time.monotonic()
    url = server_process.start()  # the same database, a new process
    print(f"[faults] restarted in {time.monotonic() - t_restart:.1f} s")
    writer = make_token_via(engine, "write")
    with httpx.Client(base_url=url, headers=bearer(writer), timeout=30.0) as http:
        for x in ok:
            m = http.get(f"/api/v1/measurements/{x.body['id']}")
            assert m.status_code == 200, f"answered {x.status} before the kill but gone after it: {x.body['id']}"
            assert m.json()["sha256"] == x.sha256
            raw = http.get(f"/api/v1/measurements/{x.body['id']}/raw")
            assert raw.status_code == 200 and hashlib.sha256(raw.content).hexdigest() == x.sha256
        stored = http.get("/api/v1/measurements", params={"batch": batch, "limit": 1000}).json()["items"]
        shas = [m["sha256"] for m in stored]
        assert len(shas) == len(set(shas)), "a file was stored twice"
        assert set(shas) <= {x.sha256 for x in sent}
        # What was cut off may or may not have landed; posting it again settles it, without a duplicate.
        for x in in_flight:
            again = http.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                              files={"file": ("retry.csv", x.raw, "text/csv")}, headers=bearer(tokens[0]))
            assert again.status_code == (200 if x.sha256 in shas else 201), again.text
        fresh = http.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                          files={"file": ("after.csv", loop_bytes(999), "text/csv")}, headers=bearer(tokens[0]))
        assert fresh.status_code == 201, fresh.text
    server_process.stop()

    assert orphans(engine) == {"measurement_without_raw": [], "raw_without_measurement": [], "sha_mismatch": []}
    n_m, n_r = counts(engine)
    assert n_m == n_r == len(set(shas) | {x.sha256 for x in in_flight}) + 1


def make_token_via(engine, scope: str) -> str:
    return new_token(engine, scope, f"{scope}-after-restart")


def test_unreachable_postgresql_answers_503(tmp_path):
    # Port 1 on the loopback: nothing listens there, the connection is refused at once.
    settings = Settings(data_dir=tmp_path, database_url="postgresql+psycopg://remanence@127.0.0.1:1/remanence",
                        secret_key="trust-test-secret", embedded_worker=False).resolved()
    app = create_app(settings)
    try:
        with TestClient(app, raise_server_exceptions=False) as c:
            for method, path, kw in [
                ("GET", "/api/v1/compounds", {"headers": bearer("rmn_anything")}),
                ("POST", "/api/v1/compounds", {"headers": bearer("rmn_anything"), "json": {"smiles": "C"}}),
                ("POST", "/api/v1/batches/RVZ-00001-B01/measurements",
                 {"headers": bearer("rmn_anything"), "data": {"kind": "pe_loop"},
                  "files": {"file": ("a.csv", loop_bytes(1), "text/csv")}}),
            ]:
                t0 = time.perf_counter()
                r = c.request(method, path, **kw)
                assert r.status_code == 503, (method, path, r.status_code, r.text[:300])
                assert r.json() == {"detail": "the database is busy or unreachable; try again in a moment"}
                assert time.perf_counter() - t0 < 10
            page = c.get("/login")
            from tests.factories import csrf_of

            r = c.post("/login", data={"username": "ana", "password": "x" * 10, "csrf_token": csrf_of(page.text)})
            assert r.status_code == 503 and BUSY in r.text and "Traceback" not in r.text
    finally:
        app.state.engine.dispose()


@pytest.fixture
def sqlite_only(sqlite_template, tmp_path) -> str:
    """A migrated SQLite file (not the ``db_url`` fixture: this case has no PostgreSQL twin to skip)."""
    path = tmp_path / "locked.db"
    shutil.copyfile(sqlite_template, path)
    return f"sqlite:///{path}"


def test_locked_sqlite_answers_503_and_recovers(sqlite_only, tmp_path):
    # REMANENCE_SQLITE_BUSY_MS lowered so the test does not wait 15 s per request.
    settings = Settings(data_dir=tmp_path, database_url=sqlite_only, secret_key="trust-test-secret",
                        embedded_worker=False, sqlite_busy_ms=300).resolved()
    app = create_app(settings)
    engine = app.state.engine
    _, batch = seed_batch(engine, settings)
    with sa.orm.Session(engine) as s:
        secret = make_token(s, scope="write", name="locked-pc")
    before = counts(engine)
    engine.dispose()

    holder = sqlite3.connect(make_url(sqlite_only).database, isolation_level=None, timeout=0.1)
    holder.execute("BEGIN EXCLUSIVE")
    try:
        with TestClient(app, raise_server_exceptions=False) as c:
            seen = {}
            for method, path, kw in [
                ("GET", "/api/v1/compounds", {}),
                ("POST", "/api/v1/compounds", {"json": {"smiles": "CCOc1c(OCC)c(OCC)c(OCC)c(OCC)c1OCC"}}),
                ("POST", f"/api/v1/batches/{batch}/measurements",
                 {"data": {"kind": "pe_loop"}, "files": {"file": ("a.csv", loop_bytes(7), "text/csv")}}),
            ]:
                t0 = time.perf_counter()
                r = c.request(method, path, headers=bearer(secret), **kw)
                seen[f"{method} {path}"] = r.status_code
                assert r.status_code in (200, 503), (method, path, r.status_code, r.text[:300])
                if method == "POST":
                    assert r.status_code == 503, (path, r.text)
                if r.status_code == 503:
                    assert r.json()["detail"].startswith(BUSY)
                assert time.perf_counter() - t0 < 10
            print(f"\n[faults] under an exclusive lock: {seen}")
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert counts(engine) == before
    # Once the lock is gone the same upload goes through.
    with TestClient(app) as c:
        r = c.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                   files={"file": ("a.csv", loop_bytes(7), "text/csv")}, headers=bearer(secret))
        assert r.status_code == 201, r.text
    engine.dispose()
