"""Import profiles: how to read one instrument's own export without a spreadsheet in between.

A profile (JSON, stored by ``services/import_profiles.py``) says where the table starts (skip
``skip_lines`` lines, or start after the first line matching ``start_after``), the delimiter, the
decimal mark and the encoding, whether a units row follows the header row, how the file's columns
map to the canonical quantities of :mod:`server.ingest.columns` (each with its unit, converted by
pint exactly as a ``name (unit)`` header is), which columns to ignore, which header lines are
conditions (``Area: 0.785`` with the unit the profile states), and how blocks are separated when
one file holds several loops or a whole temperature sweep (a blank line, a repeated header row,
or a line matching a pattern).

Everything here is pure: bytes and a :class:`Profile` in, :class:`ProfiledRead` out, one
:class:`~server.ingest.table.ParsedTable` per block (the same type the plain reader returns, so
the kinds analyse it unchanged). Errors are :class:`~server.errors.IngestError` naming the
profile, the file line and the column, or the profile field when the profile itself is wrong.
"""

from __future__ import annotations

import codecs
import csv
import itertools
import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd

from server.errors import IngestError
from server.ingest.columns import BY_NAME, CanonicalQuantity, ColumnSpec, quantities_named, split_header
from server.ingest.conditions import CONDITION_FIELDS, TEXT_FIELDS, parse_conditions
from server.ingest.table import _build, _cell_error, _decode, _drop_blank_tail, _lines_from, _Text
from server.ingest.units import UNIT_PARSE_ERRORS, normalise_unit_text, parse_unit, ureg

#: The keys a profile's JSON may carry (others are refused, so a typo is not silently ignored).
PROFILE_KEYS = ("name", "kind", "description", "start_after", "skip_lines", "delimiter", "decimal", "encoding",
                "units_row", "columns", "ignore", "conditions", "blocks")
DELIMITERS = {",": ",", ";": ";", "\t": "\t", "tab": "\t", "|": "|"}
SEPARATORS = ("blank_line", "repeated_header")
#: A pattern is compiled from what a person typed; its length is bounded (work per request).
MAX_PATTERN_CHARS = 200
MAX_SKIP_LINES = 100_000
MAX_MAPPED = 40
_NAME_RE = re.compile(r"[a-z0-9][a-z0-9_.-]{0,59}")
_CONDITION_LINE_RE = re.compile(r"\s*([^:=]{1,80}?)\s*[:=]\s*(.*?)\s*")
_NUMBER_START = re.compile(r"\s*\"?[+-]?(?:\d|[.,]\d)")
_BLANK_RE = re.compile(r"^[ \t]*$", re.MULTILINE)
_BARE_NUMBER = re.compile(r"[+-]?(?:\d+[.,]?\d*|[.,]\d+)(?:[eE][+-]?\d+)?")


def _norm(name: str) -> str:
    return re.sub(r"\s+", " ", str(name).replace("_", " ")).strip().lower()


@dataclass(frozen=True)
class ColumnMap:
    """One file column read as a canonical quantity; ``unit`` None: the file's header or units row gives it."""

    source: str
    quantity: CanonicalQuantity
    unit: str | None
    #: Without a unit, the quantities the name may mean (``T``: time or temperature); the file's unit decides.
    alternatives: tuple[CanonicalQuantity, ...] = ()


@dataclass(frozen=True)
class ConditionMap:
    """One header line key read as a condition field (``area``, ``temperature`` ...)."""

    source: str
    to: str
    unit: str | None


@dataclass(frozen=True)
class Profile:
    """A validated import profile (see the module docstring); build it with :func:`profile_from_json`."""

    name: str
    kind: str
    start_after: str | None
    skip_lines: int
    delimiter: str
    decimal: str
    encoding: str
    units_row: bool
    columns: tuple[ColumnMap, ...]
    ignore: tuple[str, ...]
    conditions: tuple[ConditionMap, ...]
    separator: str | None
    varies: str | None
    version: int = 1

    @property
    def label(self) -> str:
        return f"profile '{self.name}' (version {self.version})"


def _fail(message: str, field: str) -> IngestError:
    return IngestError(message, field=field)


