"""Read instrument files (CSV, TSV, XLSX) into canonical tables.

The upload format (shared data contract): optional leading ``# key: value`` lines
(metadata) and plain ``#`` comments, one header row naming each column as
``name (unit)``, then numeric rows. :func:`read_table` returns a :class:`ParsedTable`
whose ``frame`` has canonical column names (``E_kV_cm``, ``T_K`` ...) holding values
converted to canonical units with pint.

Errors are :class:`~server.errors.IngestError` with the 1-based file line (for XLSX:
the spreadsheet row) and the column header as written, so a chemist can open the
file and fix the cell.
"""

from __future__ import annotations

import csv
import io
import itertools
import re
import warnings
import zipfile
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from server.errors import IngestError, OverLimit
from server.ingest.columns import BY_NAME, ColumnSpec, convert_to_canonical, parse_headers

BINARY_MESSAGE = "this looks like a binary file, not a CSV/TSV/XLSX table"
NO_HEADER_MESSAGE = "no header row: the first row must name each column as 'name (unit)'"

# An XLSX holds compressed XML, and reading it costs far more per value than CSV (openpyxl
# parses every cell's XML). Bounds on one workbook (our choice, common practice: an instrument's
# export of a P-E loop or a DSC run is a few thousand to some 10^5 rows of a few columns); past
# them the upload is refused with 413 naming the limit, and the user is told to export CSV.
MAX_XLSX_UNCOMPRESSED_BYTES = 64 * 1024 * 1024
MAX_XLSX_ROWS = 200_000
MAX_XLSX_CELLS = 2_000_000
# Share of control characters above which decoded "text" is taken for binary data.
MAX_CONTROL_SHARE = 0.01

_SIGNATURES: tuple[tuple[bytes, str], ...] = (
    (b"\x89PNG", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"GIF8", "a GIF image"),
    (b"%PDF", "a PDF document"),
    (b"\x1f\x8b", "a gzip archive"),
    (b"BZh", "a bzip2 archive"),
    (b"7z\xbc\xaf", "a 7-zip archive"),
    (b"\xfd7zXZ", "an xz archive"),
    (b"Rar!", "a RAR archive"),
    (b"\xd0\xcf\x11\xe0", "an old-style Excel .xls (or other OLE) file: save it as .xlsx or CSV"),
    (b"\x7fELF", "a program"),
    (b"MZ", "a Windows program"),
    (b"II*\x00", "a TIFF image"),
    (b"MM\x00*", "a TIFF image"),
)
_ZIP_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")
# What zipfile raises on a damaged archive (NotImplementedError: unknown zip version).
_ZIP_ERRORS = (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, ValueError, EOFError, NotImplementedError)

_NUMBER_RE = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_META_RE = re.compile(r"\s*([^:]{1,80}?)\s*:\s*(.*?)\s*")
_DELIMITERS = ("\t", ";", ",")
_DECIMAL_COMMA_RE = re.compile(r"[+-]?\d+,\d+(?:[eE][+-]?\d+)?")
# A blank (whitespace-only) or '#' line anywhere in the data part.
_SKIP_LINE_RE = re.compile(r"^\s*(?:#|$)", re.MULTILINE)
_SNIFF_ROWS = 20
_SEP_LINE_RE = re.compile(r"sep=[,;\t]", re.IGNORECASE)


