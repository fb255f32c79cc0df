"""JCAMP-DX 1D spectra: read the ``##XYDATA=(X++(Y..Y))`` table in every ASDF form, and write it.

The format is the IUPAC open standard for spectra: R. S. McDonald and P. A. Wilks, "JCAMP-DX: a standard
form for exchange of infrared spectra in computer readable form", Appl. Spectrosc. 42, 151-162 (1988),
extended to NMR by A. N. Davies and P. Lampen, Appl. Spectrosc. 47, 1093-1099 (1993). A file is a list of
labelled data records ``##LABEL= value``; ``$$`` starts a comment. The ordinates of ``XYDATA`` are written
as lines ``X Y1 Y2 ...`` (X in units of ``XFACTOR``, Y in units of ``YFACTOR``) in one of the ASCII
squeezed difference forms (ASDF) of the standard:

* AFFN: numbers separated by blanks or commas (``1 100 105``);
* PAC: a sign separates numbers (``1+100+105-3``);
* SQZ: the leading digit and the sign in one character, ``@`` = 0, ``A``-``I`` = 1-9, ``a``-``i`` = -1 to -9
  (``A00`` = 100, ``c`` = -3);
* DIF: a difference from the previous ordinate, ``%`` = 0, ``J``-``R`` = 1-9, ``j``-``r`` = -1 to -9
  (``N`` = +5, ``j01`` = -101); a line that ends in DIF form is followed by a line whose first ordinate
  repeats that line's last one (the Y check), which is checked and dropped;
* DUP: a count of the previous token, ``S``-``Z`` = 1-8, ``s`` = 9 (``%T``: ``%`` twice in all).

Anything else in the XYDATA table (and an ``##NTUPLES`` block, as written for complex or 2D data) is
refused naming the form and the line. An AFFN exponent is read only with its sign (``1.5E+03``): ``E`` with
a digit after it is the SQZ character for 5 (``12E5`` is 12 then 55), so the writer puts a blank after X. X values are computed from ``FIRSTX``, ``LASTX`` and ``NPOINTS``
(the standard: the X written on each line is a check, not the source of the abscissa).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from ..errors import IngestError

SQZ = {"@": 0, **{c: i + 1 for i, c in enumerate("ABCDEFGHI")}, **{c: -(i + 1) for i, c in enumerate("abcdefghi")}}
DIF = {"%": 0, **{c: i + 1 for i, c in enumerate("JKLMNOPQR")}, **{c: -(i + 1) for i, c in enumerate("jklmnopqr")}}
DUP = {**{c: i + 1 for i, c in enumerate("STUVWXYZ")}, "s": 9}
FORMS = ("AFFN", "PAC", "SQZ", "DIF", "DIFDUP")
#: The one XYDATA variable list the reader takes (equally spaced X, Y values on each line).
XY_FORM = "(X++(Y..Y))"

_TOKEN = re.compile(r"([@A-Ia-i%J-Rj-rS-Zs])(\d*\.?\d*)|([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]\d+)?)|([ ,\t]+)|(.)")


@dataclass(frozen=True)
class Spectrum:
    """A 1D spectrum as read: abscissa and ordinate arrays in the file's units, and every record."""

    x: np.ndarray
    y: np.ndarray
    x_units: str
    y_units: str
    records: dict[str, str] = field(default_factory=dict)
    forms: tuple[str, ...] = ()

    def record(self, *labels: str) -> Optional[str]:
        """The first of ``labels`` present (labels compared as the standard says: case, blanks, dashes,
        slashes and underscores ignored)."""
        for label in labels:
            value = self.records.get(_norm(label))
            if value not in (None, ""):
                return value
        return None


def _norm(label: str) -> str:
    return re.sub(r"[\s\-/_]", "", label).upper()


