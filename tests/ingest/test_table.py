"""Tests of server.ingest.table and server.ingest.columns.

Expected conversions are worked by hand from the SI definitions: SI Brochure, 9th ed.
(BIPM 2019), section 3 (SI prefixes: u = 1e-6, m = 1e-3, c = 1e-2, k = 1e3, p = 1e-12,
n = 1e-9, M = 1e6), section 2.3.1 (degree Celsius: t/degC = T/K - 273.15) and table 8
(minute = 60 s). None of them is computed by the code under test.
"""

from __future__ import annotations

import gzip
import io
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pytest

from server.errors import IngestError
from server.ingest.columns import BY_NAME, QUANTITIES, parse_header, parse_headers
from server.ingest.table import BINARY_MESSAGE, NO_HEADER_MESSAGE, read_table, to_csv_bytes, to_xlsx_bytes
from server.ingest.units import Q_, ureg


def one_column(header: str, value: str) -> float:
    parsed = read_table(f"{header}\n{value}\n".encode())
    assert parsed.frame.shape == (1, 1)
    return float(parsed.frame.iloc[0, 0])


def ingest_error(raw: bytes, **kw) -> IngestError:
    with pytest.raises(IngestError) as info:
        read_table(raw, **kw)
    return info.value


# --------------------------------------------------------------------------- columns


@pytest.mark.parametrize(
    ("header", "canonical"),
    [
        ("E (kV/cm)", "E_kV_cm"),
        ("Electric Field [kV/cm]", "E_kV_cm"),
        ("electric_field (kV/cm)", "E_kV_cm"),
        ("  polarisation  ( uC/cm^2 )", "P_uC_cm2"),
        ("Polarization (µC/cm²)", "P_uC_cm2"),  # U+00B5 micro sign, U+00B2
        ("P (μC/cm2)", "P_uC_cm2"),  # U+03BC Greek mu, bare exponent
        ("V (V)", "V_V"),
        ("charge (nC)", "Q_uC"),
        ("I (mA)", "I_A"),
        ("time (ms)", "t_s"),
        ("t (s)", "t_s"),
        ("T (K)", "T_K"),
        ("temp (°C)", "T_K"),
        ("T [C]", "T_K"),
        ("Temperature (deg C)", "T_K"),
        ("freq (kHz)", "f_Hz"),
        ("C (pF)", "C_F"),
        ("capacitance (nF)", "C_F"),
        ("D ()", "tan_delta"),
        ("D", "tan_delta"),
        ("tan_delta", "tan_delta"),
        ("loss tangent", "tan_delta"),
        ("eps'", "eps_r"),
        ("eps_r ()", "eps_r"),
        ("eps''", "eps_i"),
        ("epsilon_i", "eps_i"),
        ("heat_flow (mW)", "heat_flow_mW"),
        ("Heat Flow (W)", "heat_flow_mW"),
        ("HF (W/g)", "heat_flow_W_g"),
        ("heat flow (mW/mg)", "heat_flow_W_g"),
        ("k (1/s)", "k_per_s"),
        ("rate constant (s^-1)", "k_per_s"),
        ("E_kV_cm", "E_kV_cm"),  # a canonical name carries its unit
    ],
)
def test_header_aliases(header: str, canonical: str) -> None:
    assert parse_header(header).canonical == canonical


def test_c_is_coulomb_except_for_temperature() -> None:
    # "C" is the coulomb (SI Brochure table 4) unless the quantity is a temperature.
    assert parse_header("Q (C)").canonical == "Q_uC"
    assert str(parse_header("Q (C)").unit) == "coulomb"
    assert parse_header("T (C)").canonical == "T_K"
    assert str(parse_header("T (C)").unit) == "degree_Celsius"


def test_t_and_T_told_apart_by_unit() -> None:
    specs = parse_headers(["t (s)", "T (K)"])
    assert [s.canonical for s in specs] == ["t_s", "T_K"]


