"""Property tests: whatever a user uploads, ingest answers with a table or an IngestError.

Anything else (IndexError, pint or pandas exceptions, UnicodeDecodeError ...) would be a
500 for the user instead of a message they can act on.
"""

from __future__ import annotations

import io
import zipfile

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from server.errors import IngestError, OverLimit
from server.ingest.columns import QUANTITIES
from server.ingest.conditions import parse_conditions
from server.ingest.table import ParsedTable, read_table, to_csv_bytes, to_xlsx_bytes

FUZZ = settings(max_examples=200, deadline=None, database=None, suppress_health_check=[HealthCheck.too_slow])


def _read_or_ingest_error(raw: bytes, filename: str | None = None) -> None:
    try:
        parsed = read_table(raw, filename=filename)
    except IngestError as exc:
        assert exc.message  # a message for the user
        assert exc.line is None or exc.line >= 1
        return
    except OverLimit as exc:  # e.g. a damaged zip directory claiming a huge member: refused by size, named
        assert exc.message and exc.limit.startswith("xlsx_")
        return
    assert isinstance(parsed, ParsedTable)
    assert parsed.n_rows == len(parsed.frame) >= 1
    values = parsed.frame.to_numpy()
    assert values.dtype == np.float64 and np.isfinite(values).all()  # never a NaN passed on
    assert parsed.first_data_line >= 1
    assert set(parsed.source_columns) == set(parsed.frame.columns)


@FUZZ
@given(st.binary(max_size=3000), st.sampled_from([None, "data.csv", "data.xlsx", "x.tsv"]))
def test_arbitrary_bytes(raw: bytes, filename: str | None) -> None:
    _read_or_ingest_error(raw, filename)


_TOKENS = st.sampled_from(
    ["E (kV/cm)", "P (uC/cm^2)", "T (°C)", "T [C]", "t (s)", "C (pF)", "D", "D ()", "eps'", "heat flow (mW/mg)",
     "f (kHz)", "X (V)", "E (", "(kV)", "E ()", "P (uC/cm^)", "T (K/min)",
     "1", "-2.5", "3e5", "1e999", ".5", "nan", "inf", "n/a", "", " ", "abc", "1,5", '"', '"1"', "0x1", "\u00b5",
     "# area: 1 mm^2", "# x", "#", ":", "\t", ";", ",", "\n", "\r\n", "\r", "\x0b", "\x1c", "\u2028", "\ufeff"]
)  # fmt: skip


@FUZZ
@given(st.lists(_TOKENS, max_size=60), st.sampled_from(["utf-8", "utf-16", "cp1252", "utf-8-sig"]))
def test_csv_like_token_soup(tokens: list[str], encoding: str) -> None:
    text = "".join(tokens)
    _read_or_ingest_error(text.encode(encoding, errors="replace"))


@FUZZ
@given(st.text(max_size=400))
def test_arbitrary_text(text: str) -> None:
    _read_or_ingest_error(text.encode("utf-8", errors="surrogatepass"))


_HEADERS = st.sampled_from([q.header for q in QUANTITIES] + ["T (degC)", "Q (C)", "E (V/m)", "D (%)"])
_CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-(10**20), 10**20).map(str),
    st.sampled_from(["", " ", "x", "1,0", "--1", "1e", "+.5", "-0"]),
)


@FUZZ
@given(
    st.lists(_HEADERS, min_size=1, max_size=4, unique=True),
    st.lists(st.lists(_CELL, min_size=0, max_size=5), max_size=12),
    st.sampled_from([",", ";", "\t"]),
)
def test_structured_tables(headers: list[str], rows: list[list[str]], sep: str) -> None:
    text = sep.join(headers) + "\n" + "\n".join(sep.join(r) for r in rows)
    _read_or_ingest_error(text.encode())


def _norm_key(key: str) -> str:
    return " ".join(key.split()).lower()


# Printable metadata; keys distinct once lower-cased (a key given twice is an error by design).
_METADATA = st.dictionaries(
    st.from_regex(r"[A-Za-z][A-Za-z _-]{0,15}", fullmatch=True).map(str.strip),
    st.from_regex(r"[ -~]{0,20}", fullmatch=True),
    max_size=3,
).filter(lambda d: len({_norm_key(k) for k in d}) == len(d))


@FUZZ
@given(
    st.lists(
        st.floats(allow_nan=False, allow_infinity=False, width=64),
        min_size=1,
        max_size=40,
    ),
    _METADATA,
)
def test_csv_round_trip_property(values: list[float], metadata: dict[str, str]) -> None:
    frame = pd.DataFrame({"E (kV/cm)": values, "D ()": values[::-1]})
    parsed = read_table(to_csv_bytes(frame, metadata))
    np.testing.assert_array_equal(parsed.frame.to_numpy(), frame.to_numpy())
    assert parsed.metadata == {_norm_key(k): v.strip() for k, v in metadata.items()}


_XLSX = to_xlsx_bytes(pd.DataFrame({"E (kV/cm)": [1.0, 2.0], "P (uC/cm^2)": [3.0, 4.0]}), {"area": "1 mm^2"})


def _rezip(mutate_member: str, payload: bytes) -> bytes:
    src = zipfile.ZipFile(io.BytesIO(_XLSX))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as dst:
        for info in src.infolist():
            data = src.read(info.filename)
            dst.writestr(info.filename, payload if info.filename == mutate_member else data)
    return out.getvalue()


@settings(max_examples=60, deadline=None, database=None)
@given(st.integers(0, len(_XLSX) - 1), st.binary(min_size=1, max_size=8))
def test_damaged_xlsx_bytes(pos: int, patch: bytes) -> None:
    _read_or_ingest_error(_XLSX[:pos] + patch + _XLSX[pos + len(patch) :])


@settings(max_examples=40, deadline=None, database=None)
@given(
    st.sampled_from(
        ["xl/worksheets/sheet1.xml", "xl/workbook.xml", "[Content_Types].xml", "xl/sharedStrings.xml"]
    ),
    st.binary(max_size=200) | st.text(max_size=200).map(str.encode),
)
def test_xlsx_with_garbage_member(member: str, payload: bytes) -> None:
    _read_or_ingest_error(_rezip(member, payload))


_FIELDS = ["area", "thickness", "mass", "rate", "temperature", "frequency", "endo", "notes"]


@FUZZ
@given(
    st.dictionaries(st.sampled_from(_FIELDS), st.one_of(st.none(), st.text(max_size=30)), max_size=4),
    st.dictionaries(st.text(max_size=12), st.text(max_size=30), max_size=4),
)
def test_conditions_never_crash(form: dict, metadata: dict) -> None:
    try:
        cond = parse_conditions(form, metadata)
    except IngestError as exc:
        assert exc.field is not None
        return
    for value in cond.as_kwargs().values():
        assert value is None or (np.isfinite(value) and value > 0)
    assert cond.endo in {"up", "down"}


@settings(max_examples=50, deadline=None, database=None)
@given(_METADATA)
def test_xlsx_metadata_round_trip(metadata: dict[str, str]) -> None:
    frame = pd.DataFrame({"E (kV/cm)": [1.0, 2.5]})
    parsed = read_table(to_xlsx_bytes(frame, metadata))
    assert parsed.metadata == {_norm_key(k): v.strip() for k, v in metadata.items()}
    assert parsed.frame["E_kV_cm"].tolist() == [1.0, 2.5]
