"""Import profiles: the corpus of awkward exports reads to the same figures of merit as each clean twin,
and a profile that does not fit its file (or is wrong itself) is refused naming profile, line, column, field."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from server.errors import IngestError
from server.ingest.conditions import parse_conditions
from server.ingest.profiles import profile_from_json, read_profiled
from server.ingest.table import read_table
from server.kinds import KINDS
from server.kinds.base import EXAMPLE_SMILES, Context

CORPUS = Path(__file__).parent.parent / "data" / "exports"
PROFILES = sorted(CORPUS.glob("*.profile.json"))
CONTEXT = Context(formula="C27H24O6", molar_mass_g_mol=444.483, smiles=EXAMPLE_SMILES)


def _export(profile_path: Path) -> Path:
    stem = profile_path.name.removesuffix(".profile.json")
    return next(p for p in CORPUS.iterdir() if p.stem == stem and ".profile" not in p.name and ".clean" not in p.name)


def _figures(kind, table, metadata) -> dict:
    conditions = parse_conditions({}, metadata)
    result = kind.analyse(table, conditions, CONTEXT)
    return {k: v for k, v in result.to_dict().items() if isinstance(v, (int, float)) and not isinstance(v, bool)}


def test_the_corpus_covers_the_quirks_of_the_issue() -> None:
    assert len(PROFILES) >= 12
    profiles = [json.loads(p.read_text()) for p in PROFILES]
    assert {p["kind"] for p in profiles} >= {"pe_loop", "pund", "dielectric", "dsc"}
    raw = {p.name: _export(p).read_bytes() for p in PROFILES}
    assert any(b"\r\n" in r for r in raw.values())
    assert any(b"\xb5" in r for r in raw.values())  # a Windows-1252 micro sign
    assert any(p.get("units_row") for p in profiles)
    assert any(p.get("decimal") == "," for p in profiles)
    assert {(p.get("blocks") or {}).get("separator") for p in profiles} >= {"blank_line", "repeated_header",
                                                                             "^--- run"}
    assert any("Point" in p.get("ignore", []) for p in profiles)


@pytest.mark.parametrize("profile_path", PROFILES, ids=lambda p: p.name.removesuffix(".profile.json"))
def test_a_profiled_export_gives_the_figures_of_its_clean_twin(profile_path: Path) -> None:
    profile = profile_from_json(json.loads(profile_path.read_text()))
    kind = KINDS[profile.kind]
    got = read_profiled(_export(profile_path).read_bytes(), profile)
    stem = profile_path.name.removesuffix(".profile.json")
    twins = sorted(CORPUS.glob(f"{stem}.clean*.csv"))
    assert len(got.blocks) == len(twins)
    for block, twin in zip(got.blocks, twins):
        clean = read_table(twin.read_bytes())
        want = _figures(kind, clean, clean.metadata)
        have = _figures(kind, block.table, block.table.metadata)
        assert want, twin.name
        assert set(have) == set(want)
        for key, value in want.items():
            # the same numbers in other units: equal to rounding of the unit conversions
            assert math.isclose(have[key], value, rel_tol=1e-6, abs_tol=1e-9), (twin.name, key)


def test_the_issue_example_profile_reads_its_file_with_conversions_listed() -> None:
    path = CORPUS / "pe_loop_marker_cp1252.profile.json"
    got = read_profiled(_export(path).read_bytes(), profile_from_json(json.loads(path.read_text())))
    assert got.conversions == ("Time -> t (s)", "Drive Voltage -> V (V)", "Charge -> Q (uC)")
    assert got.conditions["area"] == "7.85 mm^2" and got.conditions["thickness"] == "150 µm"
    block = got.blocks[0]
    assert block.table.first_data_line == 10  # after 8 header lines and the header row
    assert block.table.source_columns["Q_uC"] == "Charge"


def test_blocks_carry_their_own_temperature() -> None:
    path = CORPUS / "pe_loop_sweep_blank_lines.profile.json"
    got = read_profiled(_export(path).read_bytes(), profile_from_json(json.loads(path.read_text())))
    assert [b.conditions["temperature"] for b in got.blocks] == ["300 K", "320 K", "340 K"]
    assert got.conditions["area"] == "0.0785 cm^2"


def test_trailing_text_is_noted_not_read() -> None:
    path = CORPUS / "dsc_trailing_summary.profile.json"
    got = read_profiled(_export(path).read_bytes(), profile_from_json(json.loads(path.read_text())))
    assert len(got.blocks) == 1
    assert any("not read as data" in n for n in got.notes)


BASE = {"name": "t", "kind": "pe_loop", "delimiter": ";", "decimal": ",",
        "columns": {"Drive Voltage": {"to": "V", "unit": "V"}, "Charge": {"to": "Q", "unit": "nC"}}}


@pytest.mark.parametrize(("change", "field"), [
    ({"columns": {"Charge": {"to": "Q", "unit": "mm"}}}, "columns.Charge.unit"),
    ({"columns": {"Charge": {"to": "charge density", "unit": "nC"}}}, "columns.Charge.to"),
    ({"conditions": {"Area": {"to": "area", "unit": "kg"}}}, "conditions.Area.unit"),
    ({"conditions": {"Area": {"to": "colour"}}}, "conditions.Area.to"),
    ({"start_after": "([unclosed"}, "start_after"),
    ({"delimiter": ","}, "decimal"),
    ({"encoding": "klingon"}, "encoding"),
    ({"blocks": {"separator": "blank_line", "varies": "mood"}}, "blocks.varies"),
    ({"colour": "red"}, "colour"),
])
def test_a_wrong_profile_is_refused_naming_the_field(change: dict, field: str) -> None:
    with pytest.raises(IngestError) as err:
        profile_from_json({**BASE, **change})
    assert err.value.field == field


def test_a_start_pattern_never_found_names_the_profile() -> None:
    p = profile_from_json({**BASE, "start_after": "^\\[Data\\]"})
    with pytest.raises(IngestError) as err:
        read_profiled(b"Drive Voltage;Charge\n1,0;2,0\n", p)
    assert "profile 't'" in err.value.message and err.value.field == "start_after"


def test_a_mapped_column_missing_names_line_and_column() -> None:
    p = profile_from_json(BASE)
    with pytest.raises(IngestError) as err:
        read_profiled(b"Area: 1\nDrive Voltage;Q\n1,0;2,0\n", p)
    assert (err.value.line, err.value.column) == (2, "Charge")


def test_an_unmapped_column_and_a_bad_cell_are_named() -> None:
    p = profile_from_json(BASE)
    with pytest.raises(IngestError) as err:
        read_profiled(b"Point;Drive Voltage;Charge\n1;1,0;2,0\n", p)
    assert (err.value.line, err.value.column) == (1, "Point")
    with pytest.raises(IngestError) as err:
        read_profiled(b"Drive Voltage;Charge\n1,0;2,0\n2,0;x\n", p)
    assert (err.value.line, err.value.column) == (3, "Charge")


def test_a_file_unit_that_disagrees_with_the_profile_is_refused() -> None:
    p = profile_from_json(BASE)
    with pytest.raises(IngestError) as err:
        read_profiled("Drive Voltage (V);Charge [µC]\n1,0;2,0\n".encode(), p)
    assert err.value.column == "Charge [µC]" and "nC" in err.value.message


def test_a_block_without_the_varying_condition_is_refused() -> None:
    p = profile_from_json({**BASE, "conditions": {"T": {"to": "temperature", "unit": "K"}},
                           "blocks": {"separator": "blank_line", "varies": "temperature"}})
    raw = b"T: 300\nDrive Voltage;Charge\n1,0;2,0\n\nDrive Voltage;Charge\n1,0;2,0\n"
    with pytest.raises(IngestError) as err:
        read_profiled(raw, p)
    assert err.value.line == 5 and err.value.field == "temperature"


def test_the_wrong_encoding_names_the_line() -> None:
    p = profile_from_json({**BASE, "encoding": "utf-8"})
    with pytest.raises(IngestError) as err:
        read_profiled(b"Drive Voltage;Charge\n1,0;2,0\nnote \xb5\n", p)
    assert err.value.line == 3 and err.value.field == "encoding"


@pytest.mark.parametrize("raw", [b"V (V)\tQ (uC)\n1,5\t2,5\n2,5\t3,5\n", b"V (V),Q (uC)\n1,5,2,5\n2,5,3,5\n"])
def test_a_decimal_comma_file_without_a_profile_is_refused_saying_so(raw: bytes) -> None:
    with pytest.raises(IngestError) as err:
        read_table(raw)
    assert "decimal commas" in err.value.message and err.value.line == 2


# The reader cuts blocks by character offset and hands each block's text to pandas whole; these pin the
# file line numbers it reports, worked out by hand from the lines written below (line 1 is "Run").
_OFFSET_PROFILE = {"name": "offsets", "kind": "pe_loop", "delimiter": ";", "decimal": ",",
                   "columns": {"U": {"to": "V", "unit": "V"}, "Q": {"to": "Q", "unit": "nC"},
                               "t": {"to": "t", "unit": "ms"}},
                   "conditions": {"Temp": {"to": "temperature", "unit": "K"}}}


def _offset_file(rows2: list[str], newline: str = "\r\n") -> bytes:
    lines = ["Run", "Temp: 300", "t;U;Q", "0;0,0;0,0", "1;1,5;2,0", "2;3,0;4,0", " ; ", "",
             "Temp: 310", "t;U;Q", *rows2, ";;", ""]
    return newline.join(lines).encode()


@pytest.mark.parametrize("newline", ["\r\n", "\n", "\r"])
def test_blank_line_blocks_keep_their_file_lines(newline: str) -> None:
    profile = profile_from_json({**_OFFSET_PROFILE, "blocks": {"separator": "blank_line", "varies": "temperature"}})
    read = read_profiled(_offset_file(["0;0,0;0,0", "1;2,5;3,0"], newline), profile)
    assert [(b.first_line, b.last_line, b.table.first_data_line, b.table.n_rows) for b in read.blocks] == \
        [(1, 6, 4, 3), (9, 12, 11, 2)]
    assert [b.conditions["temperature"] for b in read.blocks] == ["300 K", "310 K"]
    with pytest.raises(IngestError) as err:
        read_profiled(_offset_file(["0;0,0;0,0", "1;x;3,0"], newline), profile)
    assert err.value.line == 12 and err.value.column == "U"
    with pytest.raises(IngestError) as err:
        read_profiled(_offset_file(["0;0,0;0,0", "1;2,5"], newline), profile)
    assert err.value.line == 12 and err.value.column == "Q" and "empty cell" in err.value.message


def test_one_block_with_blank_lines_inside_keeps_their_file_lines() -> None:
    profile = profile_from_json({**_OFFSET_PROFILE, "conditions": {}})
    raw = "\r\n".join(["Run", "t;U;Q", "0;0,0;0,0", "", "1;1,5;2,0", "  ", "2;abc;4,0", ""]).encode()
    with pytest.raises(IngestError) as err:
        read_profiled(raw, profile)
    assert err.value.line == 7 and err.value.column == "U"
    good = read_profiled(raw.replace(b"abc", b"3,0"), profile)
    assert good.blocks[0].table.n_rows == 3 and good.blocks[0].last_line == 7
    assert list(good.blocks[0].table.frame["V_V"]) == [0.0, 1.5, 3.0]


def test_repeated_header_blocks_keep_their_file_lines() -> None:
    profile = profile_from_json({**_OFFSET_PROFILE, "blocks": {"separator": "repeated_header",
                                                                "varies": "temperature"}})
    lines = ["Temp: 300", "t;U;Q", "0;0,0;0,0", "1;1,0;1,0", "Temp: 310", "t;U;Q", "0;0,0;0,0", "1;nan?;1,0"]
    with pytest.raises(IngestError) as err:
        read_profiled("\n".join(lines).encode(), profile)
    assert err.value.line == 8 and err.value.column == "U"
    lines[-1] = "1;2,0;1,0"
    read = read_profiled("\n".join(lines).encode(), profile)
    assert [(b.first_line, b.table.first_data_line, b.table.n_rows) for b in read.blocks] == [(1, 3, 2), (5, 7, 2)]