def _resolve_quantity(to: str, unit: str | None, field: str) -> tuple[CanonicalQuantity, ...]:
    """The canonical quantity a mapping names (``V_V`` or a symbol/alias such as ``V``), checked against its unit."""
    exact = BY_NAME.get(to)
    candidates = [exact] if exact is not None else quantities_named(to)
    if not candidates:
        names = ", ".join(sorted({q.symbol for q in BY_NAME.values()} | set(BY_NAME)))
        raise _fail(f"'{to}' is not a canonical column; use one of {names}", f"{field}.to")
    if unit is None:
        return tuple(candidates)
    matches = []
    for q in candidates:
        try:
            parsed = parse_unit(normalise_unit_text(unit, temperature=q.temperature))
        except UNIT_PARSE_ERRORS:
            continue
        if parsed.dimensionality == q.dimensionality:
            matches.append(q)
    if not matches:
        labels = " or ".join(f"{q.label} ({q.unit or 'no unit'})" for q in candidates)
        raise _fail(f"'{unit}' is not a unit of {labels}", f"{field}.unit")
    exact_case = [q for q in matches if q.symbol == to]
    return ((exact_case or matches)[0],)


def mapped_quantities(to: str, unit: str | None) -> tuple[CanonicalQuantity, ...]:
    """What a column mapping ``{"to": to, "unit": unit}`` reads: one quantity, or several when ``to`` is a
    symbol only the unit tells apart (``T``: time or temperature) and no unit is given (then each file's
    header or units row decides). Raises IngestError (field ``to`` or ``unit``) as a saved profile would."""
    return _resolve_quantity(to, unit or None, "columns")


def _check_pattern(pattern: Any, field: str) -> str:
    if not isinstance(pattern, str) or not pattern:
        raise _fail("give a regular expression as text", field)
    if len(pattern) > MAX_PATTERN_CHARS:
        raise _fail(f"the pattern is longer than {MAX_PATTERN_CHARS} characters", field)
    try:
        re.compile(pattern)
    except re.error as exc:
        raise _fail(f"'{pattern}' is not a regular expression ({exc})", field) from exc
    return pattern


