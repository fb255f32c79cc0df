"""Run the ratio benchmarks and write bench/results/latest.md.

    python -m bench                       all benchmarks (about 7 minutes on a 2-core machine)
    python -m bench registry search       only these (registry, search, analysis, crystal, estimate, upload, group)
    python -m bench --quick               smaller sizes, for a check that everything runs
    python -m bench search --large        search also over 100 000 molecules (several minutes more)

Each benchmark hands back rows {benchmark, measured, baseline, ratio, target, verdict};
the table is printed and written, with the details of each benchmark, to
bench/results/latest.md (or --output). The exit status is 1 when a benchmark failed to
run (its traceback is in the report), 0 otherwise: a missed target is a result, not an error.
"""

from __future__ import annotations

import argparse
import os
import platform
import re
import sqlite3
import subprocess
import sys
import time
import traceback
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable

from .common import RESULTS_DIR, Row, Section, ratio_text

BENCH_DIR = Path(__file__).resolve().parent
NAMES = ("registry", "search", "analysis", "crystal", "estimate", "upload", "group")


# ------------------------------------------------------------------ benchmarks kept as scripts


def _script(name: str) -> Path:
    return BENCH_DIR / f"bench_{name}.py"


def run_estimate(quick: bool) -> Section:
    """bench/bench_estimate.py in a child process (it pins OMP_NUM_THREADS before tblite loads)."""
    section = Section("estimate")
    cmd = [sys.executable, str(_script("estimate")), "--repeat-singlepoint", "3" if quick else "5"]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=BENCH_DIR.parent)
    out = proc.stdout
    section.details.append("Output of bench/bench_estimate.py:")
    section.details.extend(f"    {line}" for line in out.strip().splitlines())
    if proc.returncode != 0:
        section.details.extend(f"    {line}" for line in proc.stderr.strip().splitlines()[-15:])
        section.rows.append(Row("GFN2-xTB estimate / single point", "—", "—", None,
                                verdict_override=f"failed (exit {proc.returncode})"))
        return section
    est = re.search(r"estimate wall time ([\d.]+) s", out)
    sp = re.search(r"single point \+ gradient \(fresh SCF\): ([\d.]+) ms", out)
    evals = re.search(r"gradient evaluations (\d+)", out)
    if not (est and sp):
        raise RuntimeError("bench_estimate.py printed no 'estimate wall time' / 'single point' lines; "
                           "its output format changed")
    t_est, t_sp = float(est.group(1)), float(sp.group(1)) / 1000
    section.rows.append(Row(
        benchmark=f"GFN2-xTB bowl-inversion estimate, hexa-OMe bowl ({evals.group(1) if evals else '?'} gradient "
                  "evaluations) / one fresh single point",
        measured=f"{t_est:.3g} s", baseline=f"{t_sp * 1000:.3g} ms", ratio=t_est / t_sp, target=None))
    return section


def _markdown_rows(text: str) -> list[dict[str, str]]:
    """Rows of the last markdown table in ``text`` that has a 'ratio' column, as header -> cell."""
    tables: list[list[list[str]]] = []
    current: list[list[str]] = []
    for line in text.splitlines():
        if line.strip().startswith("|") and line.strip().endswith("|"):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            if not all(set(c) <= set("-: ") for c in cells):
                current.append(cells)
        elif current:
            tables.append(current)
            current = []
    if current:
        tables.append(current)
    for table in reversed(tables):
        header = [h.lower() for h in table[0]]
        if any("ratio" in h for h in header):
            return [dict(zip(header, row)) for row in table[1:]]
    return []


def _number(text: str | None) -> float | None:
    try:
        return float(text) if text not in (None, "") else None
    except ValueError:
        return None


