"""Benchmark: uploads spread over two ``remanence serve`` processes on one PostgreSQL database,
as a ratio to the same uploads through one of them (the group-server layout, issue 21 item 5).

A database is created for the run on the server of ``--pg-url`` (default ``REMANENCE_TEST_PG_URL``)
and dropped after it. Two app processes are started with ``python -m server.cli serve`` on the same
environment. Three rounds over the same kind of files (distinct bytes every round, ~2 000-point P-E
loops from ``bench/bench_upload.py``, K client threads, one upload token each): through process A
alone, spread over A and B (thread t posts to process t % 2), then A alone again; the two one-process
rounds are averaged so that load drift hits both sides. The ratio is uploads/s (two processes) over
uploads/s (one). On a 2-core machine with the database on it expect about 1: the processes share the
cores; the figure tells whether a second process costs anything, not how a bigger host scales.

Correctness is checked, not assumed: every file is stored exactly once (listed once, SHA-256 equal
to what was sent), and no request was 5xx.

Usage::

    python bench/bench_group.py [--uploads M] [--threads K] [--pg-url URL]
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
import time
import uuid
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import sqlalchemy as sa  # noqa: E402
from sqlalchemy.engine import make_url  # noqa: E402
from sqlmodel import Session  # noqa: E402

from bench.bench_upload import SMILES, loop_file, post_all, server_env, wait_healthy  # noqa: E402
from server.db import make_engine, upgrade  # noqa: E402
from server.models import BatchCreate, CompoundCreate  # noqa: E402
from server.services import accounts, registry  # noqa: E402
from server.settings import Settings  # noqa: E402


def start_serve(db_url: str, data_dir: Path, name: str) -> tuple[subprocess.Popen, str]:
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    sock.close()  # `remanence serve` binds by number
    env = server_env(db_url, data_dir)
    log = data_dir / f"{name}.log"
    with open(log, "wb") as out:
        proc = subprocess.Popen([sys.executable, "-m", "server.cli", "serve", "--host", "127.0.0.1", "--port",
                                 str(port), "--log-level", "warning"], cwd=ROOT, env=env, stdout=out,
                                stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    wait_healthy(proc, url, log, name, timeout_s=120)
    return proc, url


def spread(urls: list[str], batch: str, files: list[bytes], tokens: list[str], timeout_s: float):
    """post_all with thread t posting to urls[t % len(urls)] (one client each, as behind a proxy)."""
    if len(urls) == 1:
        return post_all(urls[0], batch, files, tokens, timeout_s)
    # post_all takes one URL; run one post_all per process at once, each with its share of threads and files.
    import threading

    out: dict[int, tuple] = {}
    k = len(urls)

    def one(j: int) -> None:
        out[j] = post_all(urls[j], batch, files[j::k], tokens[j::k], timeout_s)

    threads = [threading.Thread(target=one, args=(j,)) for j in range(k)]
    t0 = time.perf_counter()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    wall = time.perf_counter() - t0
    return wall, [r for j in range(k) for r in out[j][1]]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--uploads", type=int, default=40, help="M: files per round (distinct)")
    parser.add_argument("--threads", type=int, default=4, help="K: concurrent client threads (one token each)")
    parser.add_argument("--points-per-cycle", type=int, default=1000)
    parser.add_argument("--timeout", type=float, default=120.0, help="per-request timeout, s")
    parser.add_argument("--pg-url", default=os.environ.get("REMANENCE_TEST_PG_URL", ""),
                        help="a PostgreSQL server URL whose user may create databases")
    args = parser.parse_args(argv)
    if not args.pg_url:
        print("bench_group needs PostgreSQL: give --pg-url or set REMANENCE_TEST_PG_URL")
        return 2

    server_url = make_url(args.pg_url)
    name = f"remanence_bench_{uuid.uuid4().hex[:10]}"
    admin = sa.create_engine(server_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    procs: list[tuple[subprocess.Popen, str]] = []
    try:
        db_url = server_url.set(database=name).render_as_string(hide_password=False)
        upgrade(db_url)
        with tempfile.TemporaryDirectory(prefix="remanence-bench-group-") as tmp:
            folder = Path(tmp)
            settings = Settings(data_dir=folder, database_url=db_url, secret_key="bench",
                                embedded_worker=False).resolved()
            engine = make_engine(db_url)
            with Session(engine) as s:
                c = registry.register_compound(session=s, settings=settings, data=CompoundCreate(smiles=SMILES),
                                               actor="bench")
                batch = registry.add_batch(session=s, compound=c, data=BatchCreate(chemist="bench"), actor="bench").code
                tokens = [accounts.create_token(session=s, name=f"bench-pc-{t}", scope="upload", actor="bench")[1]
                          for t in range(args.threads)]
            for label in ("a", "b"):
                proc, url = start_serve(db_url, folder, f"serve-{label}")
                procs.append((proc, url))
            urls = [u for _, u in procs]
            rounds = {}
            sent = [loop_file(90_000 + i, args.points_per_cycle) for i in range(2 * args.threads)]
            spread(urls, batch, sent, tokens, args.timeout)  # imports and first analyses in both: not timed
            for r, (label, targets) in enumerate([("one-1", urls[:1]), ("two", urls), ("one-2", urls[:1])]):
                files = [loop_file(r * 10_000 + i, args.points_per_cycle) for i in range(args.uploads)]
                sent += files
                rounds[label] = spread(targets, batch, files, tokens, args.timeout)
            with engine.connect() as conn:
                stored = conn.execute(sa.text("SELECT sha256 FROM measurement")).scalars().all()
            engine.dispose()
    finally:
        for proc, _ in procs:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()

    bad = [res for _, results in rounds.values() for res in results if res is None or res[0] not in (200, 201)]
    shas = [hashlib.sha256(f).hexdigest() for f in sent]
    lost = len(set(shas) - set(stored))
    duplicates = len(stored) - len(set(stored))
    rate = {k: args.uploads / wall for k, (wall, _) in rounds.items()}
    one = (rate["one-1"] + rate["one-2"]) / 2
    ok = not bad and lost == 0 and duplicates == 0
    print(f"two `remanence serve` processes on one PostgreSQL database, {args.threads} client threads, "
          f"{args.uploads} files a round")
    print("| benchmark | uploads/s two processes | uploads/s one process | ratio two/one | lost | duplicates | ok |")
    print("|---|---|---|---|---|---|---|")
    print(f"| group upload pe_loop | {rate['two']:.1f} | {one:.1f} | {rate['two'] / one:.2f} | {lost} | {duplicates} "
          f"| {'yes' if ok else 'NO'} |")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