def test_canonical_table_matches_contract() -> None:
    expected = {
        "E_kV_cm": "kV/cm", "P_uC_cm2": "uC/cm^2", "V_V": "V", "Q_uC": "uC", "I_A": "A", "t_s": "s",
        "T_K": "K", "f_Hz": "Hz", "C_F": "F", "tan_delta": "", "eps_r": "", "eps_i": "",
        "heat_flow_mW": "mW", "heat_flow_W_g": "W/g", "k_per_s": "1/s", "mz": "", "intensity": "",
        "two_theta_deg": "deg", "q_per_nm": "1/nm", "shg_ratio": "",
    }  # fmt: skip
    assert {q.name: q.unit for q in QUANTITIES} == expected
    assert {q.name for q in QUANTITIES if q.unit_optional} == {"tan_delta", "eps_r", "eps_i", "mz", "intensity",
                                                                 "shg_ratio"}


@pytest.mark.parametrize(("header", "canonical"), [
    ("2theta (deg)", "two_theta_deg"), ("2θ (°)", "two_theta_deg"), ("I ()", "intensity"), ("I (A)", "I_A"),
    ("q (1/nm)", "q_per_nm"), ("q (1/angstrom)", "q_per_nm"), ("Q (uC)", "Q_uC"), ("SHG/ref ()", "shg_ratio"),
])
def test_diffraction_and_shg_headers(header: str, canonical: str) -> None:
    # I () is an intensity and I (A) a current; q (1/nm) a scattering vector and Q (uC) a charge: the unit decides
    assert parse_header(header).canonical == canonical


@pytest.mark.parametrize(
    ("header", "fragment"),
    [
        ("X (V)", "unknown column 'X'"),
        ("E", "no unit given for electric field"),
        ("E ()", "no unit given for electric field"),
        ("E (uC)", "'uC' is not a unit of electric field"),
        ("E (blorp)", "'blorp' is not a unit pint can read"),
        ("heat flow (uV)", "'uV' is not a unit of heat flow"),
        ("D (V)", "'V' is not a unit of loss tangent"),
        ("T (C/s)", "'C/s' is not a unit of time (e.g. s) or temperature"),
    ],
)
def test_header_errors_name_the_column(header: str, fragment: str) -> None:
    raw = f"# area: 1 mm^2\nt (s),{header}\n1,2\n".encode()
    err = ingest_error(raw)
    assert err.line == 2
    assert err.column == header
    assert fragment in err.message


def test_unknown_column_lists_accepted_names() -> None:
    err = ingest_error(b"Voltage (V),Banana (kg)\n1,2\n")
    assert err.column == "Banana (kg)"
    assert "E, field, electric field" in err.message and "P (uC/cm^2)" not in err.message
    assert "polarization" in err.message and "heat_flow" in err.message


def test_duplicate_quantity() -> None:
    err = ingest_error(b"E (kV/cm),field (V/m)\n1,2\n")
    assert (err.line, err.column) == (1, "field (V/m)")
    assert "appears twice" in err.message


# --------------------------------------------------------------------------- units


@pytest.mark.parametrize("text", ["uC", "kV/cm", "mm^2", "degC", "K/min", "mW", "W/g", "pF", "1/s", "Hz"])
def test_shared_registry_parses(text: str) -> None:
    assert isinstance(ureg.parse_units(text), type(ureg.parse_units("m")))


def test_shared_registry_quantities() -> None:
    # SI Brochure 9th ed.: 1 uC/cm^2 = 0.01 C/m^2; 25 degC = 298.15 K (2.3.1).
    assert Q_(1, "uC/cm^2").to("C/m^2").magnitude == pytest.approx(0.01, rel=1e-12)
    assert Q_(25, "degC").to("K").magnitude == pytest.approx(298.15, rel=1e-12)
    assert Q_(1, "kV/cm").to("V/m").magnitude == pytest.approx(1e5, rel=1e-12)
    assert Q_(1, "mW") + Q_(1, "W/g") * Q_(1, "mg") == Q_(2, "mW")  # one registry, quantities mix


# --------------------------------------------------------------------------- conversions


def test_polarization_from_si() -> None:
    # 1 uC/cm^2 = 1e-6 C / 1e-4 m^2 = 0.01 C/m^2 (SI Brochure 9th ed., prefixes u, c).
    assert one_column("P (C/m^2)", "0.01") == pytest.approx(1.0, rel=1e-12)
    assert one_column("P (mC/m^2)", "10") == pytest.approx(1.0, rel=1e-12)