def run_upload(quick: bool) -> Section:
    """bench/bench_upload.py (written separately) in a child process, its table taken over."""
    section = Section("upload")
    script = _script("upload")
    if not script.exists():
        section.rows.append(Row("upload (bench/bench_upload.py)", "—", "—", None, verdict_override="not available"))
        section.details.append("bench/bench_upload.py does not exist yet: no upload benchmark in this run.")
        return section
    cmd = [sys.executable, str(script)]
    helptext = subprocess.run(cmd + ["--help"], capture_output=True, text=True, cwd=BENCH_DIR.parent).stdout
    if quick and "--quick" in helptext:
        cmd.append("--quick")
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=BENCH_DIR.parent)
    section.details.append(f"Output of bench/bench_upload.py ({' '.join(cmd[2:]) or 'no options'}):")
    section.details.extend(f"    {line}" for line in proc.stdout.strip().splitlines())
    if proc.returncode != 0:
        section.details.extend(f"    {line}" for line in proc.stderr.strip().splitlines()[-15:])
        section.rows.append(Row("upload (bench/bench_upload.py)", "—", "—", None,
                                verdict_override=f"failed (exit {proc.returncode})"))
        return section
    rows = _markdown_rows(proc.stdout)
    if not rows:
        section.rows.append(Row("upload (bench/bench_upload.py)", "see details", "—", None,
                                verdict_override="see details"))
    for cells in rows:
        # bench_upload.py's own table: p50/p95 latency of uploads and of a 404 baseline carrying the
        # same bytes, "p50 ratio upload/baseline", and an "ok" column for its correctness checks.
        name = cells.get("benchmark") or next(iter(cells.values()))
        ratio_key = next(k for k in cells if "ratio" in k)
        measured = cells.get("measured") or (
            f"p50 {cells.get('p50 ms', '?')} ms, p95 {cells.get('p95 ms', '?')} ms, {cells.get('uploads/s', '?')} uploads/s")
        baseline = cells.get("baseline") or (
            f"p50 {cells.get('baseline p50 ms', '?')} ms, p95 {cells.get('baseline p95 ms', '?')} ms")
        details = [f"{k} {cells[k]}" for k in ("uploads", "threads", "points/file") if k in cells]
        ok = cells.get("ok")
        section.rows.append(Row(
            benchmark=(name if name.lower().startswith("upload") else f"upload: {name}") + (f" ({', '.join(details)}; {ratio_key})" if details else f" ({ratio_key})"),
            measured=measured, baseline=baseline, ratio=_number(cells[ratio_key]), ratio_text=cells[ratio_key],
            target=None,
            verdict_override=cells.get("verdict") or ("checks failed" if ok and ok.lower() != "yes" else None)))
    return section


def run_group(quick: bool) -> Section:
    """bench/bench_group.py (two app processes on one PostgreSQL database) in a child process."""
    section = Section("group")
    if not os.environ.get("REMANENCE_TEST_PG_URL"):
        section.rows.append(Row("group upload (bench/bench_group.py)", "—", "—", None,
                                verdict_override="not run: needs REMANENCE_TEST_PG_URL"))
        return section
    cmd = [sys.executable, str(_script("group"))] + (["--uploads", "16"] if quick else [])
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=BENCH_DIR.parent)
    section.details.append(f"Output of bench/bench_group.py ({' '.join(cmd[2:]) or 'no options'}):")
    section.details.extend(f"    {line}" for line in proc.stdout.strip().splitlines())
    rows = _markdown_rows(proc.stdout) if proc.returncode == 0 else []
    if not rows:
        section.details.extend(f"    {line}" for line in proc.stderr.strip().splitlines()[-15:])
        section.rows.append(Row("group upload (bench/bench_group.py)", "—", "—", None,
                                verdict_override=f"failed (exit {proc.returncode})"))
    for cells in rows:
        ratio = cells["ratio two/one"]
        section.rows.append(Row(
            benchmark=f"{cells['benchmark']}: two serve processes / one (uploads/s)",
            measured=f"{cells['uploads/s two processes']} uploads/s", baseline=f"{cells['uploads/s one process']} uploads/s",
            ratio=_number(ratio), ratio_text=ratio, target=None,
            verdict_override=None if cells.get("ok", "").lower() == "yes" else "checks failed"))
    return section


def _runners(args: argparse.Namespace) -> dict[str, Callable[[], Section]]:
    def registry() -> Section:
        from . import bench_registry

        return bench_registry.run(quick=args.quick)

    def search() -> Section:
        from . import bench_search

        return bench_search.run(quick=args.quick, large=args.large)

    def analysis() -> Section:
        from . import bench_analysis

        return bench_analysis.run(quick=args.quick)

    def crystal() -> Section:
        from . import bench_crystal

        return bench_crystal.run(quick=args.quick)

    return {"registry": registry, "search": search, "analysis": analysis, "crystal": crystal,
            "estimate": lambda: run_estimate(args.quick), "upload": lambda: run_upload(args.quick),
            "group": lambda: run_group(args.quick)}


