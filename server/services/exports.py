"""Tables written for spreadsheets (CSV and XLSX), with formula injection neutralised.

A spreadsheet program treats a cell whose text starts with ``=``, ``+``, ``-`` or ``@`` as a
formula (and a leading tab or carriage return can hide such a start), so a label typed as
``=HYPERLINK(...)`` would run in the reader's spreadsheet. Following the OWASP guidance on
CSV injection (OWASP Foundation, "CSV Injection", owasp.org/www-community/attacks/CSV_Injection),
every *text* cell starting with one of those characters is written with a single quote in
front, which makes it plain text. Numbers stay numbers: a negative value in a numeric column
is written as a number, never as text. Every export goes through :func:`table_bytes`.

Chemical formulas (the columns named in ``formula_columns``) are written as plain text in CSV
(``C33H36O6``) and with subscripts as XLSX rich text; the column header says which
(:data:`FORMULA_HEADERS`).
"""

from __future__ import annotations

import io
from typing import Any

import openpyxl
import pandas as pd
from openpyxl.cell.rich_text import CellRichText, TextBlock
from openpyxl.cell.text import InlineFont

from ..chem.identity import formula_runs
from ..errors import InputError

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
MEDIA_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
}


#: How a formula column's header says what its cells are, by format.
FORMULA_HEADERS = {"csv": "{name} (plain text)", "xlsx": "{name} (subscripts, rich text)"}
_SUBSCRIPT = InlineFont(vertAlign="subscript")


def formula_rich_text(formula: str) -> CellRichText:
    """``C33H36O6`` as an XLSX rich-text cell with the counts as subscripts."""
    return CellRichText([TextBlock(_SUBSCRIPT, t) if sub else t for t, sub in formula_runs(formula)])


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


def table_bytes(frame: pd.DataFrame, fmt: str, *, sheet: str,
                formula_columns: tuple[str, ...] = ()) -> tuple[bytes, str]:
    """``frame`` as CSV or XLSX bytes (text cells neutralised) and the media type; the columns in
    ``formula_columns`` are renamed by :data:`FORMULA_HEADERS` and, in XLSX, written as rich text."""
    if fmt not in MEDIA_TYPES:
        raise InputError("export as csv or xlsx", field="format")
    safe = neutralise_frame(frame)
    present = [c for c in formula_columns if c in safe.columns]
    safe = safe.rename(columns={c: FORMULA_HEADERS[fmt].format(name=c) for c in present})
    if fmt == "csv":
        return safe.to_csv(index=False).encode("utf-8"), MEDIA_TYPES[fmt]
    buf = io.BytesIO()
    safe.to_excel(buf, index=False, sheet_name=sheet)
    if not present:
        return buf.getvalue(), MEDIA_TYPES[fmt]
    book = openpyxl.load_workbook(io.BytesIO(buf.getvalue()), rich_text=True)
    ws = book[sheet]
    for c in present:
        col = list(safe.columns).index(FORMULA_HEADERS[fmt].format(name=c)) + 1
        for row in range(2, ws.max_row + 1):
            cell = ws.cell(row=row, column=col)
            if isinstance(cell.value, str) and cell.value and not cell.value.startswith("'"):
                cell.value = formula_rich_text(cell.value)
    out = io.BytesIO()
    book.save(out)
    return out.getvalue(), MEDIA_TYPES[fmt]