def test_field_from_si() -> None:
    # 1 kV/cm = 1e3 V / 1e-2 m = 1e5 V/m; 1 MV/m = 10 kV/cm (SI Brochure 9th ed., prefixes).
    assert one_column("E (V/m)", "1e5") == pytest.approx(1.0, rel=1e-12)
    assert one_column("E (MV/m)", "1") == pytest.approx(10.0, rel=1e-12)
    assert one_column("E (V/um)", "1") == pytest.approx(10.0, rel=1e-12)


@pytest.mark.parametrize("header", ["T (degC)", "T (°C)", "T [C]", "temperature (deg C)", "T (ºC)"])
def test_celsius_offset(header: str) -> None:
    # t/degC = T/K - 273.15 (SI Brochure 9th ed., 2.3.1): 25 degC = 298.15 K, -273.15 degC = 0 K.
    parsed = read_table(f"{header}\n25\n0\n-273.15\n".encode())
    assert parsed.frame["T_K"].tolist() == pytest.approx([298.15, 273.15, 0.0], abs=1e-9)


def test_other_conversions() -> None:
    # SI Brochure 9th ed.: p = 1e-12, n = 1e-9, u = 1e-6, m = 1e-3, k = 1e3; min = 60 s (table 8).
    assert one_column("C (pF)", "10") == pytest.approx(1e-11, rel=1e-12)
    assert one_column("Q (nC)", "1000") == pytest.approx(1.0, rel=1e-12)
    assert one_column("Q (C)", "1e-6") == pytest.approx(1.0, rel=1e-12)
    assert one_column("I (uA)", "2") == pytest.approx(2e-6, rel=1e-12)
    assert one_column("t (ms)", "1500") == pytest.approx(1.5, rel=1e-12)
    assert one_column("t (min)", "2") == pytest.approx(120.0, rel=1e-12)
    assert one_column("f (kHz)", "1") == pytest.approx(1000.0, rel=1e-12)
    assert one_column("k (1/min)", "60") == pytest.approx(1.0, rel=1e-12)
    assert one_column("heat_flow (W)", "0.002") == pytest.approx(2.0, rel=1e-12)
    # 1 mW/mg = 1e-3 W / 1e-3 g = 1 W/g.
    assert one_column("heat flow (mW/mg)", "1.5") == pytest.approx(1.5, rel=1e-12)
    # percent = 0.01 (SI Brochure 9th ed., 5.4.7).
    assert one_column("D (%)", "1.5") == pytest.approx(0.015, rel=1e-12)


def test_canonical_units_are_not_touched() -> None:
    # Values already in the canonical unit are copied bit for bit.
    values = [0.1, 1 / 3, 2.220446049250313e-16, 123456.789012345]
    raw = "E (kV/cm),P (uC/cm2)\n" + "\n".join(f"{v!r},{v!r}" for v in values)
    frame = read_table(raw.encode()).frame
    assert frame["E_kV_cm"].tolist() == values
    assert frame["P_uC_cm2"].tolist() == values


# --------------------------------------------------------------------------- layout


def test_metadata_comments_blank_lines() -> None:
    raw = (
        b"# Sample Area : 0.785 mm^2\n"  # line 1
        b"# a plain comment without colon\n"  # 2
        b"\n"  # 3
        b"#   Operator:  A. Tester  \n"  # 4
        b"# time: 12:30:00\n"  # 5
        b"E (kV/cm),P (uC/cm^2)\n"  # 6
        b"1,2\n"  # 7
        b"\n"  # 8
        b"# segment 2\n"  # 9
        b"3,4\n"  # 10
    )
    parsed = read_table(raw)
    assert parsed.metadata == {"sample area": "0.785 mm^2", "operator": "A. Tester", "time": "12:30:00"}
    assert parsed.first_data_line == 7
    assert parsed.n_rows == 2
    assert parsed.format == "csv"
    assert parsed.source_columns == {"E_kV_cm": "E (kV/cm)", "P_uC_cm2": "P (uC/cm^2)"}
    assert parsed.frame.columns.tolist() == ["E_kV_cm", "P_uC_cm2"]
    assert parsed.frame.to_numpy().tolist() == [[1.0, 2.0], [3.0, 4.0]]