# ------------------------------------------------------------------ report


def machine() -> dict[str, str]:
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = ""
    try:
        kb = int(Path("/proc/meminfo").read_text().split("MemTotal:")[1].split()[0])
        mem = f"{kb / 1024 ** 2:.0f} GiB"
    except (OSError, IndexError, ValueError):
        pass
    import pandas
    import rdkit

    return {"cpu": f"{cpu}, {os.cpu_count()} cores{', ' + mem if mem else ''}",
            "software": f"Python {platform.python_version()}, SQLite {sqlite3.sqlite_version}, RDKit {rdkit.__version__}, "
                        f"pandas {pandas.__version__}, {platform.system()} {platform.release()}"}


def table(rows: list[Row]) -> str:
    lines = ["| benchmark | measured | baseline | ratio | target | verdict |", "|---|---|---|---|---|---|"]
    for r in rows:
        verdict = r.verdict + (f" ({r.note})" if r.note else "")
        lines.append(f"| {r.benchmark} | {r.measured} | {r.baseline} | {ratio_text(r)} | {r.target_text} | {verdict} |")
    return "\n".join(lines)


def report(sections: list[Section], args: argparse.Namespace, started: datetime, load: tuple) -> str:
    info = machine()
    rows = [r for s in sections for r in s.rows]
    out = [
        "# Remanence benchmarks",
        "",
        f"Run {started.strftime('%Y-%m-%d %H:%M')} UTC, `python -m bench {' '.join(args.names)}"
        f"{' --quick' if args.quick else ''}{' --large' if args.large else ''}`.",
        f"Machine: {info['cpu']}; load average {load[0][0]:.2f} at the start, {load[1][0]:.2f} at the end.",
        f"Software: {info['software']}.",
        "",
        "Each ratio compares two times measured in the same run on the same data (medians of alternated",
        "repeats): cost ratios (measured / baseline, lower is better) carry a `≤` target, speed-ups",
        "(baseline / measured) a `≥` target.",
        "",
        table(rows),
        "",
    ]
    for s in sections:
        out.append(f"## {s.name} ({s.seconds:.0f} s)")
        out.append("")
        for d in s.details:
            out.append(d if d.startswith("    ") else f"- {d}")
        out.append("")
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m bench", description=__doc__.splitlines()[0])
    parser.add_argument("names", nargs="*", metavar="NAME", help=f"benchmarks to run: {', '.join(NAMES)} (default all)")
    parser.add_argument("--quick", action="store_true", help="smaller sizes (a check that everything runs)")
    parser.add_argument("--large", action="store_true", help="search also over 100 000 molecules")
    parser.add_argument("--output", type=Path, default=RESULTS_DIR / "latest.md", help="report file")
    args = parser.parse_args(argv)
    unknown = [n for n in args.names if n not in NAMES]
    if unknown:
        parser.error(f"unknown benchmark(s) {', '.join(unknown)}; choose from {', '.join(NAMES)}")
    args.names = args.names or list(NAMES)
    runners = _runners(args)
    started = datetime.now(timezone.utc)
    load_start = os.getloadavg()
    sections: list[Section] = []
    failed = False
    for name in args.names:
        print(f"== {name} ...", flush=True)
        t0 = time.perf_counter()
        try:
            section = runners[name]()
        except Exception:  # noqa: BLE001 - a benchmark that breaks is reported (traceback) and fails the run
            failed = True
            section = Section(name, rows=[Row(name, "—", "—", None, verdict_override="failed")],
                              details=["The benchmark raised:"] +
                                      [f"    {line}" for line in traceback.format_exc().strip().splitlines()])
        section.seconds = time.perf_counter() - t0
        sections.append(section)
        print(table(section.rows), flush=True)
        print(f"   ({section.seconds:.0f} s)", flush=True)
    text = report(sections, args, started, (load_start, os.getloadavg()))
    args.output.parent.mkdir(parents=True, exist_ok=True)
    args.output.write_text(text + "\n")
    print()
    print(text)
    print(f"written to {args.output}")
    return 1 if failed else 0


if __name__ == "__main__":
    raise SystemExit(main())