def _line_values(text: str, line_no: int) -> tuple[list[float], bool, set[str]]:
    """The numbers of one XYDATA line (X first), whether it ends in DIF form, and the forms used."""
    values: list[float] = []
    forms: set[str] = set()
    last_dif: Optional[float] = None  # the difference a DUP repeats, if the previous token was DIF
    ends_dif = False
    for m in _TOKEN.finditer(text):
        code, digits, affn, blank, other = m.groups()
        if blank:
            continue
        if other is not None:
            raise IngestError(f"XYDATA: character {other!r} belongs to no JCAMP-DX form (AFFN, PAC, SQZ, DIF, DUP)",
                              line=line_no, column=m.start() + 1)
        if affn is not None:
            forms.add("PAC" if affn[0] in "+-" else "AFFN")
            values.append(float(affn))
            last_dif, ends_dif = None, False
            continue
        if digits.endswith(".") or digits.count(".") > 1:
            raise IngestError(f"XYDATA: {m.group(0)!r} is not a number", line=line_no, column=m.start() + 1)
        if code in SQZ:
            forms.add("SQZ")
            lead = SQZ[code]
            magnitude = float(f"{abs(lead)}{digits}")
            values.append(-magnitude if lead < 0 else magnitude)
            last_dif, ends_dif = None, False
        elif code in DIF:
            forms.add("DIF")
            if len(values) < 2:
                raise IngestError("XYDATA: a DIF character with no ordinate before it on the line",
                                  line=line_no, column=m.start() + 1)
            lead = DIF[code]
            magnitude = float(f"{abs(lead)}{digits}")
            diff = -magnitude if lead < 0 else magnitude
            values.append(values[-1] + diff)
            last_dif, ends_dif = diff, True
        else:  # DUP
            forms.add("DUP")
            count = int(f"{DUP[code]}{digits}")
            if len(values) < 2:
                raise IngestError("XYDATA: a DUP character with nothing to repeat", line=line_no,
                                  column=m.start() + 1)
            for _ in range(count - 1):
                values.append(values[-1] + last_dif if last_dif is not None else values[-1])
    return values, ends_dif, forms


def _records(text: str) -> list[tuple[str, str, int]]:
    """(normalised label, value, line number) of every labelled data record; comments removed."""
    out: list[tuple[str, str, int]] = []
    for i, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("$$", 1)[0].rstrip()
        if line.startswith("##"):
            label, sep, value = line[2:].partition("=")
            if not sep:
                raise IngestError(f"record {line[:40]!r} has no '='", line=i)
            out.append((_norm(label), value.strip(), i))
        elif out:
            name, value, at = out[-1]
            out[-1] = (name, value + "\n" + line if value or line else value, at)
    return out


def _number(records: dict[str, tuple[str, int]], label: str, default: Optional[float] = None) -> float:
    if label not in records:
        if default is not None:
            return default
        raise IngestError(f"the file has no ##{label}= record, which XYDATA needs", field=label)
    text, line = records[label]
    try:
        return float(text.split("\n")[0])
    except ValueError:
        raise IngestError(f"##{label}= {text[:30]!r} is not a number", line=line, field=label) from None


def read_jcamp(raw: bytes) -> Spectrum:
    """A 1D JCAMP-DX spectrum. Bad or unsupported content -> :class:`IngestError` naming line, form or field."""
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    recs = _records(text)
    if not recs or recs[0][0] != "TITLE":
        raise IngestError("not a JCAMP-DX file: it must begin with a ##TITLE= record", line=1)
    names = {name for name, _, _ in recs}
    if "NTUPLES" in names:
        line = next(at for name, _, at in recs if name == "NTUPLES")
        raise IngestError("JCAMP-DX form NTUPLES (complex or multi-dimensional data) is not supported; export "
                          "the real 1D spectrum as XYDATA", line=line, field="NTUPLES")
    by_name = {name: (value, at) for name, value, at in recs}
    if "XYDATA" not in by_name:
        other = next((n for n in ("XYPOINTS", "PEAKTABLE", "PEAKASSIGNMENTS") if n in names), None)
        raise IngestError(f"JCAMP-DX form {other} is not supported: the file needs an ##XYDATA= table" if other
                          else "the file has no ##XYDATA= table", field=other or "XYDATA")
    body, at = by_name["XYDATA"]
    first, *lines = body.split("\n")
    if first.replace(" ", "") != XY_FORM:
        raise IngestError(f"JCAMP-DX XYDATA form {first!r} is not supported (only {XY_FORM})", line=at,
                          field="XYDATA")
    xfactor, yfactor = _number(by_name, "XFACTOR", 1.0), _number(by_name, "YFACTOR", 1.0)
    firstx, lastx = _number(by_name, "FIRSTX"), _number(by_name, "LASTX")
    npoints = int(_number(by_name, "NPOINTS"))
    ys: list[float] = []
    forms: set[str] = set()
    prev_dif = False
    for offset, line in enumerate(lines, start=1):
        if not line.strip():
            continue
        values, ends_dif, used = _line_values(line, at + offset)
        forms |= used
        if len(values) < 2:
            raise IngestError("XYDATA: a line with an X value and no ordinate", line=at + offset)
        line_y = values[1:]
        if prev_dif:
            if not ys or line_y[0] != ys[-1]:
                raise IngestError(f"XYDATA: Y check failed: the line starts with {line_y[0]:g}, the previous "
                                  f"line ended with {ys[-1]:g}", line=at + offset)
            line_y = line_y[1:]
        ys.extend(line_y)
        prev_dif = ends_dif
    if len(ys) != npoints:
        raise IngestError(f"XYDATA holds {len(ys)} ordinates, ##NPOINTS= says {npoints}", field="NPOINTS")
    x = np.linspace(firstx, lastx, npoints) if npoints > 1 else np.array([firstx])
    y = np.asarray(ys, dtype=float) * yfactor
    del xfactor  # the X on each line is a check value in XFACTOR units; the abscissa comes from FIRSTX/LASTX
    form_names = tuple(f for f in ("AFFN", "PAC", "SQZ", "DIF", "DUP") if f in forms)
    return Spectrum(x=x, y=y, x_units=by_name.get("XUNITS", ("", 0))[0], y_units=by_name.get("YUNITS", ("", 0))[0],
                    records={name: value for name, (value, _) in by_name.items() if name != "XYDATA"},
                    forms=form_names)


