"""Benchmark: the registry table page served by the app against the same query and render done directly.

Measured: ``GET /compounds?chain_kind=alkoxy&c_min=6&sort=barrier&dir=desc`` with
``HX-Request: true`` (the htmx swap of the table) sent with httpx to a real uvicorn server
(``remanence serve`` in a child process on 127.0.0.1, logged in as a viewer through the
login form), on a SQLite registry of 10 000 compounds and 50 000 measurements seeded by
:mod:`bench.seed`. Time per request at the client: connection reuse, HTTP parsing, session
cookie, actor lookup, the handler's filter choices, the query and the render.

Baseline, in this process on the same database file: ``server.services.views.parse_view``
+ ``query_view`` on a fresh Session, and ``templates/partials/compound_table.html``
rendered with a plain Jinja2 environment (the app's filters installed), no FastAPI.

Figures: ratio median(app) / median(direct) (target <= 1.5) and the app's p95 latency
(target < 50 ms). Both sides alternate in rounds (bench.common.paired) so load from other
users of the machine falls on both; the two answers are checked to list the same rows.

Usage::

    python -m bench registry [--quick]
"""

from __future__ import annotations

import os
import re
import secrets
import socket
import subprocess
import sys
import tempfile
import time
from collections import defaultdict
from pathlib import Path

import httpx
import jinja2
from bs4 import BeautifulSoup
from sqlalchemy import event
from sqlmodel import Session

from server.db import make_engine
from server.access import Actor
from server.services import views
from server.package_files import templates_dir
from server.settings import PROJECT_ROOT
from server.web import format as format_filters

from . import seed
from .common import Row, Section, fmt_s, median, paired, top_costs

QUERY = {"chain_kind": "alkoxy", "c_min": "6", "sort": "barrier", "dir": "desc"}
PATH = "/compounds?chain_kind=alkoxy&c_min=6&sort=barrier&dir=desc"


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """``remanence serve`` on 127.0.0.1 in a child process, for the length of a ``with`` block."""

    def __init__(self, database_url: str) -> None:
        self.database_url = database_url
        self.port = _free_port()
        self.base_url = f"http://127.0.0.1:{self.port}"
        self._tmp = tempfile.TemporaryDirectory(prefix="remanence-bench-")
        self.log_path = Path(self._tmp.name) / "server.log"
        self.proc: subprocess.Popen | None = None

    def __enter__(self) -> "Server":
        env = dict(os.environ)
        env.update(REMANENCE_DATABASE_URL=self.database_url, REMANENCE_DATA_DIR=self._tmp.name,
                   REMANENCE_SECRET_KEY=secrets.token_urlsafe(32), REMANENCE_EMBEDDED_WORKER="false")
        self._log = open(self.log_path, "wb")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "server.cli", "serve", "--host", "127.0.0.1", "--port", str(self.port),
             "--log-level", "warning"],
            cwd=PROJECT_ROOT, env=env, stdout=self._log, stderr=subprocess.STDOUT)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"the server exited with {self.proc.returncode}: {self.log()}")
            try:
                if httpx.get(self.base_url + "/healthz", timeout=1.0).status_code == 200:
                    return self
            except httpx.TransportError:
                pass
            time.sleep(0.2)
        raise RuntimeError(f"the server did not answer /healthz within 60 s: {self.log()}")

    def log(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")[-2000:]
        except OSError as exc:
            return f"(no log: {exc})"

    def __exit__(self, *exc) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=5)
        self._log.close()
        self._tmp.cleanup()


def login(client: httpx.Client, username: str, password: str) -> None:
    page = client.get("/login")
    meta = BeautifulSoup(page.text, "html.parser").find("meta", attrs={"name": "csrf-token"})
    if meta is None:
        raise RuntimeError("the login page carries no csrf-token meta tag")
    resp = client.post("/login", data={"username": username, "password": password, "csrf_token": meta["content"],
                                       "next": "/compounds"})
    if resp.status_code != 303:
        raise RuntimeError(f"bench login failed: {resp.status_code} {resp.text[:300]}")


def direct_renderer(database_url: str):
    """(render(), engine, query_only(), template_only()): the same query and partial, without FastAPI.

    ``query_only`` is the query alone, ``template_only`` the render of one fixed result alone.
    """
    engine = make_engine(database_url)
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(templates_dir())),
                             autoescape=jinja2.select_autoescape())
    format_filters.install(env)
    template = env.get_template("partials/compound_table.html")
    actor = Actor(kind="user", name=seed.BENCH_USER, role="viewer")

    def render() -> str:
        with Session(engine) as session:
            q = views.parse_view(QUERY)
            result = views.query_view(session, q, actor=actor)
            return template.render(result=result, q=q, error=None, sorts=views.SORTS,
                                   link=q.link(), actor=actor, csrf_token="")

    def query_only() -> views.ViewResult:
        with Session(engine) as session:
            return views.query_view(session, views.parse_view(QUERY), actor=actor)

    fixed = query_only()

    def template_only() -> str:
        return template.render(result=fixed, q=fixed.query, error=None, sorts=views.SORTS,
                               link=fixed.query.link(), actor=actor, csrf_token="")

    return render, engine, query_only, template_only