def profile_from_json(data: Mapping[str, Any], *, version: int = 1) -> Profile:
    """Validate a profile's JSON (the issue's keys) into a :class:`Profile`.

    Raises
    ------
    IngestError
        ``field`` names the offending key, e.g. ``columns.Charge.unit`` for a unit of the wrong
        dimension or ``columns.Charge.to`` for an unknown canonical column.
    """
    if not isinstance(data, Mapping):
        raise _fail("a profile is a JSON object", "profile")
    unknown = sorted(set(data) - set(PROFILE_KEYS))
    if unknown:
        raise _fail(f"unknown key '{unknown[0]}'; a profile has {', '.join(PROFILE_KEYS)}", unknown[0])
    name = data.get("name")
    if not isinstance(name, str) or not _NAME_RE.fullmatch(name):
        raise _fail("a profile name is 1-60 lower-case letters, digits, '-', '_' or '.'", "name")
    kind = data.get("kind")
    if not isinstance(kind, str) or not kind:
        raise _fail("name the measurement kind the profile reads", "kind")
    start_after = data.get("start_after")
    if start_after is not None:
        start_after = _check_pattern(start_after, "start_after")
    skip = data.get("skip_lines", 0)
    if not isinstance(skip, int) or isinstance(skip, bool) or not 0 <= skip <= MAX_SKIP_LINES:
        raise _fail(f"skip_lines is a whole number from 0 to {MAX_SKIP_LINES}", "skip_lines")
    delimiter = DELIMITERS.get(data.get("delimiter", ","))
    if delimiter is None:
        raise _fail("the delimiter is one of ',', ';', tab ('\\t' or 'tab') or '|'", "delimiter")
    decimal = data.get("decimal", ".")
    if decimal not in (".", ","):
        raise _fail("the decimal mark is '.' or ','", "decimal")
    if decimal == delimiter:
        raise _fail("the decimal mark cannot be the delimiter", "decimal")
    encoding = data.get("encoding", "auto")
    if not isinstance(encoding, str) or not encoding:
        raise _fail("name an encoding such as utf-8 or cp1252 (or auto)", "encoding")
    if encoding != "auto":
        try:
            codecs.lookup(encoding)
        except LookupError as exc:
            raise _fail(f"unknown encoding '{encoding}'", "encoding") from exc
    units_row = data.get("units_row", False)
    if not isinstance(units_row, bool):
        raise _fail("units_row is true or false", "units_row")

    raw_columns = data.get("columns")
    if not isinstance(raw_columns, Mapping) or not raw_columns:
        raise _fail("map at least one file column to a canonical column", "columns")
    if len(raw_columns) > MAX_MAPPED:
        raise _fail(f"at most {MAX_MAPPED} columns", "columns")
    columns: list[ColumnMap] = []
    seen: dict[str, str] = {}
    for source, spec in raw_columns.items():
        field = f"columns.{source}"
        if not isinstance(spec, Mapping) or not isinstance(spec.get("to"), str) or set(spec) - {"to", "unit"}:
            raise _fail('each column is {"to": canonical column, "unit": unit of the file}', field)
        unit = spec.get("unit")
        if unit is not None and not isinstance(unit, str):
            raise _fail("the unit is text, e.g. 'nC'", f"{field}.unit")
        found = _resolve_quantity(spec["to"], unit, field)
        q = found[0]
        if len(found) == 1 and q.name in seen:
            raise _fail(f"{q.label} is mapped twice (from '{seen[q.name]}' and '{source}')", field)
        if len(found) == 1:
            seen[q.name] = source
        columns.append(ColumnMap(str(source), q, unit, found))

    ignore = data.get("ignore", [])
    if not isinstance(ignore, list) or not all(isinstance(i, str) for i in ignore):
        raise _fail("ignore is a list of column names", "ignore")
    clash = {_norm(i) for i in ignore} & {_norm(c.source) for c in columns}
    if clash:
        raise _fail(f"column '{sorted(clash)[0]}' is both mapped and ignored", "ignore")

    raw_conditions = data.get("conditions", {})
    if not isinstance(raw_conditions, Mapping) or len(raw_conditions) > MAX_MAPPED:
        raise _fail('conditions map header keys to {"to": field, "unit": unit}', "conditions")
    conditions: list[ConditionMap] = []
    for source, spec in raw_conditions.items():
        field = f"conditions.{source}"
        if not isinstance(spec, Mapping) or not isinstance(spec.get("to"), str) or set(spec) - {"to", "unit"}:
            raise _fail('each condition is {"to": condition field, "unit": unit of a bare number}', field)
        to, unit = spec["to"], spec.get("unit")
        if to in CONDITION_FIELDS and to != "endo":
            if unit is not None:
                try:  # the one conditions parser checks the unit's dimension
                    parse_conditions({to: f"1 {unit}"}, {})
                except IngestError as exc:
                    raise _fail(exc.message, f"{field}.unit") from exc
        elif to in TEXT_FIELDS or to == "endo":
            if unit is not None:
                raise _fail(f"{to} is text and has no unit", f"{field}.unit")
        else:
            raise _fail(f"'{to}' is not a condition; use one of {', '.join(CONDITION_FIELDS + TEXT_FIELDS)}",
                        f"{field}.to")
        conditions.append(ConditionMap(str(source), to, unit))

    blocks = data.get("blocks") or {}
    if not isinstance(blocks, Mapping) or set(blocks) - {"separator", "varies"}:
        raise _fail('blocks is {"separator": "blank_line" | "repeated_header" | a pattern, "varies": field}',
                    "blocks")
    separator = blocks.get("separator")
    if separator is not None and separator not in SEPARATORS:
        separator = _check_pattern(separator, "blocks.separator")
    varies = blocks.get("varies")
    if varies is not None and varies not in CONDITION_FIELDS:
        raise _fail(f"varies names a condition ({', '.join(CONDITION_FIELDS)})", "blocks.varies")
    if varies is not None and separator is None:
        raise _fail("say how blocks are separated when a condition varies between them", "blocks.separator")
    return Profile(name=name, kind=kind, start_after=start_after, skip_lines=skip, delimiter=delimiter,
                   decimal=decimal, encoding=encoding, units_row=units_row, columns=tuple(columns),
                   ignore=tuple(ignore), conditions=tuple(conditions), separator=separator, varies=varies,
                   version=version)


# --------------------------------------------------------------------------- reading


@dataclass(frozen=True)
class Block:
    """One table of a profiled file: its canonical table, its file lines and the conditions it states."""

    table: Any  # ParsedTable
    first_line: int
    last_line: int
    conditions: dict[str, str]


@dataclass(frozen=True)
class ProfiledRead:
    """A file read through a profile.

    ``conversions`` lists each column as read, e.g. ``"Drive Voltage (V) -> V (V)"``;
    ``conditions`` are the file-wide ones (each block's own are in ``Block.conditions``).
    """

    profile: Profile
    blocks: tuple[Block, ...]
    columns: tuple[str, ...]
    units: tuple[str, ...]
    conversions: tuple[str, ...]
    conditions: dict[str, str]
    notes: tuple[str, ...]


