"""Evidence rules for the compound verdict.

The expected codes follow from the definition of a ferroelectric (IEEE Std 180-1986; Lines
and Glass 1977): a polar phase whose polarisation a field switches; loops alone can mislead
(Scott, J. Phys.: Condens. Matter 20, 021001 (2008)). Each test builds the evidence a
chemist would have and states which rule decides it.
"""

from __future__ import annotations

import pytest

from server.analysis.verdict import VERSION, Evidence, decide, describe_temperatures
from server.verdict_codes import LABELS
from server.errors import AnalysisError


def crystal(mid, verdict, t=None, sg=None):
    return Evidence("crystal", mid, verdict, t, {"space_group": sg} if sg else {})


def loop(mid, verdict, t=None):
    return Evidence("pe_loop", mid, verdict, t)


def pund(mid, verdict, t=None):
    return Evidence("pund", mid, verdict, t)


def dsc(mid, peaks):
    return Evidence("dsc", mid, "transition", None, {"peak_K": peaks})


def dielectric(mid, t_peak):
    return Evidence("dielectric", mid, "anomaly", None, {"t_peak_K": t_peak})


def test_polar_switching_supported_with_temperature_wording():
    ev = [
        crystal(1, "polar", 320.0, "Pna2_1"),
        pund(2, "switching", 300.0),
        pund(3, "switching", 340.0),
        loop(4, "ferroelectric", 320.0),
        dsc(5, [290.0]),
    ]
    v = decide(ev)
    assert v.code == "polar_switching_supported"
    assert v.label == LABELS["polar_switching_supported"]
    assert v.switching_temperatures_K == (300.0, 340.0)
    assert v.transitions_K == (290.0,)
    assert "switching seen at 300-340 K, above the transition at 290 K (DSC)" in v.reason
    assert "Pna2_1" in v.reason
    assert {u.measurement_id: u.role for u in v.used} == {
        1: "polar_phase",
        2: "switching",
        3: "switching",
        4: "switching",
        5: "transition",
    }
    assert v.conflicts == ()


def test_polar_structure_in_another_phase_does_not_prove():
    # polar structure at 100 K, switching at 300-340 K, a transition at 290 K in between:
    # the switching phase's structure is not known
    ev = [crystal(1, "polar", 100.0), pund(2, "switching", 300.0), pund(3, "switching", 340.0), dsc(4, [290.0])]
    v = decide(ev)
    assert v.code == "switching_phase_unknown"
    assert "above the transition at 290 K (DSC)" in v.reason
    assert "across a transition" in v.reason


def test_switching_phase_unknown_without_structure():
    v = decide([loop(1, "ferroelectric", 295.0)])
    assert v.code == "switching_phase_unknown"
    assert v.switching_temperatures_K == (295.0, 295.0)
    assert "No crystal structure" in v.reason


def test_polar_unswitched():
    v = decide([crystal(1, "polar", 150.0, "P2_1"), pund(2, "no_switching", 300.0)])
    assert v.code == "polar_unswitched"
    assert "pyroelectric at most" in v.reason
    assert v.switching_temperatures_K is None


def test_nonpolar():
    v = decide([crystal(1, "centrosymmetric", 150.0, "P2_1/c"), loop(2, "lossy_dielectric", 300.0)])
    assert v.code == "nonpolar"
    assert {u.role for u in v.used} == {"centrosymmetric_phase", "loop_not_ferroelectric"}


def test_nonpolar_acentric_counts_as_nonpolar():
    v = decide([crystal(1, "non_polar_acentric", 150.0, "P2_12_12_1")])
    assert v.code == "nonpolar"
    assert "piezoelectric" in v.reason


def test_transition_only_merges_dsc_and_dielectric():
    v = decide([dsc(1, [288.0, 352.0]), dielectric(2, 291.0), loop(3, "inconclusive", 300.0)])
    assert v.code == "transition_only"
    # 288 (DSC) and 291 (dielectric) are within 5 K: one transition at their mean
    assert v.transitions_K == pytest.approx((289.5, 352.0))
    assert v.transitions[0].sources == ("dsc", "dielectric")
    assert "Inconclusive P-E loops (measurement 3)" in v.reason


