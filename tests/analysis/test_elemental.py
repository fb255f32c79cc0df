"""Elemental analysis: calculated percentages, solvates, the ±0.4 % criterion and bad files.

Outside values, computed by hand from the IUPAC conventional atomic weights C 12.011, H 1.008,
N 14.007, O 15.999 (IUPAC 2013 abridged table; from memory):
* caffeine C8H10N4O2, M = 96.088 + 10.080 + 56.028 + 31.998 = 194.194: C 49.48, H 5.19, N 28.85 %
  (the values printed in analytical-chemistry textbooks for caffeine);
* the bowl C27H24O6, M = 324.297 + 24.192 + 95.994 = 444.483: C 72.96, H 5.44 %;
* its hemihydrate C27H24O6 · 0.5 H2O, M = 453.491: C 71.51, H 5.56 %.
"""

from __future__ import annotations

import pytest

from server.analysis.elemental import analyse_elemental, parse_solvates, read_elemental
from server.errors import AnalysisError, IngestError


def test_caffeine_by_hand():
    r = analyse_elemental({"C": 49.48, "H": 5.19, "N": 28.85}, formula="C8H10N4O2")
    assert r.calc_pct == pytest.approx({"C": 49.48, "H": 5.19, "N": 28.85}, abs=0.005)
    assert r.passed


def test_bowl_by_hand_and_the_hemihydrate():
    found = {"C": 71.38, "H": 5.61}  # a wet sample: fails as the anhydrous bowl
    dry = analyse_elemental(found, formula="C27H24O6")
    assert dry.calc_pct == pytest.approx({"C": 72.96, "H": 5.44}, abs=0.005)
    assert not dry.passed and dry.delta_pct["C"] == pytest.approx(71.38 - 72.96, abs=0.005)
    assert "outside_tolerance" in {f.code for f in dry.flags}
    wet = analyse_elemental(found, formula="C27H24O6", solvates=parse_solvates("0.5 H2O"))
    assert wet.calc_pct == pytest.approx({"C": 71.51, "H": 5.56}, abs=0.005)
    assert wet.passed and wet.calc_formula == "C27H25O6.5" and wet.to_dict()["pass"] is True
    assert wet.molar_mass_g_mol == pytest.approx(453.491, abs=0.001)


def test_tolerance_edge():
    calc = analyse_elemental({"C": 72.96}, formula="C27H24O6").calc_pct["C"]
    assert analyse_elemental({"C": calc + 0.39}, formula="C27H24O6").passed
    assert not analyse_elemental({"C": calc + 0.41}, formula="C27H24O6").passed


def test_named_solvents():
    (s,) = parse_solvates("0.25 dichloromethane")
    assert s.formula == "CH2Cl2" and s.fraction == 0.25
    assert len(parse_solvates("0.5 H2O + 0.1 chloroform")) == 2
    with pytest.raises(AnalysisError):
        parse_solvates("some water")


def test_reading_a_file():
    raw = b"# solvate: 0.5 H2O\n# instrument: CHNS\nelement;found (%)\nC;71.38\nH;5.61\n"
    got = read_elemental(raw)
    assert got.found_pct == {"C": 71.38, "H": 5.61} and got.solvates[0].formula == "H2O"


@pytest.mark.parametrize("raw, words", [
    (b"element,found (%)\nC,72.1\nH,5.4\nN,30.0\n", "over 100"),
    (b"element,found (%)\nC,abc\n", "line 2"),
    (b"element,found (%)\nXx,1\n", "line 2"),
    (b"element,found (%)\nC,70\nC,71\n", "twice"),
    (b"el,percent\nC,70\n", "header"),
])
def test_bad_files(raw, words):
    with pytest.raises(IngestError, match=words):
        read_elemental(raw)
