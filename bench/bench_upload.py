"""Benchmark: concurrent instrument uploads against a real server, as a ratio to a no-work baseline.

Starts ``server.app:create_app`` under uvicorn in a child process on 127.0.0.1 (a fresh migrated
SQLite file in a temporary folder, no embedded worker), then from K client threads posts M distinct
P-E loop files of ~2 000 points each (Miller et al. 1990 tanh loop, ``server.synth.ferro``) to
``POST /api/v1/batches/{code}/measurements``, each thread with its own upload token.

Baseline (same run, same server, same bytes, same threads, same token): the same multipart
requests posted to ``/api/v1/batches/NONE/measurements``, a batch that does not exist. That
request pays everything an upload pays *before* the upload's own work: the TCP/HTTP transport of
the same body, multipart parsing of the file (FastAPI parses the form before it resolves the
dependencies), the bearer-token lookup (and its ``last_used_at`` commit) and one batch lookup,
then answers 404. The ratio upload/baseline is therefore the cost of the upload pipeline proper
(read, SHA-256, duplicate check, parse + unit conversion, analysis, insert of raw file and
measurement, verdict and statistics refresh, audit, commit) in units of "receiving the same bytes".
It is not the cost of receiving the bytes at all: there is no endpoint that accepts a body and does
nothing (a trivial echo endpoint would be the cleaner baseline; see the Trust report). The baseline
runs before and after the uploads, and its two medians are averaged, so load drift hits both.

Correctness is checked, not assumed: after the run every file is stored exactly once with the
SHA-256 of what was sent (the raw bytes are downloaded back and hashed), and no request was 5xx.

Usage::

    python bench/bench_upload.py [--uploads M] [--threads K] [--points-per-cycle N]

Prints one markdown table row (and the header) at the end. Percentiles: numpy's default linear
interpolation (Hyndman & Fan 1996, definition 7).
"""

from __future__ import annotations

import argparse
import hashlib
import os
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import httpx  # noqa: E402
import numpy as np  # noqa: E402
from sqlmodel import Session  # noqa: E402

from server.db import make_engine, upgrade  # noqa: E402
from server.ingest.table import to_csv_bytes  # noqa: E402
from server.models import BatchCreate, CompoundCreate  # noqa: E402
from server.services import accounts, registry  # noqa: E402
from server.settings import Settings  # noqa: E402
from server.synth.ferro import miller_loop  # noqa: E402

SMILES = "COc1c(OC)c(OC)c(OC)c(OC)c1OC"  # invented hexa-methoxy benzene (C12H18O6)
CHILD = """
import socket, sys, uvicorn
from server.app import create_app
from server.settings import Settings
sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM, fileno=int(sys.argv[1]))
uvicorn.Server(uvicorn.Config(create_app(Settings.from_env()), log_level="warning", access_log=False,
                              lifespan="on", ws="none", loop="asyncio", http="h11", backlog=512)).run(sockets=[sock])
"""


def loop_file(i: int, points_per_cycle: int) -> bytes:
    frame = miller_loop(10.0, 6.0 + (i % 997) * 0.002, 50.0, 300.0, cycles=2, points_per_cycle=points_per_cycle)
    return to_csv_bytes(frame, {"temperature": "300 K", "frequency": "100 Hz", "sample": f"bench-{i}"})


def server_env(db_url: str, data_dir: Path) -> dict[str, str]:
    """The environment of a benchmarked server process: this one's, without its REMANENCE_ settings, plus the bench's."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("REMANENCE_")}
    env.update(REMANENCE_DATABASE_URL=db_url, REMANENCE_DATA_DIR=str(data_dir), REMANENCE_EMBEDDED_WORKER="false",
               REMANENCE_SECRET_KEY="bench-secret-not-for-production", PYTHONPATH=str(ROOT), OMP_NUM_THREADS="1")
    return env


def wait_healthy(proc: subprocess.Popen, url: str, log: Path, name: str, *, timeout_s: float) -> None:
    """Wait until ``url``/healthz answers 200; a process that exits or never answers ends the bench with its log."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"{name} exited: {log.read_text()[-2000:]}")
        try:
            if httpx.get(f"{url}/healthz", timeout=1.0).status_code == 200:
                return
        except httpx.TransportError:
            pass
        time.sleep(0.1)
    proc.kill()
    raise SystemExit(f"{name} did not start within {timeout_s:g} s")


def start_server(db_url: str, data_dir: Path) -> tuple[subprocess.Popen, str, Path]:
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    env = server_env(db_url, data_dir)
    log = data_dir / "server.log"
    with open(log, "wb") as out:
        proc = subprocess.Popen([sys.executable, "-c", CHILD, str(sock.fileno())], cwd=ROOT, env=env,
                                pass_fds=(sock.fileno(),), stdout=out, stderr=subprocess.STDOUT)
    sock.close()
    url = f"http://127.0.0.1:{port}"
    wait_healthy(proc, url, log, "server", timeout_s=60)
    return proc, url, log