def test_no_switching_seen():
    v = decide([pund(1, "no_switching", 300.0)])
    assert v.code == "no_switching_seen"


def test_untested_lists_inconclusive_loops():
    v = decide([loop(1, "inconclusive", 300.0), loop(2, "inconclusive", 310.0)])
    assert v.code == "untested"
    assert "measurements 1, 2" in v.reason
    assert decide([]).code == "untested"
    assert decide([Evidence("xtb", 9, "done")]).used[0].role == "not_used"


def test_conflicting_switching_in_centrosymmetric_phase():
    v = decide([crystal(1, "centrosymmetric", 300.0, "P2_1/c"), pund(2, "switching", 300.0)])
    assert v.code == "conflicting"
    assert v.conflicts[0].measurement_ids == (2, 1)
    assert "P2_1/c" in v.reason


def test_centrosymmetric_phase_across_a_transition_is_no_conflict():
    # centrosymmetric at 100 K, transition at 200 K, switching at 300 K: another phase switches
    v = decide([crystal(1, "centrosymmetric", 100.0), pund(2, "switching", 300.0), dielectric(3, 200.0)])
    assert v.code == "switching_phase_unknown"
    assert "above the transition at 200 K (dielectric)" in v.reason


def test_conflicting_loop_and_pund_same_temperature():
    v = decide([loop(1, "ferroelectric", 300.0), pund(2, "no_switching", 304.0)])
    assert v.code == "conflicting"
    assert "PUND (measurement 2) shows none at 304 K" in v.reason
    # 10 K apart is not the same temperature: the loop stands (no structure -> phase unknown)
    v2 = decide([loop(1, "ferroelectric", 300.0), pund(2, "no_switching", 310.0)])
    assert v2.code == "switching_phase_unknown"


def test_conflicting_even_with_polar_structure():
    v = decide([crystal(1, "polar", 300.0), loop(2, "ferroelectric", 300.0), pund(3, "no_switching", 300.0)])
    assert v.code == "conflicting"
    assert len(v.conflicts) == 1


def test_temperature_wording():
    from server.analysis.verdict import Transition

    trs = (Transition(290.0, ("dsc",), (1,)), Transition(380.0, ("dielectric",), (2,)))
    assert describe_temperatures("switching seen", [300.0, 340.0], trs) == (
        "switching seen at 300-340 K, above the transition at 290 K (DSC)"
        " and below the transition at 380 K (dielectric)"
    )
    assert describe_temperatures("switching seen", [280.0, 300.0], trs[:1]) == (
        "switching seen at 280-300 K, across the transition at 290 K (DSC)"
    )
    assert describe_temperatures("switching seen", [300.0], ()) == "switching seen at 300 K"
    assert describe_temperatures("switching seen", [None], trs) == "switching seen (temperature not recorded)"


def test_unknown_temperatures_assumed_same_phase_and_said():
    v = decide([crystal(1, "polar"), pund(2, "switching")])
    assert v.code == "polar_switching_supported"
    assert "not recorded" in v.reason


def test_bad_temperature_raises():
    with pytest.raises(AnalysisError):
        decide([pund(1, "switching", float("nan"))])
    with pytest.raises(AnalysisError):
        decide([dsc(1, [-5.0])])


def test_to_dict_json_ready():
    import json

    v = decide([crystal(1, "polar", 150.0), pund(2, "switching", 160.0)])
    d = v.to_dict()
    json.dumps(d)
    assert d["code"] == "polar_switching_supported" and d["version"] == VERSION
    assert d["switching_temperatures_K"] == [160.0, 160.0]
    assert d["used"][0] == {"measurement_id": 1, "kind": "crystal", "role": "polar_phase", "temperature_K": 150.0}
