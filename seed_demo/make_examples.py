"""Write one small example file per upload kind into seed_demo/examples/.

    python -m seed_demo.make_examples [FOLDER]

The files are those the demo's instruments write for the first compound of the campaign
(TILT-26 TB-CH2-O1, hexamethoxy on the CH2 bowl, Tc about 432 K), with the measurement
conditions written into the file as ``# key: value`` lines, so each uploads without any
form field:

    curl -H "Authorization: Bearer $TOKEN" -F kind=pe_loop -F file=@seed_demo/examples/pe_loop.csv \\
         http://127.0.0.1:8000/api/v1/batches/RVZ-00001-B01/measurements

The output is deterministic (seeded noise); ``tests/test_demo.py`` checks that the stored
files are what this script writes.
"""

from __future__ import annotations

import sys
from pathlib import Path

from . import instruments, scenario

EXAMPLES_DIR = Path(__file__).resolve().parent / "examples"
FILENAMES = {
    "pe_loop": "pe_loop.csv",
    "pund": "pund.csv",
    "dielectric": "dielectric.csv",
    "dsc": "dsc.csv",
    "nmr_rates": "nmr_rates.csv",
    "crystal": "crystal.cif",
}
_CONDITION_KEYS = ("area", "thickness", "mass", "rate", "temperature", "frequency", "endo")


def example_compound() -> scenario.CompoundPlan:
    """The campaign's first compound (the hexamethoxy CH2 bowl), which has every kind of file."""
    return scenario.build().compounds[0]


def example_files() -> dict[str, bytes]:
    """File name -> bytes for every upload kind."""
    c = example_compound()
    first = next(b for b in c.batches if b.state in ("made", "used_up"))
    chosen: dict[str, tuple[int, scenario.Measurement]] = {}
    for j, m in enumerate(first.measurements):
        chosen.setdefault(m.kind, (j, m))  # the first of each kind (the lowest-temperature loop)
    out = {}
    for kind, name in FILENAMES.items():
        j, m = chosen[kind]
        up = instruments.write(c, first.seq, j, m, "I. Varnhout", "example")
        if up.kind == "crystal":
            out[name] = up.raw
            continue
        lines = "".join(f"# {k}: {up.form[k]}\n" for k in _CONDITION_KEYS if k in up.form)
        out[name] = lines.encode("ascii") + up.raw
    return out


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    folder = Path(args[0]) if args else EXAMPLES_DIR
    folder.mkdir(parents=True, exist_ok=True)
    for name, raw in example_files().items():
        (folder / name).write_bytes(raw)
        print(f"{folder / name} ({len(raw)} bytes)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
