"""Tables written for spreadsheets (CSV and XLSX), with formula injection neutralised.

A spreadsheet program treats a cell whose text starts with ``=``, ``+``, ``-`` or ``@`` as a
formula (and a leading tab or carriage return can hide such a start), so a label typed as
``=HYPERLINK(...)`` would run in the reader's spreadsheet. Following the OWASP guidance on
CSV injection (OWASP Foundation, "CSV Injection", owasp.org/www-community/attacks/CSV_Injection),
every *text* cell starting with one of those characters is written with a single quote in
front, which makes it plain text. Numbers stay numbers: a negative value in a numeric column
is written as a number, never as text. Every export goes through :func:`table_bytes`.
"""

from __future__ import annotations

import io
from typing import Any

import pandas as pd

from ..errors import InputError

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
MEDIA_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
}


def neutralise(value: Any) -> Any:
    """A text cell that a spreadsheet would read as a formula, prefixed with ``'``; anything else unchanged."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` with every text cell neutralised; numeric columns are left as they are."""
    out = frame.copy()
    for column in out.columns:
        if not (pd.api.types.is_numeric_dtype(out[column]) or pd.api.types.is_bool_dtype(out[column])):
            out[column] = out[column].map(neutralise)
    return out


def table_bytes(frame: pd.DataFrame, fmt: str, *, sheet: str) -> tuple[bytes, str]:
    """``frame`` as CSV or XLSX bytes (text cells neutralised) and the media type."""
    if fmt not in MEDIA_TYPES:
        raise InputError("export as csv or xlsx", field="format")
    safe = neutralise_frame(frame)
    if fmt == "csv":
        return safe.to_csv(index=False).encode("utf-8"), MEDIA_TYPES[fmt]
    buf = io.BytesIO()
    safe.to_excel(buf, index=False, sheet_name=sheet)
    return buf.getvalue(), MEDIA_TYPES[fmt]