def sql_breakdown(engine, fn, *, runs: int = 10) -> list[str]:
    """Median time of each SQL statement ``fn`` sends (cursor.execute, where SQLite runs it to the first row),
    and SQLite's plan of the slowest."""
    times: dict[str, list[float]] = defaultdict(list)
    last: dict[str, tuple[str, object]] = {}

    def before(conn, cursor, statement, parameters, context, executemany):  # noqa: ANN001 - SQLAlchemy event
        conn.info["bench_t0"] = time.perf_counter()

    def after(conn, cursor, statement, parameters, context, executemany):  # noqa: ANN001 - SQLAlchemy event
        label = " ".join(statement.split())[:48] + "..."
        times[label].append(time.perf_counter() - conn.info.pop("bench_t0"))
        last[label] = (statement, parameters)

    event.listen(engine, "before_cursor_execute", before)
    event.listen(engine, "after_cursor_execute", after)
    try:
        for _ in range(runs):
            fn()
    finally:
        event.remove(engine, "before_cursor_execute", before)
        event.remove(engine, "after_cursor_execute", after)
    out = [f"{fmt_s(median(v))}  {label} (x{len(v) // runs} per page)" for label, v in times.items()]
    slowest = max(times, key=lambda k: median(times[k]))
    if engine.dialect.name == "sqlite":
        statement, parameters = last[slowest]
        with engine.connect() as conn:
            plan = conn.exec_driver_sql(f"EXPLAIN QUERY PLAN {statement}", parameters).all()
        out.append("plan of the slowest: " + "; ".join(str(row[-1]) for row in plan))
    return out


def _codes(html: str) -> list[str]:
    return [tr["data-code"] for tr in BeautifulSoup(html, "html.parser").select("table.registry tbody tr")]


def run(quick: bool = False) -> Section:
    n, m = (2_000, 10_000) if quick else (10_000, 50_000)
    rounds, inner = (6, 5) if quick else (10, 10)
    section = Section("registry")
    t0 = time.perf_counter()
    info = seed.seeded_sqlite(n, m)
    section.details.append(f"Seeded SQLite registry: {n} compounds, {m} measurements "
                           f"(ready in {time.perf_counter() - t0:.1f} s; cached under bench/results/).")
    render, engine, query_only, template_only = direct_renderer(info.url)
    try:
        with Server(info.url) as server, httpx.Client(base_url=server.base_url, timeout=30.0) as client:
            login(client, info.username, info.password)
            headers = {"HX-Request": "true"}

            def app_page() -> str:
                resp = client.get(PATH, headers=headers)
                if resp.status_code != 200:
                    raise RuntimeError(f"GET {PATH}: {resp.status_code} {resp.text[:300]}")
                return resp.text

            served, direct = app_page(), render()
            if "<html" in served.lower():
                raise RuntimeError("the app answered the htmx request with a full page, not the table partial")
            codes_app, codes_direct = _codes(served), _codes(direct)
            if codes_app != codes_direct or len(codes_app) != 50:
                raise RuntimeError(f"app and direct render disagree: {codes_app[:5]}... vs {codes_direct[:5]}...")
            total = re.search(r'data-total="(\d+)"', direct)
            section.details.append(
                f"Both answers list the same 50 rows (of {total.group(1) if total else '?'} matching); "
                f"bodies byte-identical: {'yes' if served == direct else 'no'}.")
            app_t, direct_t = paired(app_page, render, rounds=rounds, inner=inner, warmup=3)
            query_t, template_t = paired(query_only, template_only, rounds=max(4, rounds // 2), inner=inner // 2 or 1)
            sql = sql_breakdown(engine, query_only)
            costs = top_costs(render, n=5)
    finally:
        engine.dispose()
    ratio = app_t.median_s / direct_t.median_s
    section.rows.append(Row(
        benchmark=f"registry page, {n // 1000}k compounds / {m // 1000}k measurements (app / direct, median)",
        measured=f"{fmt_s(app_t.median_s)} (n={app_t.n})", baseline=f"{fmt_s(direct_t.median_s)} (n={direct_t.n})",
        ratio=ratio, target=("<=", 1.5)))
    section.rows.append(Row(
        benchmark="registry page, app p95 latency (ms)",
        measured=f"p95 {fmt_s(app_t.p95_s)}", baseline=f"direct p95 {fmt_s(direct_t.p95_s)}",
        ratio=app_t.p95_s * 1000, target=("<=", 50.0), ratio_text=f"{app_t.p95_s * 1000:.1f} ms"))
    section.details.append(
        f"App {fmt_s(app_t.median_s)} median / {fmt_s(app_t.p95_s)} p95; direct query+render "
        f"{fmt_s(direct_t.median_s)} median / {fmt_s(direct_t.p95_s)} p95; the app adds "
        f"{fmt_s(app_t.median_s - direct_t.median_s)} per request (HTTP, session, actor lookup, filter choices).")
    section.details.append(
        f"The direct path in parts (timed again, alternated): views.query_view (count + sorted page, ORM rows) "
        f"{fmt_s(query_t.median_s)} median, the Jinja2 render of its result {fmt_s(template_t.median_s)}.")
    section.details.append("SQL of one page (median over 10 pages):")
    section.details.extend(f"    {line}" for line in sql)
    section.details.append("One direct run, by own time (cProfile):")
    section.details.extend(f"    {line}" for line in costs)
    return section


if __name__ == "__main__":
    from .__main__ import main

    raise SystemExit(main(["registry", *sys.argv[1:]]))