def test_metadata_padded_by_a_spreadsheet() -> None:
    # Saving as CSV pads every row to the table width: "# area: 1 mm^2,," for three columns.
    raw = b'# area: 1 mm^2,,\n"# notes: one, two",,\n# keep: a;b,\nt (s),V (V),I (A)\n0,1,2\n'
    assert read_table(raw).metadata == {"area": "1 mm^2", "notes": "one, two", "keep": "a;b,"}


def test_error_line_counts_skipped_lines() -> None:
    raw = b"# a: 1\n\nE (kV/cm),P (uC/cm^2)\n1,2\n\n# note\n3,x\n"
    err = ingest_error(raw)
    assert (err.line, err.column) == (7, "P (uC/cm^2)")


def test_tsv_and_crlf() -> None:
    parsed = read_table(b"# area: 1 mm^2\r\nE (kV/cm)\tP (uC/cm^2)\r\n1\t2\r\n3\t4\r\n")
    assert parsed.format == "tsv"
    assert parsed.first_data_line == 3
    assert parsed.frame.to_numpy().tolist() == [[1.0, 2.0], [3.0, 4.0]]


def test_excel_sep_line() -> None:
    # Excel writes "sep=;" as the first line when asked to; it names the delimiter.
    parsed = read_table(b"sep=;\n# area: 1 mm^2\nE (kV/cm);P (uC/cm^2)\n1;2\n")
    assert parsed.frame.to_numpy().tolist() == [[1.0, 2.0]]
    assert parsed.metadata == {"area": "1 mm^2"} and parsed.first_data_line == 4


def test_old_mac_line_endings() -> None:
    parsed = read_table(b"E (kV/cm),P (uC/cm^2)\r1,2\r3,4\r")
    assert parsed.n_rows == 2


def test_semicolon_with_decimal_comma() -> None:
    parsed = read_table("T (°C);C (pF);D\n25,5;10;0,001\n26;11,5;0.002\n".encode())
    assert parsed.frame["T_K"].tolist() == pytest.approx([298.65, 299.15])
    assert parsed.frame["C_F"].tolist() == pytest.approx([10e-12, 11.5e-12], rel=1e-12)
    assert parsed.frame["tan_delta"].tolist() == [0.001, 0.002]
    assert any("decimal comma" in note for note in parsed.notes)


def test_quoted_cells() -> None:
    parsed = read_table(b'"E (kV/cm)","P (uC/cm^2)"\n"1.5","2"\n')
    assert parsed.frame.to_numpy().tolist() == [[1.5, 2.0]]


def test_spaces_around_values() -> None:
    parsed = read_table(b"E (kV/cm), P (uC/cm^2)\n 1.5 , 2 \n")
    assert parsed.frame.to_numpy().tolist() == [[1.5, 2.0]]


def test_encodings() -> None:
    text = "# operator: Müller-Test\nT (°C),C (pF)\n25,1\n"
    for raw in (text.encode("utf-8"), b"\xef\xbb\xbf" + text.encode("utf-8"), text.encode("cp1252")):
        parsed = read_table(raw)
        assert parsed.metadata["operator"] == "Müller-Test"
        assert parsed.source_columns["T_K"] == "T (°C)"
        assert parsed.frame["T_K"].tolist() == pytest.approx([298.15])
    parsed = read_table(text.encode("utf-16"))  # with BOM
    assert parsed.frame["T_K"].tolist() == pytest.approx([298.15])