def _decode_for(raw: bytes, profile: Profile) -> tuple[str, list[str]]:
    return _decode_as(raw, profile.encoding, profile.label)


def _decode_as(raw: bytes, encoding: str, label: str) -> tuple[str, list[str]]:
    if encoding == "auto":
        return _decode(raw)
    if b"\x00" in raw[:4096] and not encoding.lower().startswith("utf-16"):
        _decode(raw)  # raises the plain reader's binary-file error
    try:
        text = raw.decode(encoding)
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise IngestError(f"{label}: byte {raw[exc.start]:#04x} is not {encoding} text",
                          line=line, field="encoding") from exc
    except LookupError as exc:
        raise IngestError(f"unknown encoding '{encoding}'", field="encoding") from exc
    return text.lstrip("\ufeff"), [f"read as {encoding} text"]


def sketch(raw: bytes, *, encoding: str = "auto", delimiter: str = ",", skip_lines: int = 0,
           start_after: str | None = None, units_row: bool = False, max_lines: int = 40) -> dict[str, Any]:
    """A first look at a file for writing its profile: its first lines (numbered), the header row where the
    table would start with these settings, its cells (and the units row's), and the ``KEY: VALUE`` lines
    above it that could be conditions."""
    text, _ = _decode_as(raw, encoding, "this file")
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    d = DELIMITERS.get(delimiter, delimiter)
    start = 0
    if start_after:
        pattern = re.compile(_check_pattern(start_after, "start_after"))
        found = next((i for i, line in enumerate(lines) if pattern.search(line)), None)
        if found is None:
            raise IngestError(f"no line matches the start pattern '{start_after}'", field="start_after")
        start = found + 1
    start += max(0, int(skip_lines))
    at = next((i for i in range(start, len(lines)) if lines[i].strip()), None)
    if at is None:
        raise IngestError("nothing follows the start of the table", field="skip_lines")
    above = []
    for i in range(at):
        m = _CONDITION_LINE_RE.fullmatch(lines[i].strip().lstrip("#").strip())
        cells = [c for c in _cells(lines[i], d) if c]
        if m:
            above.append((i + 1, m.group(1), m.group(2)))
        elif len(cells) >= 2:
            above.append((i + 1, cells[0], " ".join(cells[1:])))
    header = [c for c in _cells(lines[at], d)]
    units = _cells(lines[at + 1], d) if units_row and at + 1 < len(lines) else None
    return {"lines": [(i + 1, line[:200]) for i, line in enumerate(lines[:max_lines])], "header_line": at + 1,
            "header": [(c, split_header(c)[0], _file_unit(units[i] if units and i < len(units) else
                                                           split_header(c)[1])) for i, c in enumerate(header) if c],
            "conditions": above[:20]}


def _cells(line: str, delimiter: str) -> list[str]:
    if '"' in line:
        row = next(csv.reader([line], delimiter=delimiter), [])
    else:
        row = line.split(delimiter)
    return [c.strip() for c in row]


def _condition_of(line: str, profile: Profile) -> tuple[ConditionMap, str] | None:
    """A header line ``KEY: VALUE``, ``KEY = VALUE`` or ``KEY<delimiter>VALUE`` the profile maps -> (map, value)."""
    text = line.strip().lstrip("#").strip()
    m = _CONDITION_LINE_RE.fullmatch(text)
    pairs = []
    if m:
        pairs.append((m.group(1), m.group(2)))
    cells = [c for c in _cells(text, profile.delimiter) if c]
    if len(cells) >= 2:
        pairs.append((cells[0], " ".join(cells[1:])))
    for key, value in pairs:
        name, key_unit = split_header(key)
        for cm in profile.conditions:
            if _norm(cm.source) in (_norm(key), _norm(name)):
                return cm, _condition_text(value.strip().strip('"'), cm.unit or key_unit, profile)
    return None


def _condition_text(value: str, unit: str | None, profile: Profile) -> str:
    m = re.match(r"\s*([+-]?(?:\d+[.,]?\d*|[.,]\d+)(?:[eE][+-]?\d+)?)\s*(.*)", value)
    if m is None:
        return value
    number, rest = m.group(1), m.group(2).strip()
    if profile.decimal == ",":
        number = number.replace(",", ".")
    if not rest and unit:
        rest = unit
    return f"{number} {rest}".strip()


