"""Helpers for the tests that attack the running system (access, bad input, load, faults, schema fuzz).

* :func:`loop_bytes` makes distinct, valid P-E loop files (Miller et al. 1990 tanh loop from
  ``server.synth.ferro``) so that concurrent uploads never collide on their SHA-256 by accident.
* :func:`seed_batch` registers one invented compound and a batch through the services.
* :func:`thread_server` serves an app with uvicorn in a thread on a socket bound to 127.0.0.1
  (the approach of ``tests/browser/conftest.py``).
* :class:`ServerProcess` runs the server as a real child process (so it can be SIGKILLed), on a
  socket the test binds on 127.0.0.1 and hands over, with the settings in its environment.
* :class:`CliProcess` runs ``remanence serve`` or ``remanence worker`` itself, as a service manager
  would (the group-server layout: several of each on one PostgreSQL database).
* :func:`counts` and :func:`orphans` read the storage through a fresh connection, never through a
  long-lived session (a SQLite read transaction would keep an old snapshot).

Every network target here is 127.0.0.1; every loop is bounded in count and in time.
"""

from __future__ import annotations

import contextlib
import itertools
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator, Optional

import httpx
import pytest
import sqlalchemy as sa
from sqlmodel import Session

from server.ingest.table import to_csv_bytes
from server.models import BatchCreate, CompoundCreate
from server.services import accounts, registry
from server.settings import Settings
from server.synth.ferro import miller_loop

ROOT = Path(__file__).resolve().parents[2]

# An invented hexa-methoxy benzene test compound (C12H18O6), as in tests/api/test_measurements.py.
SMILES = "COc1c(OC)c(OC)c(OC)c(OC)c1OC"


def loop_bytes(i: int, *, points_per_cycle: int = 200, instrument: str = "bench") -> bytes:
    """A valid Miller-loop CSV, different for every ``i`` (Pr and a metadata line both vary)."""
    frame = miller_loop(10.0, 6.0 + (i % 97) * 0.02, 50.0, 300.0, points_per_cycle=points_per_cycle, cycles=2)
    return to_csv_bytes(frame, {"temperature": "300 K", "frequency": "100 Hz", "sample": f"{instrument}-{i}"})


def seed_batch(engine, settings: Settings, smiles: str = SMILES, **compound) -> tuple[str, str]:
    """Register a compound and one batch; returns (compound code, batch code)."""
    with Session(engine) as s:
        c = registry.register_compound(session=s, settings=settings, data=CompoundCreate(smiles=smiles, **compound),
                                       actor="trust-test")
        b = registry.add_batch(session=s, compound=c, data=BatchCreate(chemist="lab"), actor="trust-test")
        return c.code, b.code


def new_token(engine, scope: str, name: str, kinds=None) -> str:
    with Session(engine) as s:
        _, secret = accounts.create_token(session=s, name=name, scope=scope, kinds=kinds, actor="trust-test")
    return secret


def counts(engine) -> tuple[int, int]:
    """(measurements, raw files) as committed now."""
    with engine.connect() as conn:
        m = conn.execute(sa.text("SELECT count(*) FROM measurement")).scalar_one()
        r = conn.execute(sa.text("SELECT count(*) FROM rawfile")).scalar_one()
    return int(m), int(r)


def orphans(engine) -> dict[str, list]:
    """Measurements without their raw file, raw files no measurement points to, sha256 mismatches."""
    with engine.connect() as conn:
        no_raw = conn.execute(sa.text(
            "SELECT m.id FROM measurement m LEFT JOIN rawfile r ON r.id = m.raw_file_id WHERE r.id IS NULL"
        )).scalars().all()
        unused = conn.execute(sa.text(
            "SELECT r.id FROM rawfile r WHERE NOT EXISTS (SELECT 1 FROM measurement m WHERE m.raw_file_id = r.id)"
        )).scalars().all()
        mismatch = conn.execute(sa.text(
            "SELECT m.id FROM measurement m JOIN rawfile r ON r.id = m.raw_file_id WHERE r.sha256 <> m.sha256"
        )).scalars().all()
    return {"measurement_without_raw": list(no_raw), "raw_without_measurement": list(unused),
            "sha_mismatch": list(mismatch)}


def bound_socket() -> socket.socket:
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", 0))
    return sock


@contextlib.contextmanager
def thread_server(app, *, start_timeout_s: float = 15.0) -> Iterator[str]:
    """Serve ``app`` with uvicorn in a background thread on 127.0.0.1; yields the base URL."""
    import uvicorn

    sock = bound_socket()
    port = sock.getsockname()[1]
    config = uvicorn.Config(app, log_level="warning", access_log=False, lifespan="on", ws="none",
                            loop="asyncio", http="h11", backlog=256)
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, name="uvicorn-trust", daemon=True)
    thread.start()
    deadline = time.monotonic() + start_timeout_s
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            server.should_exit = True
            pytest.fail("the uvicorn server thread did not start")
        time.sleep(0.02)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=15)
        sock.close()


# The child: the settings come from the environment (as `remanence serve` reads them), served with
# the same uvicorn configuration as `remanence serve` (server/serving.py: header, body and keep-alive
# deadlines); the listening socket is inherited by file descriptor, so the port is ours without a race.
CHILD = """
import socket, sys, uvicorn
from server.app import create_app
from server.serving import uvicorn_config
from server.settings import Settings
sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM, fileno=int(sys.argv[1]))
settings = Settings.from_env()
app = create_app(settings)
uvicorn.Server(uvicorn_config(app, settings, log_level="warning", access_log=False, lifespan="on",
                              loop="asyncio", backlog=256)).run(sockets=[sock])
"""