# --- writing ---------------------------------------------------------------------------------------

_SQZ_POS, _SQZ_NEG = "@ABCDEFGHI", "@abcdefghi"
_DIF_POS, _DIF_NEG = "%JKLMNOPQR", "%jklmnopqr"
_DUP = "SSTUVWXYZs"  # index n -> the character for a count of n (n >= 2; S = 1 is never written)


def _coded(value: int, pos: str, neg: str) -> str:
    digits = str(abs(value))
    return (pos if value >= 0 else neg)[int(digits[0])] + digits[1:]


def _dup(count: int) -> str:
    digits = str(count)
    return _DUP[int(digits[0])] + digits[1:] if count >= 2 else ""


def encode_line(x: str, ys: list[int], form: str) -> str:
    """One XYDATA line: the abscissa check ``x`` (as text) and integer ordinates in ``form`` (:data:`FORMS`)."""
    if form == "AFFN":
        return " ".join([x, *(str(v) for v in ys)])
    if form == "PAC":
        return x + "".join(f"{v:+d}" for v in ys)
    if form == "SQZ":
        return x + " " + "".join(_coded(v, _SQZ_POS, _SQZ_NEG) for v in ys)
    if form not in ("DIF", "DIFDUP"):
        raise ValueError(f"unknown JCAMP-DX form {form}")
    tokens = [_coded(ys[0], _SQZ_POS, _SQZ_NEG)] + [_coded(b - a, _DIF_POS, _DIF_NEG) for a, b in zip(ys, ys[1:])]
    if form == "DIFDUP":
        grouped: list[tuple[str, int]] = []
        for i, tok in enumerate(tokens):
            if i > 1 and grouped[-1][0] == tok:  # never folds a difference into the line's first (SQZ) value
                grouped[-1] = (tok, grouped[-1][1] + 1)
            else:
                grouped.append((tok, 1))
        tokens = [t + _dup(n) for t, n in grouped]
    return x + " " + "".join(tokens)


def write_jcamp(y: np.ndarray, *, firstx: float, lastx: float, form: str = "DIFDUP", title: str = "spectrum",
                records: Optional[dict[str, str]] = None, yfactor: float = 1.0, per_line: int = 10) -> bytes:
    """A JCAMP-DX 5.01 file of ordinates ``y`` (stored as integers in units of ``yfactor``) in ``form``;
    DIF lines carry the Y check. ``records`` are written before the table (e.g. ``{".OBSERVE NUCLEUS": "^1H"}``)."""
    if form not in FORMS:
        raise ValueError(f"unknown JCAMP-DX form {form}")
    if per_line < 2:
        raise ValueError("per_line must be at least 2 (a DIF line repeats its last ordinate on the next)")
    ints = [int(round(v / yfactor)) for v in np.asarray(y, dtype=float)]
    n = len(ints)
    deltax = (lastx - firstx) / (n - 1) if n > 1 else 0.0
    head = {"TITLE": title, "JCAMP-DX": "5.01", "DATA TYPE": "NMR SPECTRUM", **(records or {}),
            "XFACTOR": "1", "YFACTOR": f"{yfactor:.10g}", "FIRSTX": f"{firstx:.10g}", "LASTX": f"{lastx:.10g}",
            "NPOINTS": str(n), "FIRSTY": f"{ints[0] * yfactor:.10g}"}
    out = [f"##{k}= {v}" for k, v in head.items()] + [f"##XYDATA= {XY_FORM}"]
    dif = form in ("DIF", "DIFDUP")
    start = 0
    while start < n:
        chunk = ints[start:start + per_line]
        out.append(encode_line(f"{firstx + start * deltax:.10g}", chunk, form))
        start += len(chunk) - 1 if dif and start + len(chunk) < n else len(chunk)
    out.append("##END=")
    return ("\n".join(out) + "\n").encode("utf-8")
