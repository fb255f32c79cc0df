"""Benchmark: a 10^6-point export read through an import profile against pandas parsing the same data region.

Data: ``server.synth.ferro.miller_loop`` (Ps 8, Pr 6 uC/cm^2, Ec 12, Emax 40 kV/cm, two sine cycles,
500 000 points per cycle: 1 000 001 points, 0.02 uC/cm^2 Gaussian noise, fixed seed), written in the
dialect of the corpus profile ``tester-a`` (``tests/data/exports/pe_loop_marker_cp1252``): a free-text
header block, a ``[Data]`` marker, semicolons, decimal commas, a ``Point`` column, Windows-1252, CRLF.

Measured: ``server.ingest.profiles.read_profiled(raw, profile)`` (decode, find the table, read the
conditions, map the columns, parse, convert with pint, check every cell). Baseline:
``pandas.read_csv`` of the same data region (the text after the marker line, already decoded and cut
out), with the same delimiter and decimal mark: the bare parse. Target: at most 2x (issue 14).

    python -m bench.bench_ingest [--quick]
"""

from __future__ import annotations

import argparse
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd

from server.ingest.profiles import profile_from_json, read_profiled
from server.ingest.table import read_table, to_csv_bytes
from server.synth.ferro import miller_loop

from .common import fmt_s, paired

PROFILE = Path(__file__).resolve().parent.parent / "tests" / "data" / "exports" / "pe_loop_marker_cp1252.profile.json"


def export_bytes(points_per_cycle: int) -> tuple[bytes, str]:
    """(the export's bytes, its decoded data region)."""
    frame = miller_loop(8.0, 6.0, 12.0, 40.0, cycles=2, points_per_cycle=points_per_cycle, noise_uC_cm2=0.02,
                        rng=np.random.default_rng(7))
    n = len(frame)
    v = frame["E (kV/cm)"].to_numpy() * 15.0  # 150 um: kV/cm -> V
    q = frame["P (uC/cm^2)"].to_numpy() * 0.0785 * 1000.0  # 0.0785 cm^2: uC/cm^2 -> nC
    t = np.arange(n) * 10.0 / n
    table = pd.DataFrame({"Point": np.arange(1, n + 1), "Time": t, "Drive Voltage": v, "Charge": q})
    region = table.to_csv(sep=";", decimal=",", index=False, lineterminator="\r\n")
    head = "Loop tracer export\r\nArea: 7,85\r\nThickness: 150 µm\r\nFrequency: 100\r\nTemperature: 324\r\n\r\n[Data]\r\n"
    return (head + region).encode("cp1252"), region


def clean_bytes(points_per_cycle: int) -> bytes:
    """The same loop in the clean upload format (``name (unit)`` header, ``# key: value`` metadata)."""
    frame = miller_loop(8.0, 6.0, 12.0, 40.0, cycles=2, points_per_cycle=points_per_cycle, noise_uC_cm2=0.02,
                        rng=np.random.default_rng(7))
    return to_csv_bytes(frame, {"area": "0.0785 cm^2", "thickness": "150 um", "frequency": "100 Hz"})


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="10^5 points instead of 10^6")
    args = parser.parse_args()
    ppc = 50_000 if args.quick else 500_000
    raw, region = export_bytes(ppc)
    profile = profile_from_json(json.loads(PROFILE.read_text()))

    def profiled():
        return read_profiled(raw, profile)

    def bare():
        return pd.read_csv(io.StringIO(region), sep=";", decimal=",")

    got, plain = profiled(), bare()
    assert got.blocks[0].table.n_rows == len(plain) == 2 * ppc + 1
    t_prof, t_bare = paired(profiled, bare, rounds=3 if args.quick else 5)
    ratio = t_prof.median_s / t_bare.median_s
    print(f"{len(plain)} points ({len(raw) / 1e6:.1f} MB): read_profiled {fmt_s(t_prof.median_s)}, "
          f"pandas.read_csv of the data region {fmt_s(t_bare.median_s)}, ratio {ratio:.2f} (target <= 2)")

    clean = clean_bytes(ppc)

    def ours():
        return read_table(clean)

    def plain():
        return pd.read_csv(io.BytesIO(clean), comment="#")

    assert ours().n_rows == len(plain()) == 2 * ppc + 1
    t_ours, t_plain = paired(ours, plain, rounds=3 if args.quick else 5)
    print(f"{2 * ppc + 1} points ({len(clean) / 1e6:.1f} MB): read_table {fmt_s(t_ours.median_s)}, "
          f"pandas.read_csv of the same bytes {fmt_s(t_plain.median_s)}, ratio {t_ours.median_s / t_plain.median_s:.2f}")


if __name__ == "__main__":
    main()
