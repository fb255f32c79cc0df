"""Timing helpers and the result row shared by every benchmark.

Every figure of the suite is a RATIO of two times measured in the same run on the same data
(the thing under test against a plain baseline), so it survives a slow or busy machine.
On a shared 2-core machine single times are noisy: :func:`paired` alternates the two
callables round by round (so a burst of load from another user hits both) and the ratio
is taken between medians, never between single runs or means.

Percentiles use numpy's default linear interpolation between order statistics
(Hyndman & Fan 1996, definition 7; numpy.percentile ``method="linear"``).
"""

from __future__ import annotations

import cProfile
import gc
import pstats
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Optional

import numpy as np

RESULTS_DIR = Path(__file__).resolve().parent / "results"


@dataclass(frozen=True)
class Timing:
    """Wall times of repeated runs of one callable, in seconds."""

    samples_s: tuple[float, ...]

    @property
    def median_s(self) -> float:
        return float(np.median(self.samples_s))

    @property
    def p95_s(self) -> float:
        return float(np.percentile(self.samples_s, 95))

    @property
    def n(self) -> int:
        return len(self.samples_s)


def median(values) -> float:
    return float(np.median(np.asarray(values, dtype=float)))


def p95(values) -> float:
    return float(np.percentile(np.asarray(values, dtype=float), 95))


def _once(fn: Callable[[], Any]) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def repeat(fn: Callable[[], Any], *, times: int = 7, warmup: int = 1, min_total_s: float = 0.0) -> Timing:
    """Time ``fn()`` ``times`` times (more while the total is under ``min_total_s``), after ``warmup`` runs.

    The garbage collector is left on (the code under test lives with it), but a collection
    is run before the series so garbage of the previous benchmark is not charged here.
    """
    for _ in range(warmup):
        fn()
    gc.collect()
    samples: list[float] = []
    total = 0.0
    while len(samples) < times or (total < min_total_s and len(samples) < 50 * times):
        dt, _ = _once(fn)
        samples.append(dt)
        total += dt
    return Timing(tuple(samples))


def paired(measured: Callable[[], Any], baseline: Callable[[], Any], *, rounds: int = 7, warmup: int = 1,
           inner: int = 1, budget_s: Optional[float] = None, min_rounds: int = 3) -> tuple[Timing, Timing]:
    """Time two callables alternately: each round runs both (order swapped every round).

    ``inner`` runs per round and callable, each timed on its own; returns (measured, baseline).
    With ``budget_s``, stops after ``min_rounds`` rounds once that much time has been spent
    (slow cases get fewer, never fewer than ``min_rounds``, repeats).
    """
    for _ in range(warmup):
        measured()
        baseline()
    gc.collect()
    a: list[float] = []
    b: list[float] = []
    started = time.perf_counter()
    for r in range(rounds):
        if budget_s is not None and r >= min_rounds and time.perf_counter() - started > budget_s:
            break
        order = ((measured, a), (baseline, b)) if r % 2 == 0 else ((baseline, b), (measured, a))
        for fn, into in order:
            for _ in range(inner):
                into.append(_once(fn)[0])
    return Timing(tuple(a)), Timing(tuple(b))


def top_costs(fn: Callable[[], Any], *, n: int = 6, root: Optional[Path] = None) -> list[str]:
    """Where the time of one run of ``fn`` goes: the ``n`` functions with the largest own time.

    Returned as short lines ``"0.351 s  re.Pattern.search (x7)"`` for the report; paths are
    shown relative to ``root`` (default: the repository) so the lines stay readable.
    """
    root = root or Path(__file__).resolve().parents[1]
    prof = cProfile.Profile()
    prof.enable()
    fn()
    prof.disable()
    stats = pstats.Stats(prof)
    def place(filename: str, line: int, name: str) -> str:
        if filename == "~":
            return name.strip("<>").replace("built-in method ", "").replace("method ", "")
        try:
            return f"{Path(filename).resolve().relative_to(root)}:{line} {name}"
        except ValueError:
            return f"{Path(filename).name}:{line} {name}"

    rows = []
    for (filename, line, name), (cc, nc, tt, ct, callers) in stats.stats.items():  # type: ignore[attr-defined]
        rows.append((tt, filename, line, name, nc, callers))
    rows.sort(key=lambda r: r[0], reverse=True)
    out = []
    for tt, filename, line, name, nc, callers in rows[:n]:
        where = place(filename, line, name)
        if filename == "~" and callers:
            # A built-in: say which function of ours called it.
            caller = max(callers.items(), key=lambda kv: kv[1][2])[0]
            where += f", called from {place(*caller)}"
        out.append(f"{tt:.3f} s  {where} (x{nc})")
    return out


def fmt_s(seconds: float) -> str:
    """A time with a unit people read at a glance (us, ms or s, three significant digits)."""
    if seconds < 1e-3:
        return f"{seconds * 1e6:.3g} µs"
    if seconds < 1.0:
        return f"{seconds * 1e3:.3g} ms"
    return f"{seconds:.3g} s"


@dataclass
class Row:
    """One line of the results table.

    ``ratio`` is measured/baseline for costs (lower is better: target ``("<=", x)``) and
    baseline/measured for speed-ups (higher is better: target ``(">=", x)``); ``target``
    None means the benchmark has no agreed target and only reports its figure.
    ``verdict_override`` is for rows that could not be measured ("not available", "failed").
    """

    benchmark: str
    measured: str
    baseline: str
    ratio: Optional[float]
    target: Optional[tuple[str, float]] = None
    note: str = ""
    verdict_override: Optional[str] = None
    ratio_text: Optional[str] = None

    @property
    def verdict(self) -> str:
        if self.verdict_override:
            return self.verdict_override
        if self.target is None or self.ratio is None:
            return "no target"
        op, value = self.target
        ok = self.ratio <= value if op == "<=" else self.ratio >= value
        return "meets" if ok else "misses"

    @property
    def target_text(self) -> str:
        if self.target is None:
            return "—"
        op, value = self.target
        return f"{'≤' if op == '<=' else '≥'} {value:g}"

    def to_dict(self) -> dict[str, Any]:
        return {
            "benchmark": self.benchmark,
            "measured": self.measured,
            "baseline": self.baseline,
            "ratio": self.ratio,
            "target": self.target_text,
            "verdict": self.verdict,
        }


def ratio_text(row: Row) -> str:
    if row.ratio_text is not None:
        return row.ratio_text
    if row.ratio is None:
        return "—"
    r = row.ratio
    return f"{r:.3g}" if r < 100 else f"{r:.0f}"


@dataclass
class Section:
    """What one benchmark hands back: its rows and free-text details for the report."""

    name: str
    rows: list[Row] = field(default_factory=list)
    details: list[str] = field(default_factory=list)
    seconds: float = 0.0
