"""Formula injection is neutralised in every export (OWASP, "CSV Injection",
owasp.org/www-community/attacks/CSV_Injection: prefix cells starting with = + - @ tab CR with ')."""

from __future__ import annotations

import csv
import io

import openpyxl
import pandas as pd
import pytest

from server.models import CompoundCreate
from server.services import exports, registry
from tests.factories import login_as

DANGEROUS = ["=1+2", "+SUM(A1)", "-2+3", "@SUM(A1)", "\t=1", "\r=1", "=HYPERLINK(\"http://x.invalid\",\"y\")"]


@pytest.mark.parametrize("text", DANGEROUS)
def test_text_starting_a_formula_is_prefixed(text):
    assert exports.neutralise(text) == "'" + text


@pytest.mark.parametrize("value", ["plain", "a=b", "", " =x", -1.5, -3, None, True])
def test_everything_else_is_unchanged(value):
    assert exports.neutralise(value) is value


def test_negative_numbers_stay_numbers_in_both_formats():
    frame = pd.DataFrame({"label": ["-5", "ok"], "ec (kV/cm)": [-1.25, 2.0], "n": [-3, 4]})
    body, _ = exports.table_bytes(frame, "csv", sheet="t")
    rows = list(csv.reader(io.StringIO(body.decode())))
    assert rows[1] == ["'-5", "-1.25", "-3"]
    body, _ = exports.table_bytes(frame, "xlsx", sheet="t")
    ws = openpyxl.load_workbook(io.BytesIO(body)).active
    assert (ws["A2"].value, ws["B2"].value, ws["C2"].value) == ("'-5", -1.25, -3)
    assert ws["B2"].data_type == "n" and ws["A2"].data_type == "s"


def test_the_registry_export_writes_no_live_formula(client, session, settings):
    login_as(client, session, "member")
    registry.register_compound(session=session, settings=settings,
                               data=CompoundCreate(smiles="CCO", label="=1+2"), actor="test")
    csv_body = client.get("/compounds/export.csv").text
    row = next(r for r in csv.DictReader(io.StringIO(csv_body)) if r["code"] == "RVZ-00001")
    assert row["label"] == "'=1+2"
    ws = openpyxl.load_workbook(io.BytesIO(client.get("/compounds/export.xlsx").content)).active
    labels = [c for c in ws["B"][1:]]
    assert [c.value for c in labels] == ["'=1+2"]
    assert all(c.data_type == "s" for row in ws.iter_rows() for c in row if c.value is not None
               and not isinstance(c.value, (int, float)))
    assert not any(c.data_type == "f" for row in ws.iter_rows() for c in row)


# --- exports fit for papers (issue 19, item 4) ---------------------------------------------------


def test_formula_runs_mark_counts_as_subscripts_and_keep_multipliers_plain():
    from server.chem.identity import formula_runs

    assert formula_runs("C33H36O6") == [("C", False), ("33", True), ("H", False), ("36", True), ("O", False),
                                        ("6", True)]
    # A solvate multiplier after the middle dot is ordinary text; its own counts are subscripts.
    assert formula_runs("C27H24O6·0.5H2O")[-4:] == [("6", True), ("·0.5H", False), ("2", True), ("O", False)]


def test_formulas_as_presentation_carry_subscripts_as_markup_or_characters():
    from server.chem.identity import formula_html, formula_unicode
    from server.web.format import formula

    assert formula_html("C27H24O6") == "C<sub>27</sub>H<sub>24</sub>O<sub>6</sub>"
    assert formula_html("C27H25NaO6+") == "C<sub>27</sub>H<sub>25</sub>NaO<sub>6</sub><sup>+</sup>"
    assert formula_html("C27H24O6·0.5H2O") == "C<sub>27</sub>H<sub>24</sub>O<sub>6</sub>·0.5H<sub>2</sub>O"
    assert formula_unicode("C27H24O6") == "C₂₇H₂₄O₆"
    assert str(formula("<b>")) == "&lt;b&gt;" and str(formula(None)) == ""  # text is escaped


def test_rounded_keeps_numbers_and_their_significant_digits():
    from server.precision import rounded

    assert rounded(14.25172, 4) == 14.25 and rounded(1234.5678, 6) == 1234.57 and rounded(0.0123456, 3) == 0.0123
    assert rounded(None, 3) is None and rounded(3, 3) == 3 and rounded(float("nan"), 3) != rounded(float("nan"), 3)


def test_registry_export_is_fit_for_a_paper(client, session, settings):
    login_as(client, session, "member")
    # Hexamethoxy CH2-bridged triphenylene bowl; C27H24O6 counted by hand (21 ring/bridge C + 6 OCH3).
    registry.register_compound(session=session, settings=settings, actor="test",
                               data=CompoundCreate(smiles="COc1c(OC)c2c3c4c1Cc1c(OC)c(OC)c5c(c14)c1c(c(OC)c(OC)c(c31)C2)C5"))
    rows = list(csv.DictReader(io.StringIO(client.get("/compounds/export.csv").text)))
    row = rows[0]
    assert row["formula (plain text)"] == "C27H24O6" and "formula" not in row
    assert row["verdict"] == "No conclusive evidence yet" and row["verdict code"] == "untested"
    # Molar mass of C27H24O6 from IUPAC standard atomic weights (C 12.011, H 1.008, O 15.999): 444.483 g/mol,
    # printed to 0.01 g/mol, never as a 16-digit float.
    assert row["molar mass (g/mol)"] == "444.48"
    wb = openpyxl.load_workbook(io.BytesIO(client.get("/compounds/export.xlsx").content), rich_text=True)
    ws = wb.active
    headers = [c.value for c in ws[1]]
    col = headers.index("formula (subscripts, rich text)")
    cell = ws[2][col].value
    from openpyxl.cell.rich_text import CellRichText

    assert isinstance(cell, CellRichText) and str(cell) == "C27H24O6"
    subs = [b.text for b in cell if not isinstance(b, str) and b.font.vertAlign == "subscript"]
    assert subs == ["27", "24", "6"]
    assert ws[2][headers.index("verdict code")].value == "untested"
