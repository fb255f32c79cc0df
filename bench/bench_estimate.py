"""Benchmark: one bowl-inversion estimate in units of GFN2-xTB single-point evaluations.

Runs ``server.analysis.xtb.estimate_barrier`` on the methyl-truncated hexa-alkoxy
CH2-bridged C21 bowl (hexa-dodecyloxy input, truncated to hexa-OMe) and, in the same
run, times a single GFN2-xTB energy+gradient evaluation (fresh calculator, no SCF
restart) on the optimised bowl. The ratio estimate/singlepoint is the machine-independent
figure; wall times depend on the machine.

Usage::

    python bench/bench_estimate.py [--repeat-singlepoint N]

One OpenMP thread unless OMP_NUM_THREADS is already set (the machine is shared; it
must be set before tblite is loaded, which is why it happens here at the top).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402
from tblite.interface import Calculator  # noqa: E402

from server.analysis.xtb import BOHR_A, estimate_barrier  # noqa: E402

RIM = "C1c2c({R})c({R})c3Cc4c({R})c({R})c5Cc6c({R})c({R})c1c7c2c3c4c5c67"
SMILES = RIM.format(R="O" + "C" * 12)


def singlepoint_time_s(xyz_block: str, repeat: int) -> float:
    """Median wall time of a from-scratch GFN2-xTB energy+gradient on an XYZ block."""
    lines = xyz_block.strip().splitlines()
    n = int(lines[0])
    rows = [line.split() for line in lines[2 : 2 + n]]
    table = Chem.GetPeriodicTable()
    numbers = np.array([table.GetAtomicNumber(r[0]) for r in rows])
    coords_bohr = np.array([[float(v) for v in r[1:4]] for r in rows]) / BOHR_A
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        calc = Calculator("GFN2-xTB", numbers, coords_bohr)
        calc.set("verbosity", 0)
        res = calc.singlepoint()
        res.get("gradient")
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat-singlepoint", type=int, default=5, help="single points to time (median)")
    args = parser.parse_args(argv)

    result = estimate_barrier(SMILES)
    t_sp = singlepoint_time_s(result.xyz_bowl, args.repeat_singlepoint)
    evals = result.screening_evaluations + result.gradient_evaluations_bowl + result.gradient_evaluations_planar
    ratio = result.wall_time_s / t_sp

    print(f"molecule: hexa-dodecyloxy CH2-bridged C21 bowl, used as {result.smiles_used} ({result.atoms} atoms)")
    print(f"model: {result.model}; OMP_NUM_THREADS={os.environ['OMP_NUM_THREADS']}")
    print(f"barrier {result.barrier_kcal_mol:.2f} kcal/mol, depth {result.bowl_depth_A:.3f} A, "
          f"dipole {result.dipole_D:.2f} D, converged {result.converged}")
    print(f"estimate wall time {result.wall_time_s:.2f} s; steps bowl {result.steps_bowl}, planar "
          f"{result.steps_planar}; gradient evaluations {evals} (screening {result.screening_evaluations}, "
          f"bowl {result.gradient_evaluations_bowl}, planar {result.gradient_evaluations_planar})")
    print(f"single point + gradient (fresh SCF): {t_sp * 1000:.1f} ms; ratio estimate/singlepoint {ratio:.0f}")
    print()
    print("| molecule | atoms | barrier (kcal/mol) | steps bowl/planar | gradient evals | "
          "estimate (s) | singlepoint (s) | ratio |")
    print("|---|---|---|---|---|---|---|---|")
    print(f"| hexa-OMe CH2-bridged C21 bowl (truncated) | {result.atoms} | {result.barrier_kcal_mol:.2f} | "
          f"{result.steps_bowl}/{result.steps_planar} | {evals} | {result.wall_time_s:.2f} | {t_sp:.3f} | {ratio:.0f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