@dataclass(frozen=True, eq=False)
class ParsedTable:
    """An instrument file read into canonical columns.

    Attributes
    ----------
    frame : pandas.DataFrame
        Canonical columns (``E_kV_cm``, ``P_uC_cm2``, ...) in file order, float64,
        in canonical units.
    metadata : dict[str, str]
        ``# key: value`` lines; keys lower-cased with surrounding space removed.
    source_columns : dict[str, str]
        Canonical name -> header as written in the file.
    first_data_line : int
        1-based file line (XLSX: row) of the first data row.
    n_rows : int
        Number of data rows.
    format : str
        ``"csv"``, ``"tsv"`` or ``"xlsx"``.
    source_units : dict[str, str]
        Canonical name -> unit the file used (pint spelling), e.g. ``"degree_Celsius"``.
    notes : tuple[str, ...]
        What the reader did that a person may want to know (decimal commas, encoding).
    """

    frame: pd.DataFrame
    metadata: dict[str, str]
    source_columns: dict[str, str]
    first_data_line: int
    n_rows: int
    format: str
    source_units: dict[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------- detection


def _binary_error(what: str | None = None) -> IngestError:
    if what:
        return IngestError(f"{BINARY_MESSAGE} (it is {what})")
    return IngestError(BINARY_MESSAGE)


_CONTROL_RE = re.compile("[\x01-\x08\x0b\x0e-\x1f\x7f-\x9f]")


_SAMPLE_CHARS = 1 << 16
_SAMPLES = 16


def _control_share(text: str) -> float:
    """Share of C0 controls (except tab, LF, CR, FF), DEL and C1 controls: what binary decodes to.

    Large texts are judged on 16 evenly spaced 64 KiB windows: a binary file shows its control
    characters everywhere (sampling the content is common practice, as `file` and git do; NUL bytes
    are still checked over the whole file by the caller).
    """
    if not text:
        return 0.0
    if len(text) <= _SAMPLE_CHARS * _SAMPLES:
        return len(_CONTROL_RE.findall(text)) / len(text)
    step = (len(text) - _SAMPLE_CHARS) // (_SAMPLES - 1)
    windows = [text[i * step: i * step + _SAMPLE_CHARS] for i in range(_SAMPLES)]
    return sum(len(_CONTROL_RE.findall(w)) for w in windows) / (_SAMPLE_CHARS * _SAMPLES)


def _decode(raw: bytes) -> tuple[str, list[str]]:
    """Bytes -> text, refusing binaries; returns the text and notes on the encoding."""
    notes: list[str] = []
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            text = raw.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise _binary_error() from exc
        notes.append("read as UTF-16 text")
    else:
        for magic, what in _SIGNATURES:
            if raw.startswith(magic):
                raise _binary_error(what)
        if b"\x00" in raw:
            raise _binary_error()
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            try:
                text = raw.decode("cp1252")
                notes.append("not UTF-8: read as Windows-1252 text")
            except UnicodeDecodeError:
                text = raw.decode("latin-1")
                notes.append("not UTF-8: read as Latin-1 text")
    if "\x00" in text or _control_share(text) > MAX_CONTROL_SHARE:
        raise _binary_error()
    return text.lstrip("\ufeff"), notes


# --------------------------------------------------------------------------- preamble


def _parse_meta_line(body: str) -> tuple[str, str] | None:
    """``"# key: value"`` (without the '#') -> (key, value); None for a plain comment."""
    m = _META_RE.fullmatch(body)
    if m is None:
        return None
    key = re.sub(r"\s+", " ", m.group(1)).strip().lower()
    if not key:
        return None
    return key, m.group(2)


def _add_meta(metadata: dict[str, str], meta_lines: dict[str, int], key: str, value: str, line: int) -> None:
    if key in metadata and metadata[key] != value:
        raise IngestError(
            f"metadata key '{key}' is given twice with different values "
            f"(lines {meta_lines[key]} and {line}); keep one",
            line=line,
        )
    metadata[key] = value
    meta_lines[key] = line


def _comment_body(stripped: str, pad: str = "") -> str:
    """Text of a '#' line without the '#' and without the quotes and the run of empty
    trailing cells (``pad``, e.g. ``",,"``) that a spreadsheet adds when it saves as CSV."""
    if pad and stripped.endswith(pad):
        stripped = stripped[: -len(pad)].rstrip()
    if stripped.startswith('"#'):
        first = next(csv.reader([stripped]), [stripped])
        stripped = first[0] if first else stripped
    return stripped[1:].strip()


def _looks_numeric(cells: Sequence[str]) -> bool:
    filled = [c for c in cells if c]
    if not filled:
        return False
    numeric = sum(1 for c in filled if _NUMBER_RE.fullmatch(c) or c.lower() in {"nan", "inf", "-inf", "+inf"})
    return 2 * numeric >= len(filled)


# --------------------------------------------------------------------------- shared checks


def _named_width(headers: Sequence[str], line: int) -> int:
    """Number of named columns; empty names are allowed only at the end (trailing separators)."""
    width = len(headers)
    while width and not headers[width - 1]:
        width -= 1
    for i, h in enumerate(headers[:width]):
        if not h:
            raise IngestError(
                f"column {i + 1} has no name; name each column as 'name (unit)'",
                line=line,
                column=f"column {i + 1}",
            )
    if width == 0:
        raise IngestError(NO_HEADER_MESSAGE, line=line)
    return width


def _cell_error(text: str, line: int, column: str) -> IngestError:
    if not text:
        return IngestError("empty cell: every row needs a number in every column", line=line, column=column)
    shown = text if len(text) <= 40 else text[:37] + "..."
    if _NUMBER_RE.fullmatch(text):
        return IngestError(f"'{shown}' is too large for a double-precision number", line=line, column=column)
    if text.strip().lower().lstrip("+-") in {"nan", "inf", "infinity", "na", "n/a", "null", "none"}:
        return IngestError(
            f"'{shown}' is not a number (NaN and infinity are not accepted)", line=line, column=column
        )
    if _DECIMAL_COMMA_RE.fullmatch(text):
        return IngestError(f"'{shown}' is not a number; the numbers look like decimal commas: read the file "
                           "through an import profile with \"decimal\": \",\"", line=line, column=column)
    return IngestError(f"'{shown}' is not a number", line=line, column=column)


def _build(
    specs: list[ColumnSpec],
    values: np.ndarray,
    linenos: Sequence[int],
    cell_text: Callable[[int, int], str],
    *,
    metadata: dict[str, str],
    fmt: str,
    notes: list[str],
) -> ParsedTable:
    """Check finiteness, convert to canonical units and assemble the ParsedTable."""
    bad = ~np.isfinite(values)
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise _cell_error(cell_text(int(r), int(c)), linenos[r], specs[c].header)
    columns: dict[str, np.ndarray] = {}
    for j, spec in enumerate(specs):
        with np.errstate(over="ignore", invalid="ignore"):
            try:
                converted = np.asarray(convert_to_canonical(values[:, j], spec), dtype=np.float64)
            except OverflowError as exc:
                raise IngestError(
                    f"the unit '{spec.unit:~P}' cannot be converted to {spec.quantity.unit} in floating point",
                    line=linenos[0],
                    column=spec.header,
                ) from exc
        overflow = ~np.isfinite(converted)
        if overflow.any():
            r = int(np.argmax(overflow))
            raise IngestError(
                f"'{cell_text(r, j)}' {spec.unit:~P} is out of range once converted to {spec.quantity.unit}",
                line=linenos[r],
                column=spec.header,
            )
        if spec.quantity.temperature:
            below = converted < 0
            if below.any():
                r = int(np.argmax(below))
                raise IngestError(
                    f"'{cell_text(r, j)}' is below absolute zero; check the unit in the header",
                    line=linenos[r],
                    column=spec.header,
                )
        columns[spec.canonical] = converted
    frame = pd.DataFrame(columns)
    return ParsedTable(
        frame=frame,
        metadata=metadata,
        source_columns={s.canonical: s.header for s in specs},
        first_data_line=int(linenos[0]),
        n_rows=len(frame),
        format=fmt,
        source_units={s.canonical: str(s.unit) for s in specs},
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- text


def _split_cells(line: str, delimiter: str) -> list[str]:
    return [c.strip() for c in line.split(delimiter)]


def _sniff_delimiter(header: str, sample: Sequence[str]) -> str:
    """Pick tab, semicolon or comma: the one that splits the header and every sampled row alike."""
    best, best_n = ",", 1
    for d in _DELIMITERS:
        n = header.count(d)
        if n == 0:
            continue
        if all(row.replace('"', "").count(d) == n for row in sample):
            return d
        if n + 1 > best_n:
            best, best_n = d, n + 1
    return best


def _lines_from(text: str, pos: int = 0, end: int | None = None):  # noqa: ANN202
    """(offset, line) of each line of ``text[pos:end]``, as ``split("\n")`` would give them, found one at a
    time so that reading a file's head does not split its million data lines."""
    end = len(text) if end is None else end
    while True:
        stop = text.find("\n", pos, end)
        if stop == -1:
            yield pos, text[pos:end]
            return
        yield pos, text[pos:stop]
        pos = stop + 1


class _Text:
    """``text[pos:end]`` read by pandas in chunks, without copying the whole span into a ``StringIO`` first."""

    def __init__(self, text: str, pos: int, end: int) -> None:
        self.text, self.pos, self.end = text, pos, end

    def read(self, size: int = -1) -> str:
        stop = self.end if size is None or size < 0 else min(self.end, self.pos + size)
        out, self.pos = self.text[self.pos:stop], stop
        return out

    def __iter__(self):  # noqa: ANN204 - pandas takes an object with read and __iter__ for a file
        return iter(self.text[self.pos:self.end].split("\n"))


class _Bytes:
    """``data[pos:end]`` read by pandas in chunks, without copying the whole span first (a fresh copy of a
    large file costs as much as a third of pandas' parse, in page faults)."""

    mode = "rb"  # pandas reads the chunks as bytes

    def __init__(self, data: bytes, pos: int, end: int) -> None:
        self.data, self.pos, self.end = data, pos, end

    def read(self, size: int = -1) -> bytes:
        stop = self.end if size is None or size < 0 else min(self.end, self.pos + size)
        out, self.pos = self.data[self.pos:stop], stop
        return out

    def __iter__(self):  # noqa: ANN204 - pandas takes an object with read and __iter__ for a file
        return iter(self.data[self.pos:self.end].split(b"\n"))


def _drop_blank_tail(text: str, lo: int, hi: int, blank) -> int:  # noqa: ANN001
    """The end of ``text[lo:hi]`` without its trailing lines for which ``blank(line)`` holds."""
    while hi > lo:
        cut = text.rfind("\n", lo, hi)
        if not blank(text[cut + 1 if cut != -1 else lo:hi]):
            break
        hi = max(cut, lo)
    return hi


_ASCII_SPACE = " \t\x0b\x0c\x1c\x1d\x1e\x1f"  # what str.isspace holds besides the newlines (gone by now)
_SPACE_LINE_RE = re.compile(r"^\s+$", re.MULTILINE)


def _has_blank_line(text: str) -> bool:
    """Whether ``text`` (lines joined by newlines) has an empty or whitespace-only line. ASCII text without
    any space character is settled by substring searches; only otherwise is the regular expression run."""
    if not text or text.startswith("\n") or text.endswith("\n") or "\n\n" in text:
        return True
    if text.isascii() and not any(c in text for c in _ASCII_SPACE):
        return False
    return _SPACE_LINE_RE.search(text) is not None


def _parse(data: bytes | _Bytes, delimiter: str, n_fields: int) -> pd.DataFrame:
    """The data rows as float64 columns, one row per line (blank lines too), by pandas' C parser."""
    return pd.read_csv(
        io.BytesIO(data) if isinstance(data, bytes) else data,  # bytes: pandas reads them without a text layer
        sep=delimiter,
        header=None,
        names=list(range(n_fields)),
        index_col=False,
        dtype=np.float64,
        engine="c",
        quoting=csv.QUOTE_NONE,
        skip_blank_lines=False,
    )


def _plain_values(data: bytes | _Bytes, delimiter: str, n_fields: int, width: int) -> np.ndarray | None:
    """The ``width`` named columns of ``data`` when pandas reads it with nothing to report: every line a row
    of ``n_fields`` fields, every named cell a finite number, the nameless trailing columns empty. None
    otherwise (the caller reads the rows again the checked way, to name the line and column).

    Row ``r`` is line ``r`` of ``data``: without quoting, comments or carriage returns, and with blank lines
    kept (``skip_blank_lines=False``), pandas' C tokenizer ends a row at each newline and nowhere else, and
    ``data`` has no trailing newline (the caller cut the blank tail)."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", pd.errors.ParserWarning)  # pandas cut a row that is too long
        try:
            values = _parse(data, delimiter, n_fields).to_numpy(dtype=np.float64)
        except (ValueError, OverflowError, pd.errors.ParserWarning):  # pandas ParserError is a ValueError
            return None
    if values.shape[1] != n_fields:
        return None
    named = values[:, :width]
    if not np.isfinite(named).all():  # a blank line or a short row reads as NaN; so does the text 'nan'
        return None
    if width < n_fields and not np.isnan(values[:, width:]).all():
        return None
    return named


_LINE_END_RE = re.compile(rb"\r\n?|\n")


def _raw_span(raw: bytes, offset: int, head_breaks: int, tail_breaks: int) -> tuple[int, int]:
    """Byte offsets in ``raw`` of the data part of a text whose CR LF and CR line ends were made LF: it
    starts after the ``head_breaks``-th line end from ``offset`` and ends at the ``tail_breaks``-th from the
    end (the line ends of the blank tail cut off)."""
    a = offset
    if head_breaks:
        for n, m in enumerate(_LINE_END_RE.finditer(raw, offset), 1):
            if n == head_breaks:
                a = m.end()
                break
    b = len(raw)
    for _ in range(tail_breaks):
        b = max(raw.rfind(b"\n", a, b), raw.rfind(b"\r", a, b))
        if b > a and raw[b] == 0x0A and raw[b - 1] == 0x0D:
            b -= 1
    return a, b


def _read_text(text: str, notes: list[str], source: tuple[bytes, int] | None = None) -> ParsedTable:
    """Read the text of a ``name (unit)`` table. The lines above the header are walked one by one; the
    data stay one string, cut by offset and handed whole to one ``pandas.read_csv``: the rows are split
    in Python only to name the line and cell of an error (the profiled reader's approach, issue 14).

    ``source``: ``(raw, offset)`` when ``text`` is exactly ``raw[offset:]`` decoded as UTF-8; the data part
    is then handed to pandas as the file's own bytes, without encoding it again.

    The happy path is pandas alone: the data part is parsed as it is, and only when pandas refuses it or
    the result looks wrong (a row too long or too short, a blank or comment line, a cell that is not a
    finite number) is it read again the checked way, which skips blank and ``#`` lines, counts each row's
    fields and names the line and column of what is wrong."""
    crs = "\r" in text
    if crs:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    comments: list[tuple[int, str]] = []  # (line number, '#' line) before the header
    header: tuple[int, int, str] | None = None  # (line index, offset after the line, the line)
    forced: str | None = None  # delimiter named by an Excel "sep=;" line
    for i, (at, line) in enumerate(_lines_from(text)):
        stripped = line.strip(" ")
        if forced is None and not comments and _SEP_LINE_RE.fullmatch(stripped):
            forced = stripped[4]
            continue
        stripped = stripped.strip()
        if not stripped:
            continue
        if stripped.startswith("#") or stripped.startswith('"#'):
            comments.append((i + 1, stripped))
            continue
        header = (i, at + len(line), line)
        break
    if header is None:
        if any(_parse_meta_line(_comment_body(c)) for _, c in comments):
            raise IngestError("the file has metadata lines but no table: add a header row and data rows")
        if comments:
            raise IngestError("the file has only comment lines and no table")
        raise IngestError("the file is empty")

    header_idx, header_end, header_line = header
    header_line = header_line.strip(" ")
    header_no = header_idx + 1
    lo = min(header_end + 1, len(text))  # the data part is text[lo:hi]
    hi = _drop_blank_tail(text, lo, len(text), lambda line: not line.strip())
    sample = [line for _, line in itertools.islice(_lines_from(text, lo, hi), 5 * _SNIFF_ROWS)
              if line.strip() and not line.lstrip().startswith("#")] if hi > lo else []
    delimiter = forced or _sniff_delimiter(header_line, sample[:_SNIFF_ROWS])
    fmt = "tsv" if delimiter == "\t" else "csv"
    try:
        headers = [h.strip() for h in next(csv.reader([header_line], delimiter=delimiter))]
    except (csv.Error, StopIteration) as exc:
        raise IngestError(f"the header row cannot be split into columns ({exc})", line=header_no) from exc
    if _looks_numeric(headers):
        raise IngestError(NO_HEADER_MESSAGE, line=header_no)
    width = _named_width(headers, header_no)
    specs = parse_headers(headers[:width], line=header_no)

    metadata: dict[str, str] = {}
    meta_lines: dict[str, int] = {}
    pad = delimiter * (len(headers) - 1)
    for no, comment in comments:
        parsed_meta = _parse_meta_line(_comment_body(comment, pad))
        if parsed_meta is not None:
            _add_meta(metadata, meta_lines, parsed_meta[0], parsed_meta[1], no)

    # A spreadsheet's trailing rows of bare separators (",,") are not data.
    hi = _drop_blank_tail(text, lo, hi, lambda line: not line.replace(delimiter, "").strip())
    if hi <= lo:
        raise IngestError("the file has a header row but no data rows below it", line=header_no)
    n_fields = len(headers)
    data: bytes | _Bytes
    if source is not None:
        raw, offset = source
        if crs:  # pandas ends a row at CR LF, CR or LF alike: only the offsets need the file's own line ends
            a, b = _raw_span(raw, offset, text.count("\n", 0, lo), text.count("\n", hi))
        else:
            a, b = offset + len(text[:lo].encode("utf-8")), len(raw) - len(text[hi:].encode("utf-8"))
        comma = delimiter == ";" and raw.find(b",", a, b) != -1
        quoted = raw.find(b'"', a, b) != -1
        data = raw[a:b] if comma or quoted else _Bytes(raw, a, b)
    else:
        data = text[lo:hi].encode("utf-8")
        comma, quoted = delimiter == ";" and b"," in data, b'"' in data
    if quoted:
        data = data.replace(b'"', b"")
    if comma:
        data = data.replace(b",", b".")
    values = _plain_values(data, delimiter, n_fields, width)
    if values is not None:
        if comma:
            notes.append("decimal commas read as decimal points (semicolon-separated file)")
        lines: list[list[str]] = []

        def plain_cell(r: int, c: int) -> str:  # only to name the cell of an error found in _build
            if not lines:
                lines.append(text[lo:hi].split("\n"))
            line = lines[0][r].replace('"', "")
            return _split_cells(line.replace(",", ".") if comma else line, delimiter)[c]

        return _build(specs, values, range(header_no + 1, header_no + 1 + len(values)), plain_cell,
                      metadata=metadata, fmt=fmt, notes=notes)
    del data

    body_text = text[lo:hi]
    linenos: Sequence[int]
    if "#" not in body_text and not _has_blank_line(body_text):
        # Fast path: no blank or comment line among the data, every line is a row.
        n_rows = body_text.count("\n") + 1
        linenos = range(header_no + 1, header_no + 1 + n_rows)
    else:
        body = body_text.split("\n")
        keep = [j for j, line in enumerate(body) if line.strip() and not line.lstrip().startswith("#")]
        linenos = [header_no + 1 + j for j in keep]
        body_text, n_rows = "\n".join(body[j] for j in keep), len(keep)
        if not keep:
            raise IngestError("the file has a header row but no data rows below it", line=header_no)

    if '"' in body_text:
        body_text = body_text.replace('"', "")
    if delimiter == ";" and "," in body_text:
        body_text = body_text.replace(",", ".")
        notes.append("decimal commas read as decimal points (semicolon-separated file)")
    split: list[list[str]] = []

    def rows() -> list[str]:  # the data rows one by one, split only to name the line of an error
        if not split:
            split.append(body_text.split("\n"))
        return split[0]

    expected = n_fields - 1

    def count_error() -> IngestError | None:
        for line, no in zip(rows(), linenos):
            got = line.count(delimiter) + 1
            if got != n_fields:
                hint = ""
                if delimiter == "," and got == 2 * n_fields and _DECIMAL_COMMA_RE.search(line):
                    hint = ("; the numbers look like decimal commas: read the file through an import profile "
                            "with \"decimal\": \",\" and another delimiter")
                return IngestError(
                    f"this row has {got} field{'s' if got != 1 else ''} but the header has {n_fields} columns{hint}",
                    line=no,
                )
        return None

    # One count over the text; only when it disagrees are the lines counted one by one.
    if body_text.count(delimiter) != expected * n_rows:
        err = count_error()
        if err is not None:
            raise err

    def cell_text(r: int, c: int) -> str:
        return _split_cells(rows()[r], delimiter)[c]

    def locate(exc: Exception) -> IngestError:
        err = count_error()
        if err is not None:
            return err
        for r, line in enumerate(rows()):
            for c, cell in enumerate(_split_cells(line, delimiter)):
                column = headers[c] if c < width else f"column {c + 1}"
                if c >= width:
                    if cell:
                        return IngestError(
                            f"'{cell}' is in a column that has no header", line=linenos[r], column=column
                        )
                    continue
                if not _NUMBER_RE.fullmatch(cell):
                    return _cell_error(cell, linenos[r], column)
        return IngestError(f"the data rows could not be read as numbers ({exc})", line=linenos[0])

    try:
        with warnings.catch_warnings():
            # Rows too long are found by count_error(); pandas' own warning is noise here.
            warnings.simplefilter("ignore", pd.errors.ParserWarning)
            parsed = _parse(body_text.encode("utf-8"), delimiter, n_fields)
    except (ValueError, OverflowError) as exc:  # pandas ParserError is a ValueError
        raise locate(exc) from exc
    values = parsed.to_numpy(dtype=np.float64)
    if values.shape != (n_rows, n_fields):
        raise locate(ValueError(f"read {values.shape[0]} rows from {n_rows} lines"))
    if not np.isfinite(values[:, :width]).all():
        # A short row reads as NaN: report it as a short row, not as an empty cell.
        err = count_error()
        if err is not None:
            raise err
    if width < n_fields:
        extra = ~np.isnan(values[:, width:])
        if extra.any():
            r, c = np.argwhere(extra)[0]
            raise IngestError(
                f"'{cell_text(int(r), int(c) + width)}' is in a column that has no header",
                line=linenos[r],
                column=f"column {int(c) + width + 1}",
            )
        values = values[:, :width]
    return _build(specs, values, linenos, cell_text, metadata=metadata, fmt=fmt, notes=notes)


# --------------------------------------------------------------------------- xlsx


def _cell_str(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _read_xlsx(raw: bytes, notes: list[str]) -> ParsedTable:
    import openpyxl  # imported here: only XLSX uploads pay for it

    try:
        with zipfile.ZipFile(io.BytesIO(raw)) as archive:
            names = set(archive.namelist())
            unpacked = sum(info.file_size for info in archive.infolist())
    except _ZIP_ERRORS as exc:
        raise IngestError(f"this file starts like an XLSX workbook but is damaged ({exc})") from exc
    if "xl/workbook.xml" not in names:
        raise IngestError(
            "this is a zip archive but not an XLSX workbook (is it .ods or .docx?); save it as .xlsx or CSV"
        )
    if unpacked > MAX_XLSX_UNCOMPRESSED_BYTES:
        raise OverLimit(f"this workbook unpacks to more than {MAX_XLSX_UNCOMPRESSED_BYTES // (1024 * 1024)} MiB; "
                        "export the sheet as CSV", limit="xlsx_unpacked_bytes", value=MAX_XLSX_UNCOMPRESSED_BYTES)
    try:
        wb = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many types on malformed workbooks; re-raised as IngestError
        raise IngestError(f"this XLSX workbook cannot be opened ({type(exc).__name__}: {exc})") from exc
    try:
        if not wb.worksheets:
            raise IngestError("the workbook has no worksheet")
        ws = wb.worksheets[0]
        if len(wb.worksheets) > 1:
            notes.append(f"read the first worksheet ('{ws.title}') of {len(wb.worksheets)}")
        try:
            rows = _bounded_rows(ws)
        except OverLimit:
            raise
        except Exception as exc:  # malformed sheet XML; re-raised as IngestError
            raise IngestError(f"the first worksheet cannot be read ({type(exc).__name__}: {exc})") from exc
    finally:
        wb.close()
    return _rows_to_table(rows, notes)


def _bounded_rows(ws) -> list[tuple[Any, ...]]:  # noqa: ANN001 - an openpyxl read-only worksheet
    """The sheet's rows, refused (:class:`OverLimit`) as soon as they pass the row or cell bound."""
    rows: list[tuple[Any, ...]] = []
    cells = 0
    for r in ws.iter_rows(values_only=True):
        rows.append(tuple(r))
        cells += len(r)
        if len(rows) > MAX_XLSX_ROWS:
            raise OverLimit(f"the worksheet has more than {MAX_XLSX_ROWS} rows; export it as CSV",
                            limit="xlsx_rows", value=MAX_XLSX_ROWS)
        if cells > MAX_XLSX_CELLS:
            raise OverLimit(f"the worksheet has more than {MAX_XLSX_CELLS} cells; export the columns you need "
                            "as CSV", limit="xlsx_cells", value=MAX_XLSX_CELLS)
    return rows


def _rows_to_table(rows: list[tuple[Any, ...]], notes: list[str]) -> ParsedTable:
    metadata: dict[str, str] = {}
    meta_lines: dict[str, int] = {}

    def blank(row: tuple[Any, ...]) -> bool:
        return all(_cell_str(v) == "" for v in row)

    def comment(row: tuple[Any, ...]) -> bool:
        first = next((v for v in row if _cell_str(v) != ""), None)
        return isinstance(first, str) and first.strip().startswith("#")

    header_idx: int | None = None
    for i, row in enumerate(rows):
        if blank(row):
            continue
        if comment(row):
            joined = " ".join(_cell_str(v) for v in row if _cell_str(v) != "")
            parsed = _parse_meta_line(joined.strip()[1:])
            if parsed is not None:
                _add_meta(metadata, meta_lines, parsed[0], parsed[1], i + 1)
            continue
        header_idx = i
        break
    if header_idx is None:
        if metadata:
            raise IngestError("the worksheet has metadata rows but no table: add a header row and data rows")
        raise IngestError("the first worksheet is empty")
    header_no = header_idx + 1
    headers = [_cell_str(v) for v in rows[header_idx]]
    if _looks_numeric(headers):
        raise IngestError(NO_HEADER_MESSAGE, line=header_no)
    width = _named_width(headers, header_no)
    specs = parse_headers(headers[:width], line=header_no)

    data: list[tuple[Any, ...]] = []
    linenos: list[int] = []
    for i in range(header_idx + 1, len(rows)):
        row = rows[i]
        if blank(row) or comment(row):
            continue
        data.append(row)
        linenos.append(i + 1)
    if not data:
        raise IngestError("the worksheet has a header row but no data rows below it", line=header_no)

    values = np.empty((len(data), width), dtype=np.float64)
    for r, row in enumerate(data):
        for c, v in enumerate(row):
            if c >= width:
                if _cell_str(v) != "":
                    raise IngestError(
                        f"'{_cell_str(v)}' is in a column that has no header",
                        line=linenos[r],
                        column=f"column {c + 1}",
                    )
                continue
            if isinstance(v, (int, float)) and not isinstance(v, bool):
                try:
                    values[r, c] = float(v)
                except OverflowError:  # an integer cell beyond the double range
                    raise _cell_error(_cell_str(v), linenos[r], specs[c].header) from None
            elif isinstance(v, str) and _NUMBER_RE.fullmatch(v.strip()):
                values[r, c] = float(v.strip())
            else:
                raise _cell_error(_cell_str(v), linenos[r], specs[c].header)
        for c in range(len(row), width):
            raise _cell_error("", linenos[r], specs[c].header)

    def cell_text(r: int, c: int) -> str:
        row = data[r]
        return _cell_str(row[c]) if c < len(row) else ""

    return _build(specs, values, linenos, cell_text, metadata=metadata, fmt="xlsx", notes=notes)


# --------------------------------------------------------------------------- public


def read_table(raw: bytes, *, filename: str | None = None) -> ParsedTable:
    """Read an instrument file (CSV, TSV or XLSX bytes) into canonical columns.

    Parameters
    ----------
    raw : bytes
        The whole file as uploaded (never re-read from disk).
    filename : str, optional
        The upload's name; used only to say what went wrong (an ``.xlsx`` that is
        not a workbook). The content decides the format.

    Returns
    -------
    ParsedTable

    Raises
    ------
    IngestError
        Binary or damaged file, missing header, unknown column or unit, a cell that
        is not a finite number (with its line and column), ragged rows, no data.

    Notes
    -----
    Text is UTF-8 (with or without BOM), UTF-16 with BOM, or else Windows-1252/Latin-1.
    The delimiter is the one of tab, semicolon, comma that splits the header and the
    first rows into the same number of fields. In semicolon-separated files decimal
    commas are accepted (common on European instrument PCs) and a note says so.
    Blank lines and ``#`` comment lines are skipped anywhere; ``# key: value`` lines
    before the header are metadata. Offset units (degC) are converted with pint's
    offset arithmetic; temperatures below absolute zero are refused.
    """
    raw = bytes(raw)
    notes: list[str] = []
    if not raw or raw.isspace():  # as "not raw.strip()", without copying a large file
        raise IngestError("the file is empty")
    if raw.startswith(_ZIP_MAGIC):
        return _read_xlsx(raw, notes)
    if filename and filename.lower().endswith((".xlsx", ".xlsm")):
        try:
            raw.decode("utf-8")
        except UnicodeDecodeError:
            raise IngestError(
                f"'{filename}' is named like an XLSX workbook but is not one; save it again as .xlsx or CSV"
            ) from None
        notes.append(f"'{filename}' is named .xlsx but holds text: read as CSV/TSV")
    text, enc_notes = _decode(raw)
    notes.extend(enc_notes)
    bom = 0  # UTF-8 byte-order marks _decode stripped (it leaves no note for UTF-8)
    while raw.startswith(b"\xef\xbb\xbf", bom):
        bom += 3
    return _read_text(text, notes, None if enc_notes else (raw, bom))


def _header_for(column: Any) -> str:
    name = str(column)
    q = BY_NAME.get(name)
    return q.header if q is not None else name


def _check_writable(frame: pd.DataFrame, metadata: Mapping[str, Any] | None) -> list[str]:
    lines = []
    for key, value in (metadata or {}).items():
        key_s, value_s = str(key).strip(), str(value).strip()
        if not key_s or ":" in key_s or "\n" in key_s or "\r" in key_s:
            raise ValueError(f"metadata key {key!r} cannot be written as '# key: value'")
        if "\n" in value_s or "\r" in value_s:
            raise ValueError(f"metadata value for {key!r} has a line break")
        lines.append(f"# {key_s}: {value_s}")
    for name in frame.columns:
        col = frame[name]
        if pd.api.types.is_numeric_dtype(col) and not np.isfinite(col.to_numpy(dtype=np.float64)).all():
            raise ValueError(f"column {name!r} holds NaN or infinity; an instrument file cannot carry them")
    return lines


def to_csv_bytes(frame: pd.DataFrame, metadata: Mapping[str, Any] | None = None) -> bytes:
    """Write ``# key: value`` lines, then the frame as CSV (UTF-8).

    Column names are the headers (``"E (kV/cm)"``); canonical names (``E_kV_cm``) are
    written as their headers so a frame from :func:`read_table` reads back the same.
    Floats are written with Python's shortest repr, which reads back bit-exact.
    """
    lines = _check_writable(frame, metadata)
    out = io.StringIO()
    for line in lines:
        if line.endswith((",", ";", "\t")):
            # Quoted, so the reader does not take the end for a spreadsheet's empty cells.
            line = '"' + line.replace('"', '""') + '"'
        out.write(line + "\n")
    frame.to_csv(out, index=False, header=[_header_for(c) for c in frame.columns], lineterminator="\n")
    return out.getvalue().encode("utf-8")


def to_xlsx_bytes(frame: pd.DataFrame, metadata: Mapping[str, Any] | None = None) -> bytes:
    """Write the same layout as :func:`to_csv_bytes` into the first sheet of an XLSX workbook."""
    import openpyxl

    lines = _check_writable(frame, metadata)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("data")
    for line in lines:
        ws.append([line])
    ws.append([_header_for(c) for c in frame.columns])
    for row in frame.itertuples(index=False, name=None):
        ws.append([v.item() if isinstance(v, np.generic) else v for v in row])
    out = io.BytesIO()
    wb.save(out)
    return out.getvalue()