def _read_conditions(lines: Sequence[tuple[int, str]], profile: Profile) -> dict[str, str]:
    out: dict[str, str] = {}
    where: dict[str, int] = {}
    for no, line in lines:
        got = _condition_of(line, profile)
        if got is None:
            continue
        cm, text = got
        if cm.to in CONDITION_FIELDS:
            try:
                parse_conditions({cm.to: text}, {})
            except IngestError as exc:
                raise IngestError(f"{profile.label}: {exc.message}", line=no, field=cm.to) from exc
        if cm.to in out and out[cm.to] != text:
            raise IngestError(f"{profile.label}: {cm.to} is given twice with different values "
                              f"(lines {where[cm.to]} and {no})", line=no, field=cm.to)
        out[cm.to], where[cm.to] = text, no
    return out


def _is_data(line: str, profile: Profile) -> bool:
    return bool(_NUMBER_START.match(line))


def _blank(line: str, delimiter: str) -> bool:
    return not line.replace(delimiter, "").strip()


def _ws(name: str) -> str:
    return re.sub(r"\s+", " ", str(name)).strip()


def _find(sources: Sequence[str], cell: str) -> int | None:
    """Which of ``sources`` a header cell names: as written (``T`` and ``t`` differ), else ignoring case
    and ``_`` when that is unambiguous; the cell may carry its unit (``Charge [nC]``)."""
    names = [cell, split_header(cell)[0]]
    for name in names:
        exact = [i for i, s in enumerate(sources) if _ws(s) == _ws(name)]
        if exact:
            return exact[0]
    for name in names:
        loose = [i for i, s in enumerate(sources) if _norm(s) == _norm(name)]
        if len(loose) == 1:
            return loose[0]
    return None


def _matches_header(cells: Sequence[str], profile: Profile) -> bool:
    sources = [c.source for c in profile.columns]
    found = {_find(sources, c) for c in cells if c}
    return all(i in found for i in range(len(sources)))


def _blank_spans(text: str, lo: int, hi: int, delimiter: str) -> tuple[list[tuple[int, int]], int]:
    """(line index, offset) of each blank line of ``text[lo:hi]`` (nothing but spaces, tabs and delimiters),
    found by one regular-expression scan anchored on the newlines, not a Python loop over a million lines;
    and the number of lines."""
    blank = r"[ \t%s]*" % re.escape(delimiter)
    pattern = re.compile(r"\n%s(?=\n|\Z)" % blank)
    out: list[tuple[int, int]] = []
    first = text.find("\n", lo, hi)
    if re.fullmatch(blank, text[lo:hi if first == -1 else first]):
        out.append((0, lo))
    line, last = 0, lo
    for m in pattern.finditer(text, lo, hi):
        line += text.count("\n", last, m.start() + 1)
        last = m.start() + 1
        out.append((line, last))
    return out, line + text.count("\n", last, hi) + 1


@dataclass
class _Segment:
    """One block's lines: ``text[lo:hi]`` (the lines joined by newlines) and the 1-based file line of the first."""

    start: int
    text: str
    lo: int
    hi: int
    known_lines: int | None = None  # the number of lines, when cutting the blocks counted them

    @cached_property
    def lines(self) -> list[str]:
        return self.text[self.lo:self.hi].split("\n")

    @property
    def n_lines(self) -> int:
        if self.known_lines is None:
            self.known_lines = self.text.count("\n", self.lo, self.hi) + 1
        return self.known_lines


def _segments(text: str, lo: int, hi: int, first_no: int, profile: Profile) -> list[_Segment]:
    """Cut the table part ``text[lo:hi]`` into blocks by the profile's separator (None: one block). A
    blank-line separator cuts by offset; the others need the lines."""
    sep = profile.separator
    if sep is None:
        return [_Segment(first_no, text, lo, hi)]
    if sep == "blank_line":
        segs: list[_Segment] = []
        begin, begin_at = 0, lo
        spans, n_lines = _blank_spans(text, lo, hi, profile.delimiter)
        for i, at in spans + [(n_lines, hi + 1)]:
            if i > begin:
                segs.append(_Segment(first_no + begin, text, begin_at, at - 1, i - begin))
            end = text.find("\n", at, hi)
            begin, begin_at = i + 1, (hi + 1 if end == -1 else end + 1)
        return segs
    lines = text[lo:hi].split("\n")
    starts = list(itertools.accumulate((len(line) + 1 for line in lines), initial=lo))
    cuts: list[int] = [0]
    if sep == "repeated_header":
        header = next((line for line in lines if _matches_header(_cells(line, profile.delimiter), profile)), None)
        if header is None:
            return [_Segment(first_no, text, lo, hi)]
        at = [i for i, line in enumerate(lines) if line == header]
        for i in at[1:]:
            # The lines just above a repeated header that are not data (e.g. "Temperature: 310 K")
            # open the next block.
            j = i
            while j - 1 > cuts[-1] and not _is_data(lines[j - 1], profile):
                j -= 1
            cuts.append(j)
    else:
        pattern = re.compile(sep)
        cuts.extend(i for i, line in enumerate(lines) if i > 0 and pattern.search(line))
    cuts.append(len(lines))
    return [_Segment(first_no + a, text, starts[a], starts[b] - 1) for a, b in zip(cuts, cuts[1:]) if b > a]


