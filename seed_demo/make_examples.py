"""Write one small example file per upload kind into seed_demo/examples/.

    python -m seed_demo.make_examples [FOLDER]

Each kind module (``server/kinds/<kind>.py``) generates its own example from a physical
model (``server.synth``): a switching pellet of the hexamethoxy CH2 bowl below its
transition near 432 K, the demo campaign's first compound. The measurement conditions are
written into the file as ``# key: value`` lines, so each uploads without any form field:

    curl -H "Authorization: Bearer $TOKEN" -F kind=pe_loop -F file=@seed_demo/examples/pe_loop.csv \\
         http://127.0.0.1:8000/api/v1/batches/RVZ-00001-B01/measurements

The output is deterministic (seeded noise); ``tests/test_demo.py`` checks that the stored
files are what this script writes.
"""

from __future__ import annotations

import sys
from pathlib import Path

from server.kinds import KINDS

EXAMPLES_DIR = Path(__file__).resolve().parent / "examples"


def example_files() -> dict[str, bytes]:
    """File name -> bytes for every upload kind."""
    out = {}
    for kind in KINDS.values():
        ex = kind.example()
        out[ex.filename] = ex.raw
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