def test_trailing_separator_rows_and_columns() -> None:
    # What a spreadsheet writes: trailing empty column and trailing rows of bare separators.
    parsed = read_table(b"E (kV/cm),P (uC/cm^2),\n1,2,\n3,4,\n,,\n,,\n")
    assert parsed.n_rows == 2
    assert parsed.frame.columns.tolist() == ["E_kV_cm", "P_uC_cm2"]


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    ("raw", "line", "column", "fragment"),
    [
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,n/a\n", 3, "P (uC/cm^2)", "'n/a' is not a number"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\nabc,4\n", 3, "E (kV/cm)", "'abc' is not a number"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,\n", 3, "P (uC/cm^2)", "empty cell"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n,\n5,6\n", 3, "E (kV/cm)", "empty cell"),
        (b"E (kV/cm),P (uC/cm^2)\n1,nan\n", 2, "P (uC/cm^2)", "'nan' is not a number"),
        (b"E (kV/cm),P (uC/cm^2)\n1,NaN\n", 2, "P (uC/cm^2)", "NaN and infinity are not accepted"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n-inf,3\n", 3, "E (kV/cm)", "'-inf' is not a number"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n1e999,3\n", 3, "E (kV/cm)", "too large"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,4 5\n", 3, "P (uC/cm^2)", "'4 5' is not a number"),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,0x10\n", 3, "P (uC/cm^2)", "'0x10' is not a number"),
        (b"T (K)\n300\n-1\n", 3, "T (K)", "below absolute zero"),
        (b"T (degC)\n20\n-300\n", 3, "T (degC)", "below absolute zero"),
        (b"heat_flow (MW)\n1\n1e300\n", 3, "heat_flow (MW)", "out of range once converted to mW"),
        (b"E (kV/cm),P (uC/cm^2),\n1,2,\n3,4,7\n", 3, "column 3", "no header"),
        (b"E (kV/cm),,P (uC/cm^2)\n1,2,3\n", 1, "column 2", "column 2 has no name"),
    ],
)
def test_cell_errors(raw: bytes, line: int, column: str, fragment: str) -> None:
    err = ingest_error(raw)
    assert (err.line, err.column) == (line, column)
    assert fragment in err.message


def test_cell_error_message_reads_well() -> None:
    err = ingest_error(b"# area: 1 mm^2\nE (kV/cm),P (uC/cm^2)\n1,2\n3,4\n5,n/a\n")
    assert str(err) == "line 5, column 'P (uC/cm^2)': 'n/a' is not a number (NaN and infinity are not accepted)"


@pytest.mark.parametrize(
    ("raw", "line", "got"),
    [
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,4,5\n", 3, 3),
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3\n5,6\n", 3, 1),
        (b"E (kV/cm),P (uC/cm^2)\n1,2,3\n4\n", 2, 3),  # total count right, rows wrong
        (b"E (kV/cm),P (uC/cm^2)\n1,2\n3,4\n5,a,b\n", 4, 3),
        (b"E (kV/cm);P (uC/cm^2)\n1;2\n3;4;5\n", 3, 3),
    ],
)
def test_ragged_rows(raw: bytes, line: int, got: int) -> None:
    err = ingest_error(raw)
    assert err.line == line
    assert err.column is None
    assert f"this row has {got} field" in err.message and "header has 2 columns" in err.message


@pytest.mark.parametrize(
    ("raw", "fragment"),
    [
        (b"", "the file is empty"),
        (b"  \n\n\t\n", "the file is empty"),
        (b"# area: 1 mm^2\n# mass: 2 mg\n", "metadata lines but no table"),
        (b"# just a comment\n\n", "only comment lines"),
    ],
)
def test_no_table(raw: bytes, fragment: str) -> None:
    err = ingest_error(raw)
    assert fragment in err.message
    assert err.line is None


def test_header_without_rows() -> None:
    err = ingest_error(b"# area: 1 mm^2\nE (kV/cm),P (uC/cm^2)\n\n,\n")
    assert err.line == 2
    assert "header row but no data rows" in err.message


@pytest.mark.parametrize(
    ("raw", "line"),
    [
        (b"1.0,2.0\n3.0,4.0\n", 1),
        (b"# area: 1 mm^2\n\n-1e-3\t2\n", 3),
        (b"# x: y\n0.5;0,7\n", 2),
    ],
)
def test_missing_header(raw: bytes, line: int) -> None:
    err = ingest_error(raw)
    assert err.line == line
    assert err.message == NO_HEADER_MESSAGE


def test_duplicate_metadata_key() -> None:
    err = ingest_error(b"# area: 1 mm^2\n# mass: 1 mg\n# Area: 2 mm^2\nE (kV/cm)\n1\n")
    assert err.line == 3
    assert "'area' is given twice" in err.message and "lines 1 and 3" in err.message
    # The same value twice is harmless.
    assert read_table(b"# area: 1 mm^2\n# area: 1 mm^2\nE (kV/cm)\n1\n").metadata == {"area": "1 mm^2"}


