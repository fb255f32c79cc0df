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