def read_profiled(raw: bytes, profile: Profile) -> ProfiledRead:
    """Read an instrument's export through ``profile``.

    Returns one :class:`Block` per table in the file. Text before the first table is read for
    conditions; a text block after the last table (a summary) is left out, with a note.

    Raises
    ------
    IngestError
        Naming the profile, the file line and the column: the start pattern never found, a mapped
        column missing from the header, a column neither mapped nor ignored, a unit in the file that
        disagrees with the profile, a cell that is not a number, a block that does not state the
        condition that varies.
    """
    if not raw:
        raise IngestError("the file is empty", field="file")
    text, notes = _decode_for(raw, profile)
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    # The head is walked line by line; the table part stays one string, cut by offset (issue 14's speed).
    head: list[tuple[int, str]] = []  # (offset, line) of the lines before the table
    walk = _lines_from(text)
    if profile.start_after is not None:
        pattern = re.compile(profile.start_after)
        for at, line in walk:
            head.append((at, line))
            if pattern.search(line):
                break
        else:
            raise IngestError(f"{profile.label}: no line matches the start pattern '{profile.start_after}'",
                              field="start_after")
    start = len(head) + profile.skip_lines
    head.extend(itertools.islice(walk, profile.skip_lines))
    if len(head) < start or (head and head[-1][0] + len(head[-1][1]) >= len(text)):
        raise IngestError(f"{profile.label}: the file has only {text.count(chr(10)) + 1} lines; the table would "
                          "start after them", field="skip_lines")
    preamble = [(no, line) for no, (_, line) in enumerate(head, 1)]
    lo = head[-1][0] + len(head[-1][1]) + 1 if head else 0
    hi = _drop_blank_tail(text, lo, len(text), lambda line: not line.strip())

    file_conditions = _read_conditions(preamble, profile)
    blocks: list[Block] = []
    header: tuple[list[str], list[ColumnSpec], list[int], str] | None = None
    trailing: list[tuple[int, int]] = []
    for seg in (_segments(text, lo, hi, start + 1, profile) if hi > lo else []):
        found = _parse_segment(seg, profile, header)
        if found is None:  # text only
            if blocks:
                trailing.append((seg.start, seg.start + seg.n_lines - 1))
            else:
                file_conditions.update(_read_conditions(list(enumerate(seg.lines, seg.start)), profile))
            continue
        table_header, block_lines, data_start, data_at = found
        header = table_header
        own = _read_conditions(block_lines, profile)
        if not blocks:  # what the file states above its first table holds for every block
            file_conditions.update({k: v for k, v in own.items() if k != profile.varies})
        blocks.append(_read_block(seg, profile, header, data_start, data_at, own, file_conditions, notes))
    if not blocks:
        raise IngestError(f"{profile.label}: no table found after line {start}", line=start + 1)
    if trailing:
        spans = ", ".join(f"lines {a}-{b}" for a, b in trailing)
        notes.append(f"text after the last table ({spans}) was not read as data")
    if profile.varies and len(blocks) > 1:
        for b in blocks:
            if profile.varies not in b.conditions:
                raise IngestError(f"{profile.label}: the block starting at line {b.first_line} does not state its "
                                  f"{profile.varies}, which varies between blocks", line=b.first_line,
                                  field=profile.varies)
    _, specs, _, _ = header
    return ProfiledRead(
        profile=profile, blocks=tuple(blocks),
        columns=tuple(s.header for s in specs), units=tuple(f"{s.unit:~P}" if str(s.unit) else "" for s in specs),
        conversions=tuple(f"{s.header} -> {s.quantity.header}" for s in specs),
        conditions=file_conditions, notes=tuple(notes))


