"""Instrument files -> canonical tables with pint units, and measurement conditions.

* :func:`server.ingest.table.read_table` reads CSV/TSV/XLSX bytes into a
  :class:`~server.ingest.table.ParsedTable` whose frame has canonical columns
  (``E_kV_cm``, ``P_uC_cm2``, ``T_K`` ... see :data:`server.ingest.columns.QUANTITIES`).
* :func:`server.ingest.table.to_csv_bytes` / :func:`~server.ingest.table.to_xlsx_bytes`
  write the upload format (``# key: value`` lines, ``name (unit)`` header, rows).
* :func:`server.ingest.conditions.parse_conditions` merges form fields and file
  metadata into :class:`~server.ingest.conditions.Conditions` in canonical units.
* :mod:`server.ingest.units` holds the project's one pint registry (``ureg``, ``Q_``).
"""

from server.ingest.columns import QUANTITIES, CanonicalQuantity, ColumnSpec, parse_header
from server.ingest.conditions import Conditions, parse_conditions
from server.ingest.table import ParsedTable, read_table, to_csv_bytes, to_xlsx_bytes
from server.ingest.units import Q_, ureg

__all__ = [
    "QUANTITIES",
    "CanonicalQuantity",
    "ColumnSpec",
    "Conditions",
    "ParsedTable",
    "Q_",
    "parse_conditions",
    "parse_header",
    "read_table",
    "to_csv_bytes",
    "to_xlsx_bytes",
    "ureg",
]