def post_all(url: str, batch: str, files: list[bytes], tokens: list[str], timeout_s: float) -> tuple[float, list]:
    """Post files[i] from thread i % K; returns (wall s, [(status, latency s, body or error)])."""
    k = len(tokens)
    results: list = [None] * len(files)
    barrier = threading.Barrier(k)

    def worker(t: int) -> None:
        with httpx.Client(base_url=url, timeout=timeout_s, headers={"Authorization": f"Bearer {tokens[t]}"}) as http:
            barrier.wait(timeout=30)
            for i in range(t, len(files), k):
                t0 = time.perf_counter()
                try:
                    r = http.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                                  files={"file": (f"loop-{i}.csv", files[i], "text/csv")})
                    body = r.json() if r.headers.get("content-type", "").startswith("application/json") else r.text
                    results[i] = (r.status_code, time.perf_counter() - t0, body)
                except httpx.HTTPError as exc:
                    results[i] = (0, time.perf_counter() - t0, f"{type(exc).__name__}: {exc}")

    threads = [threading.Thread(target=worker, args=(t,), daemon=True) for t in range(k)]
    t0 = time.perf_counter()
    for th in threads:
        th.start()
    for th in threads:
        th.join(timeout=timeout_s * (len(files) // k + 2))
    wall = time.perf_counter() - t0
    if any(th.is_alive() for th in threads):
        raise SystemExit("client threads still running past their time limit")
    return wall, results


def pct(values, q: float) -> float:
    return float(np.percentile(np.asarray(values, dtype=float), q))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--uploads", type=int, default=60, help="M: files to upload (distinct)")
    parser.add_argument("--threads", type=int, default=6, help="K: concurrent client threads (one token each)")
    parser.add_argument("--points-per-cycle", type=int, default=1000, help="2 cycles: ~2x this many points a file")
    parser.add_argument("--timeout", type=float, default=120.0, help="per-request timeout, s")
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="remanence-bench-") as tmp:
        folder = Path(tmp)
        db_url = f"sqlite:///{folder / 'remanence.db'}"
        upgrade(db_url)
        settings = Settings(data_dir=folder, database_url=db_url, secret_key="bench", embedded_worker=False).resolved()
        engine = make_engine(db_url)
        with Session(engine) as s:
            c = registry.register_compound(session=s, settings=settings, data=CompoundCreate(smiles=SMILES),
                                           actor="bench")
            batch = registry.add_batch(session=s, compound=c, data=BatchCreate(chemist="bench"), actor="bench").code
            tokens = [accounts.create_token(session=s, name=f"bench-pc-{t}", scope="upload", actor="bench")[1]
                      for t in range(args.threads)]
            writer = accounts.create_token(session=s, name="bench-check", scope="write", actor="bench")[1]
        engine.dispose()

        files = [loop_file(i, args.points_per_cycle) for i in range(args.uploads)]
        warm = [loop_file(10_000 + i, args.points_per_cycle) for i in range(args.threads)]
        n_points = files[0].count(b"\n") - 4
        proc, url, log = start_server(db_url, folder)
        try:
            post_all(url, batch, warm, tokens, args.timeout)  # imports, caches, first analysis: not timed
            wall_b1, base1 = post_all(url, "NONE", files, tokens, args.timeout)
            wall_u, ups = post_all(url, batch, files, tokens, args.timeout)
            wall_b2, base2 = post_all(url, "NONE", files, tokens, args.timeout)

            bad = [(i, r) for i, r in enumerate(ups) if r is None or r[0] not in (200, 201)]
            bad_base = [r for r in base1 + base2 if r is None or r[0] != 404]
            with httpx.Client(base_url=url, timeout=args.timeout, headers={"Authorization": f"Bearer {writer}"}) as h:
                listed = h.get("/api/v1/measurements", params={"batch": batch, "limit": 1000}).json()["items"]
                stored = {m["sha256"]: m["id"] for m in listed}
                lost = 0
                for raw in files:
                    sha = hashlib.sha256(raw).hexdigest()
                    if sha not in stored:
                        lost += 1
                        continue
                    back = h.get(f"/api/v1/measurements/{stored[sha]}/raw").content
                    lost += hashlib.sha256(back).hexdigest() != sha
                duplicates = len(listed) - len(stored)
        finally:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()

    lat_u = [r[1] for r in ups if r]
    lat_b = [r[1] for r in base1 + base2 if r]
    rate_u = len(files) / wall_u
    rate_b = 2 * len(files) / (wall_b1 + wall_b2)
    p50_b = (pct([r[1] for r in base1], 50) + pct([r[1] for r in base2], 50)) / 2
    ratio = pct(lat_u, 50) / p50_b
    ok = not bad and not bad_base and lost == 0 and duplicates == 0 and len(listed) == len(files) + len(warm)

    print(f"server: uvicorn (1 process) on 127.0.0.1, SQLite, {args.threads} client threads, "
          f"{len(files)} files of {n_points} points ({len(files[0]) / 1024:.0f} KiB each)")
    if bad:
        print("upload failures:", [(i, r[0] if r else None, str(r[2])[:200] if r else None) for i, r in bad[:5]])
    if bad_base:
        print("baseline answers other than 404:", [(r[0], str(r[2])[:200]) for r in bad_base[:5]])
    print("| benchmark | uploads | threads | points/file | uploads/s | p50 ms | p95 ms | baseline req/s "
          "| baseline p50 ms | baseline p95 ms | p50 ratio upload/baseline | lost | duplicates | ok |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    print(f"| upload pe_loop | {len(files)} | {args.threads} | {n_points} | {rate_u:.1f} | {pct(lat_u, 50) * 1e3:.0f} "
          f"| {pct(lat_u, 95) * 1e3:.0f} | {rate_b:.1f} | {p50_b * 1e3:.0f} | {pct(lat_b, 95) * 1e3:.0f} "
          f"| {ratio:.1f} | {lost} | {duplicates} | {'yes' if ok else 'NO'} |")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