def _parse_segment(seg: _Segment, profile: Profile, previous):  # noqa: ANN001, ANN202
    """(header, the block's text lines, index of the first data line, the offset where the data start) or
    None for text only. Only the lines down to the first data line are split; the data stay one string."""
    d = profile.delimiter
    lines: list[str] = []
    offsets: list[int] = []
    first_data = None
    for i, (at, line) in enumerate(_lines_from(seg.text, seg.lo, seg.hi)):
        lines.append(line)
        offsets.append(at)
        if first_data is None and _is_data(line, profile):
            first_data = i
        if first_data is not None and i > first_data:  # one line more: a units row may start with a digit
            break
    header_at = None
    limit = first_data if first_data is not None else len(lines)
    for i in range(limit):
        if _matches_header(_cells(lines[i], d), profile):
            header_at = i
            break

    def from_line(i: int) -> int:  # the offset where line i of the segment starts
        return offsets[i] if i < len(offsets) else seg.hi

    if header_at is None:
        if first_data is None:
            return None
        if previous is None:
            near = next((i for i in range(first_data - 1, -1, -1) if lines[i].strip()), None)
            return _missing_columns(profile, lines[near] if near is not None else "",
                                    seg.start + (near if near is not None else first_data))
        text_lines = [(seg.start + i, lines[i]) for i in range(first_data)]
        return previous, text_lines, first_data, from_line(first_data)
    header = _columns(lines, header_at, seg.start, profile)
    data_start = header_at + 1 + (1 if profile.units_row else 0)
    text_lines = [(seg.start + i, lines[i]) for i in range(header_at)]
    return header, text_lines, data_start, from_line(data_start)


def _missing_columns(profile: Profile, line: str, no: int):  # noqa: ANN202
    sources = [c.source for c in profile.columns]
    found = {_find(sources, c) for c in _cells(line, profile.delimiter) if c}
    missing = [s for i, s in enumerate(sources) if i not in found]
    raise IngestError(f"{profile.label}: column '{missing[0]}' is not in the header row "
                      f"('{line.strip()[:120]}')", line=no, column=missing[0])


def _file_unit(text: str | None) -> str | None:
    if text is None:
        return None
    text = text.strip().strip("()[]").strip()
    return text or None


def _columns(lines: list[str], at: int, start: int, profile: Profile):  # noqa: ANN202
    """(header cells, specs of the used columns, their positions, the header as written) of a header row."""
    d = profile.delimiter
    no = start + at
    cells = _cells(lines[at], d)
    units: list[str] | None = None
    if profile.units_row:
        if at + 1 >= len(lines):
            raise IngestError(f"{profile.label}: the units row under the header is missing", line=no + 1)
        units = _cells(lines[at + 1], d)
    sources = [c.source for c in profile.columns]
    specs: list[ColumnSpec] = []
    where: list[int] = []
    for i, cell in enumerate(cells):
        if not cell:
            continue
        name, unit_text = split_header(cell)
        at = _find(sources, cell)
        if at is None:
            if _find(profile.ignore, cell) is not None:
                continue
            raise IngestError(f"{profile.label}: column '{cell}' is neither mapped nor ignored; add it to the "
                              "profile's columns or ignore", line=no, column=cell)
        cm = profile.columns[at]
        if _norm(cell) == _norm(cm.source):
            unit_text = None  # the whole cell is the mapped name, e.g. "Charge [nC]" mapped as written
        file_unit = _file_unit(units[i] if units is not None and i < len(units) else unit_text)
        specs.append(_spec_of(cm, file_unit, profile, no, cell))
        where.append(i)
    return cells, specs, where, lines[at]


def _spec_of(cm: ColumnMap, file_unit: str | None, profile: Profile, no: int, cell: str) -> ColumnSpec:
    if cm.unit is None and file_unit is not None and len(cm.alternatives) > 1:
        for q in cm.alternatives:
            try:
                if parse_unit(normalise_unit_text(file_unit, temperature=q.temperature)).dimensionality == \
                        q.dimensionality:
                    return ColumnSpec(cell, q, _unit_of(q, cm, file_unit, profile, no, cell))
            except UNIT_PARSE_ERRORS:
                continue
    return ColumnSpec(cell, cm.quantity, _unit_of(cm.quantity, cm, file_unit, profile, no, cell))