@pytest.mark.parametrize(
    "raw",
    [
        b"\x89PNG\r\n\x1a\n" + bytes(range(256)),
        b"\xff\xd8\xff\xe0" + bytes(100),
        gzip.compress(b"E (kV/cm)\n1\n"),
        b"%PDF-1.7\n%\xe2\xe3\xcf\xd3\n",
        b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(50),
        b"E (kV/cm)\n1\x00\n",
        bytes(np.random.default_rng(7).integers(0, 256, 4000, dtype=np.uint8)),
        # "text" that is mostly control characters
        b"E (kV/cm)\n" + b"\x01\x02\x03\x04\x05\x06" * 20,
    ],
)
def test_binary_refused(raw: bytes) -> None:
    err = ingest_error(raw)
    assert err.message.startswith(BINARY_MESSAGE)


# --------------------------------------------------------------------------- xlsx


def _workbook(rows: list[list], sheet_rows_offset: int = 0) -> bytes:
    wb = openpyxl.Workbook()
    ws = wb.active
    for r, row in enumerate(rows, start=1 + sheet_rows_offset):
        for c, value in enumerate(row, start=1):
            if value is not None:
                ws.cell(row=r, column=c, value=value)
    out = io.BytesIO()
    wb.save(out)
    return out.getvalue()


def test_xlsx_basic_with_leading_empty_rows() -> None:
    raw = _workbook(
        [["# Sample Mass: 4.2 mg"], ["# note", "without colon"], [None], ["T (°C)", "heat flow (mW)"], [25, 1.5],
         [None, None], ["26.5", 2]],
        sheet_rows_offset=2,
    )  # fmt: skip
    parsed = read_table(raw, filename="run.xlsx")
    assert parsed.format == "xlsx"
    assert parsed.metadata == {"sample mass": "4.2 mg"}
    assert parsed.first_data_line == 7  # spreadsheet row of the first data row
    assert parsed.frame["T_K"].tolist() == pytest.approx([298.15, 299.65])
    assert parsed.frame["heat_flow_mW"].tolist() == [1.5, 2.0]


@pytest.mark.parametrize(
    ("rows", "line", "column", "fragment"),
    [
        ([["E (kV/cm)", "P (uC/cm^2)"], [1, 2], [3, "n/a"]], 3, "P (uC/cm^2)", "'n/a' is not a number"),
        ([["E (kV/cm)", "P (uC/cm^2)"], [1, 2], [None, 4]], 3, "E (kV/cm)", "empty cell"),
        ([["E (kV/cm)", "P (uC/cm^2)"], [1, 2], [3]], 3, "P (uC/cm^2)", "empty cell"),
        ([["E (kV/cm)", "P (uC/cm^2)"], [1, 2], [3, True]], 3, "P (uC/cm^2)", "'True' is not a number"),
        ([["E (kV/cm)", "P (uC/cm^2)"], [1, 2, 9]], 2, "column 3", "no header"),
        ([["# a: b"], ["E (kV/cm)", "Z (m)"], [1, 2]], 2, "Z (m)", "unknown column"),
        ([["E (kV/cm)"], [1], ["1e400"]], 3, "E (kV/cm)", "too large for a double"),
        ([["T (K)"], [1], [-5]], 3, "T (K)", "below absolute zero"),
    ],
)
def test_xlsx_errors(rows, line, column, fragment) -> None:
    err = ingest_error(_workbook(rows))
    assert (err.line, err.column) == (line, column)
    assert fragment in err.message


def test_xlsx_integer_beyond_double() -> None:
    # openpyxl reads an integer cell as a Python int, which can exceed the double range.
    from server.ingest.table import _rows_to_table

    with pytest.raises(IngestError, match="too large") as info:
        _rows_to_table([("E (kV/cm)",), (1,), (10**400,)], [])
    assert (info.value.line, info.value.column) == (3, "E (kV/cm)")


def test_xlsx_missing_header_and_empty() -> None:
    err = ingest_error(_workbook([["# a: b"], [1.0, 2.0]]))
    assert (err.line, err.message) == (2, NO_HEADER_MESSAGE)
    assert "empty" in ingest_error(_workbook([])).message
    err = ingest_error(_workbook([["E (kV/cm)"]]))
    assert err.line == 1 and "no data rows" in err.message