def child_env(database_url: str, data_dir: Path, extra: Optional[dict[str, str]] = None) -> dict[str, str]:
    """The environment of a server or worker child: the settings an administrator's env file would set."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("REMANENCE_")}
    env.update(REMANENCE_DATABASE_URL=database_url, REMANENCE_DATA_DIR=str(data_dir),
               REMANENCE_EMBEDDED_WORKER="false", REMANENCE_SECRET_KEY="trust-test-secret-not-for-production",
               PYTHONPATH=str(ROOT), OMP_NUM_THREADS="1")
    env.update(extra or {})
    return env


@dataclass
class CliProcess:
    """``remanence serve`` or ``remanence worker`` as the administrator starts it (``python -m server.cli``).

    ``serve`` listens on a port picked free just before the start (the command binds by number, not
    by an inherited socket); should another program take it in between, the start is tried again on
    a new port, at most three times.
    """

    command: str  # "serve" or "worker"
    database_url: str
    data_dir: Path
    name: str
    extra_env: dict[str, str] = field(default_factory=dict)
    proc: Optional[subprocess.Popen] = None
    url: str = ""
    logfile: Optional[Path] = None

    def _popen(self, args: list[str]) -> None:
        self.logfile = self.data_dir / f"{self.name}.log"
        with open(self.logfile, "ab") as out:
            self.proc = subprocess.Popen([sys.executable, "-m", "server.cli", *args], cwd=ROOT,
                                         env=child_env(self.database_url, self.data_dir, self.extra_env),
                                         stdout=out, stderr=subprocess.STDOUT)

    def start(self, timeout_s: float = 120.0) -> "CliProcess":
        if self.command == "worker":
            self._popen(["worker", "--name", self.name])
            return self
        for _attempt in range(3):
            sock = bound_socket()
            port = sock.getsockname()[1]
            sock.close()
            self._popen(["serve", "--host", "127.0.0.1", "--port", str(port), "--log-level", "warning"])
            self.url = f"http://127.0.0.1:{port}"
            deadline = time.monotonic() + timeout_s
            while time.monotonic() < deadline and self.proc.poll() is None:
                try:
                    if httpx.get(f"{self.url}/healthz", timeout=1.0).status_code == 200:
                        return self
                except httpx.TransportError:
                    pass
                time.sleep(0.1)
            if self.proc.poll() is None:
                self.stop()
                pytest.fail(f"{self.name} did not answer /healthz within {timeout_s} s:\n{self.output()}")
            if "address already in use" not in self.output().lower():
                pytest.fail(f"{self.name} exited with {self.proc.returncode}:\n{self.output()}")
        pytest.fail(f"{self.name}: no free port after three tries")

    def alive(self) -> bool:
        return self.proc is not None and self.proc.poll() is None

    def stop(self) -> None:
        if self.alive():
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                os.kill(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout=10)

    def output(self) -> str:
        return self.logfile.read_text(errors="replace")[-4000:] if self.logfile and self.logfile.exists() else ""


@dataclass
class ServerProcess:
    """The server as a child process on a SQLite file or a PostgreSQL database (already migrated)."""

    database_url: str
    data_dir: Path
    extra_env: dict[str, str] = field(default_factory=dict)
    proc: Optional[subprocess.Popen] = None
    url: str = ""
    log: list[Path] = field(default_factory=list)
    _n: itertools.count = field(default_factory=lambda: itertools.count(1))

    def env(self) -> dict[str, str]:
        return child_env(self.database_url, self.data_dir, self.extra_env)

    def start(self, timeout_s: float = 120.0) -> str:
        assert self.proc is None or self.proc.poll() is not None, "already running"
        sock = bound_socket()
        port = sock.getsockname()[1]
        logfile = self.data_dir / f"server-{next(self._n)}.log"
        self.log.append(logfile)
        with open(logfile, "wb") as out:
            self.proc = subprocess.Popen([sys.executable, "-c", CHILD, str(sock.fileno())], cwd=ROOT, env=self.env(),
                                         pass_fds=(sock.fileno(),), stdout=out, stderr=subprocess.STDOUT)
        sock.close()  # the child holds the only copy: once it dies the port refuses at once
        self.url = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                pytest.fail(f"server exited with {self.proc.returncode}:\n{self.output()}")
            try:
                if httpx.get(f"{self.url}/healthz", timeout=1.0).status_code == 200:
                    return self.url
            except httpx.TransportError:
                pass
            time.sleep(0.1)
        self.stop()
        pytest.fail(f"server did not answer /healthz within {timeout_s} s:\n{self.output()}")

    def kill(self) -> None:
        """SIGKILL: no shutdown hooks, no flush, transactions in flight simply stop."""
        if self.proc is not None and self.proc.poll() is None:
            os.kill(self.proc.pid, signal.SIGKILL)
            self.proc.wait(timeout=10)

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.kill()

    def output(self) -> str:
        return "\n".join(p.read_text(errors="replace")[-4000:] for p in self.log if p.exists())


@pytest.fixture
def server_process(db_url, tmp_path) -> Iterator[ServerProcess]:
    sp = ServerProcess(database_url=db_url, data_dir=tmp_path)
    try:
        yield sp
    finally:
        sp.stop()