def _unit_of(q: CanonicalQuantity, cm: ColumnMap, file_unit: str | None, profile: Profile, no: int,  # noqa: ANN202
             cell: str):

    def parse(text: str, whose: str):  # noqa: ANN202
        try:
            unit = parse_unit(normalise_unit_text(text, temperature=q.temperature))
        except UNIT_PARSE_ERRORS as exc:
            raise IngestError(f"{profile.label}: '{text}' ({whose}) is not a unit", line=no, column=cell) from exc
        if unit.dimensionality != q.dimensionality:
            raise IngestError(f"{profile.label}: '{text}' ({whose}) is not a unit of {q.label}", line=no,
                              column=cell)
        return unit

    stated = parse(cm.unit, "the profile's unit") if cm.unit is not None else None
    given = parse(file_unit, "the file's unit") if file_unit is not None else None
    if stated is not None and given is not None:
        if abs(float(ureg.Quantity(1.0, given).to(stated).magnitude) - 1.0) > 1e-12:
            raise IngestError(f"{profile.label}: the file gives '{cell}' in {file_unit} but the profile says "
                              f"{cm.unit}; correct the profile", line=no, column=cell)
        return stated
    if stated is None and given is None:
        if q.unit_optional:
            return q.pint_unit
        raise IngestError(f"{profile.label}: no unit for '{cell}': neither the profile nor the file gives one",
                          line=no, column=cell)
    return stated if stated is not None else given


def _read_block(seg: _Segment, profile: Profile, header, data_start: int, data_at: int,  # noqa: ANN001
                own: dict[str, str], file_conditions: dict[str, str], notes: list[str]) -> Block:
    """Parse one block's data, ``seg.text[data_at:seg.hi]``, handed whole to one ``pandas.read_csv``; the rows
    are split in Python only to name the line and cell of an error."""
    cells, specs, where, _ = header
    d = profile.delimiter
    first_no = seg.start + data_start
    text, lo = seg.text, data_at
    hi = _drop_blank_tail(text, lo, seg.hi, lambda line: _blank(line, d))
    if hi <= lo:
        raise IngestError(f"{profile.label}: the header row has no data rows below it", line=first_no - 1)
    inner_blank = profile.separator != "blank_line" and (
        text.find("\n\n", lo, hi) != -1 or ((text.find(" ", lo, hi) != -1 or text.find("\t", lo, hi) != -1)
                                             and _BLANK_RE.search(text, lo, hi)))
    data: list[str] | None = None
    if inner_blank:  # blank lines inside a block (no blank-line separator)
        lines = text[lo:hi].split("\n")
        keep = [i for i, line in enumerate(lines) if line.strip()]
        data = [lines[i] for i in keep]
        linenos: Sequence[int] = [first_no + i for i in keep]
        text, lo = "\n".join(data), 0
        hi, n_rows = len(text), len(data)
    else:  # a blank-line separator already cut every blank line out
        n_rows = seg.n_lines - data_start if hi == seg.hi else text.count("\n", lo, hi) + 1
        linenos = range(first_no, first_no + n_rows)

    def rows() -> list[str]:
        return data if data is not None else text[lo:hi].split("\n")

    def cell_text(r: int, c: int) -> str:
        row = _cells(rows()[r], d)
        i = where[c]
        return row[i] if i < len(row) else ""

    def locate(exc: Exception) -> IngestError:
        need = max(where) + 1
        for r, line in enumerate(rows()):
            row = _cells(line, d)
            if len(row) < need:
                return IngestError(f"{profile.label}: this row has {len(row)} fields; the header has {len(cells)}",
                                   line=linenos[r])
            for c, i in enumerate(where):
                cell = row[i]
                value = cell.replace(profile.decimal, ".") if profile.decimal != "." else cell
                if not _BARE_NUMBER.fullmatch(value):
                    return _cell_error(cell, linenos[r], specs[c].header)
        return IngestError(f"{profile.label}: the data rows could not be read as numbers ({exc})", line=linenos[0])

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", pd.errors.ParserWarning)
            frame = pd.read_csv(_Text(text, lo, hi), sep=d, decimal=profile.decimal, header=None,
                                usecols=where, index_col=False, dtype=np.float64, engine="c",
                                skip_blank_lines=False, names=range(max(len(cells), max(where) + 1)))
    except (ValueError, OverflowError) as exc:
        raise locate(exc) from exc
    values = frame[where].to_numpy(dtype=np.float64)
    if values.shape[0] != n_rows:
        raise locate(ValueError(f"read {values.shape[0]} rows from {n_rows} lines"))
    metadata = {**file_conditions, **own}
    table = _build(specs, values, linenos, cell_text, metadata=metadata, fmt="tsv" if d == "\t" else "csv",
                   notes=list(notes))
    return Block(table=table, first_line=seg.start, last_line=int(linenos[-1]), conditions=own)