def test_zip_that_is_not_xlsx() -> None:
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as z:
        z.writestr("content.xml", "<x/>")
    assert "not an XLSX workbook" in ingest_error(out.getvalue()).message
    assert "damaged" in ingest_error(b"PK\x03\x04" + bytes(200)).message


def test_xlsx_name_on_text_or_binary() -> None:
    parsed = read_table(b"E (kV/cm)\n1\n", filename="loop.xlsx")
    assert parsed.format == "csv" and any("named .xlsx" in n for n in parsed.notes)
    err = ingest_error(b"\x9c\xff\xfe\x80" * 10, filename="loop.xlsx")
    assert "named like an XLSX workbook" in err.message


# --------------------------------------------------------------------------- writers


def _random_frame(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    e = rng.normal(size=n) * 10.0 ** rng.integers(-30, 30, n)
    e[:4] = [5e-324, -1.7976931348623157e308, 0.1 + 0.2, -0.0]
    return pd.DataFrame({"E (kV/cm)": e, "P (uC/cm^2)": rng.uniform(-30, 30, n), "D ()": rng.uniform(0, 1, n)})


def test_csv_round_trip_is_exact() -> None:
    frame = _random_frame(500, 1)
    meta = {"area": "0.785 mm^2", "Instrument": "LCR-7"}
    raw = to_csv_bytes(frame, meta)
    assert raw.startswith(b"# area: 0.785 mm^2\n# Instrument: LCR-7\nE (kV/cm),P (uC/cm^2),D ()\n")
    parsed = read_table(raw)
    assert parsed.metadata == {"area": "0.785 mm^2", "instrument": "LCR-7"}
    assert parsed.first_data_line == 4
    assert parsed.frame.columns.tolist() == ["E_kV_cm", "P_uC_cm2", "tan_delta"]
    # repr() of a float64 reads back to the same bits (Python's shortest round-trip repr).
    np.testing.assert_array_equal(parsed.frame.to_numpy(), frame.to_numpy())


def test_canonical_frame_round_trip() -> None:
    first = read_table(b"T (degC),C (pF)\n25,10\n30.5,11\n")
    raw = to_csv_bytes(first.frame)
    assert raw.splitlines()[0] == b"T (K),C (F)"
    again = read_table(raw)
    np.testing.assert_array_equal(again.frame.to_numpy(), first.frame.to_numpy())


def test_xlsx_round_trip() -> None:
    frame = _random_frame(200, 2).iloc[4:]  # openpyxl cannot store subnormals faithfully
    raw = to_xlsx_bytes(frame, {"mass": "4.2 mg"})
    parsed = read_table(raw)
    assert parsed.format == "xlsx"
    assert parsed.metadata == {"mass": "4.2 mg"}
    assert parsed.first_data_line == 3
    # openpyxl writes numbers with '%.16g' (Excel itself keeps 15 significant digits), so the
    # round trip is exact to 16 significant digits, not bit for bit.
    np.testing.assert_allclose(parsed.frame.to_numpy(), frame.to_numpy(), rtol=1e-15, atol=0)


def test_writers_refuse_what_cannot_be_read_back() -> None:
    with pytest.raises(ValueError, match="NaN"):
        to_csv_bytes(pd.DataFrame({"E (kV/cm)": [1.0, np.nan]}))
    with pytest.raises(ValueError, match="cannot be written"):
        to_csv_bytes(pd.DataFrame({"E (kV/cm)": [1.0]}), {"a:b": "c"})
    with pytest.raises(ValueError, match="line break"):
        to_xlsx_bytes(pd.DataFrame({"E (kV/cm)": [1.0]}), {"a": "b\nc"})


def test_header_of_canonical_names() -> None:
    assert {q.name: q.header for q in QUANTITIES}["P_uC_cm2"] == "P (uC/cm^2)"
    for q in QUANTITIES:
        assert parse_header(q.header).canonical == q.name
    assert BY_NAME["tan_delta"].header == "D ()"


def test_large_file() -> None:
    n = 100_000
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"E (kV/cm)": rng.uniform(-300, 300, n), "P (uC/cm^2)": rng.normal(size=n)})
    parsed = read_table(to_csv_bytes(frame, {"area": "1 mm^2"}))
    assert parsed.n_rows == n
    np.testing.assert_array_equal(parsed.frame.to_numpy(), frame.to_numpy())


