"""Benchmark: reading and analysing a long P-E loop file against parsing the same bytes with pandas alone.

Data: ``server.synth.ferro.miller_loop`` (Ps 8, Pr 6 uC/cm^2, Ec 12, Emax 40 kV/cm, two
sine cycles, 0.02 uC/cm^2 Gaussian noise, fixed seed) with ``points_per_cycle`` 500 000
(1 000 001 points, ~37 MB of CSV) and 50 000 (100 001 points), written with
``server.ingest.table.to_csv_bytes`` (a ``# key: value`` line, then CSV). The bytes are
cached under bench/results/ (making them takes ~10 s).

Measured: ``server.ingest.table.read_table(raw)`` then
``server.analysis.hysteresis.analyse_loop(parsed.frame)``: what an upload costs once the
bytes are in memory. Baseline: ``pandas.read_csv(io.BytesIO(raw), comment="#")``, the
fastest plain parse of the same bytes. Figure: pipeline / pandas parse, target <= 2 (the
checks and the analysis may at most double the parse). When it is missed, a cProfile of one
run names the functions the time goes to.
"""

from __future__ import annotations

import io
import time

import numpy as np
import pandas as pd

from server.analysis.hysteresis import analyse_loop
from server.ingest.table import read_table, to_csv_bytes
from server.synth.ferro import miller_loop

from .common import RESULTS_DIR, Row, Section, fmt_s, paired, repeat, top_costs

LOOP = {"ps_uC_cm2": 8.0, "pr_uC_cm2": 6.0, "ec_kV_cm": 12.0, "emax_kV_cm": 40.0}
DATA_VERSION = "1"


def loop_bytes(points_per_cycle: int) -> bytes:
    """The CSV bytes of a two-cycle loop, cached by size and DATA_VERSION."""
    path = RESULTS_DIR / f"pe-loop-v{DATA_VERSION}-{points_per_cycle}.csv"
    if path.exists():
        return path.read_bytes()
    frame = miller_loop(**LOOP, cycles=2, points_per_cycle=points_per_cycle, noise_uC_cm2=0.02,
                        rng=np.random.default_rng(7))
    raw = to_csv_bytes(frame, {"sample": "RMX-0001 bench", "frequency": "100 Hz"})
    RESULTS_DIR.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    tmp.write_bytes(raw)
    tmp.replace(path)
    return raw


def _case(section: Section, points_per_cycle: int, rounds: int) -> None:
    raw = loop_bytes(points_per_cycle)

    def pipeline():
        parsed = read_table(raw)
        return analyse_loop(parsed.frame)

    def pandas_parse():
        return pd.read_csv(io.BytesIO(raw), comment="#")

    result = pipeline()
    plain = pandas_parse()
    points = len(plain)
    if result.to_dict()["points"] <= 0 or points != 2 * points_per_cycle + 1:
        raise RuntimeError(f"unexpected loop file: pandas read {points} rows")
    d = result.to_dict()
    section.details.append(
        f"{points} points ({len(raw) / 1e6:.1f} MB): Pr {d['pr_uC_cm2']:.3f} uC/cm^2 (model 6), "
        f"Ec {d['ec_kV_cm']:.2f} kV/cm (model 12), verdict {d['verdict']}.")
    t_full, t_pd = paired(pipeline, pandas_parse, rounds=rounds)
    # The two parts of the pipeline on their own, for the report.
    parsed = read_table(raw)
    t_read = repeat(lambda: read_table(raw), times=max(3, rounds // 2), warmup=0)
    t_an = repeat(lambda: analyse_loop(parsed.frame), times=max(3, rounds // 2), warmup=0)
    ratio = t_full.median_s / t_pd.median_s
    row = Row(benchmark=f"P-E loop {points // 1000}k points: read_table + analyse_loop / pandas.read_csv",
              measured=fmt_s(t_full.median_s), baseline=fmt_s(t_pd.median_s), ratio=ratio, target=("<=", 2.0))
    section.rows.append(row)
    section.details.append(
        f"{points // 1000}k points: read_table {fmt_s(t_read.median_s)} (x{t_read.median_s / t_pd.median_s:.1f} the "
        f"pandas parse), analyse_loop {fmt_s(t_an.median_s)} (x{t_an.median_s / t_pd.median_s:.2f}), "
        f"pandas.read_csv {fmt_s(t_pd.median_s)}.")
    if row.verdict == "misses":
        section.details.append(f"{points // 1000}k points, where one pipeline run spends its time (cProfile, own time):")
        section.details.extend(f"    {line}" for line in top_costs(pipeline, n=7))


def run(quick: bool = False) -> Section:
    section = Section("analysis")
    t0 = time.perf_counter()
    cases = [5_000, 50_000] if quick else [50_000, 500_000]
    for ppc in cases:
        loop_bytes(ppc)
    section.details.append(f"Loop files ready in {time.perf_counter() - t0:.1f} s (cached under bench/results/).")
    for ppc in cases:
        _case(section, ppc, rounds=5 if quick else 7)
    return section