@pytest.mark.parametrize("eol", ["\n", "\r\n", "\r"])
@pytest.mark.parametrize("gap", ["", "  ", "\t", "\xa0", "# a note", ",,"])
def test_error_line_counts_skipped_lines_in_the_data(eol: str, gap: str) -> None:
    """The offset-cut reader names the file line of a bad cell below blank, whitespace-only (ASCII and
    non-breaking space), comment and bare-separator lines, under every line ending (regression, checked
    against the line-list reader before the change: same messages and lines)."""
    lines = ["# area: 0.785 mm^2", "E (kV/cm),P (uC/cm^2)", "1,2", gap, "3,4", gap, "5,n/a", "7,8"]
    raw = eol.join(lines).encode()
    if gap == ",,":  # bare separators inside the data are a short row, not a skipped line
        with pytest.raises(IngestError, match="this row has 3 fields but the header has 2 columns") as err:
            read_table(raw)
        assert err.value.line == 4
        return
    with pytest.raises(IngestError, match="'n/a' is not a number") as err:
        read_table(raw)
    assert (err.value.line, err.value.column) == (7, "P (uC/cm^2)")
    good = eol.join(lines[:6] + ["5,6", "7,8", gap, ""]).encode()
    table = read_table(good)
    assert table.frame["E_kV_cm"].tolist() == [1.0, 3.0, 5.0, 7.0]
    assert (table.first_data_line, table.metadata) == (3, {"area": "0.785 mm^2"})


@pytest.mark.parametrize("eol", ["\n", "\r\n", "\r"])
@pytest.mark.parametrize("bom", [b"", b"\xef\xbb\xbf", b"\xef\xbb\xbf\xef\xbb\xbf"])
def test_an_error_found_after_the_plain_parse_names_its_line(eol: str, bom: bytes) -> None:
    """The happy path hands the file's own bytes to pandas (cut by byte offset behind UTF-8 marks and
    non-ASCII text above the table); a value refused only after the parse still names its file line and cell."""
    lines = ["# operator: Müller-Test", "T (°C),C (pF)", "25,1", "26,1.5", "-300.5,2", "27,2"]
    with pytest.raises(IngestError, match="'-300.5' is below absolute zero") as err:
        read_table(bom + eol.join(lines).encode("utf-8"))
    assert (err.value.line, err.value.column) == (5, "T (°C)")
    table = read_table(bom + (eol.join(lines[:4]) + eol + " " + eol * 2).encode("utf-8"))  # and a blank tail
    assert table.frame["T_K"].tolist() == pytest.approx([298.15, 299.15])
    assert (table.metadata, table.first_data_line) == ({"operator": "Müller-Test"}, 3)


@pytest.mark.parametrize("rows, line, got", [(["1,2,3", "4,5"], 3, 3), (["1,2", "4,5,6"], 4, 3),
                                              (["1,2", "4"], 4, 1), (["1,2", "4,5,"], 4, 3)])
def test_a_row_of_the_wrong_length_is_named_whichever_way_pandas_takes_it(rows, line: int, got: int) -> None:
    # pandas cuts a first row that is too long with a warning, refuses a later one, and fills a short row
    # with NaN: each falls back to the checked read, which counts the fields of the line.
    with pytest.raises(IngestError, match=f"this row has {got} fields? but the header has 2 columns") as err:
        read_table(("# area: 1 mm^2\nE (kV/cm),P (uC/cm^2)\n" + "\n".join(rows)).encode())
    assert err.value.line == line


@pytest.mark.parametrize("gap", [None, "", "# a note"])
def test_the_plain_and_the_checked_read_agree(gap) -> None:  # noqa: ANN001
    rows = ['"1,5";"2,25"', "3;4,5e-1", "-7,125;8"]
    if gap is not None:  # a skipped line sends the file down the checked read
        rows.insert(1, gap)
    table = read_table(("sep=;\nE (kV/cm);P (uC/cm^2)\n" + "\n".join(rows) + "\n\n").encode())
    assert table.frame.to_numpy().tolist() == [[1.5, 2.25], [3.0, 0.45], [-7.125, 8.0]]
    assert table.notes == ("decimal commas read as decimal points (semicolon-separated file)",)
