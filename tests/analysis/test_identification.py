"""Phase identification: one test per SHG case, the PXRD link across a transition, the columnar switching case.

The phase model is built from a DSC pair at 430 K (heating) / 425 K (cooling) scanned 250-480 K, so the phases
are 250-430 K and 430-480 K (server.analysis.phases).
"""

from __future__ import annotations

from server.analysis import identification as idn
from server.analysis import phases
from server.analysis.identification import Fact


def _model(**extra):
    peaks = [phases.ThermalPeak(1, 430.0, "heating", True, ds_J_molK=5.8),
             phases.ThermalPeak(1, 425.0, "cooling", False, ds_J_molK=-5.8)]
    scans = [phases.Scan(1, "dsc", 250.0, 480.0, "heating"), phases.Scan(1, "dsc", 480.0, 250.0, "cooling")]
    return phases.build(dsc_peaks=peaks, scans=scans, **extra)


POLAR_CIF = Fact("crystal", 10, 300.0, {"space_group": "P 1 21 1", "polar": True, "centrosymmetric": False})
CENTRO_CIF = Fact("crystal", 11, 300.0, {"space_group": "P 1 21/c 1", "polar": False, "centrosymmetric": True})


def _low(result):
    return next(p for p in result.phases if p.t_to_K <= 430.0 + 1e-9)


def test_shg_active_with_a_polar_cif_is_consistent_and_no_conflict():
    r = idn.identify(_model(), [POLAR_CIF, Fact("shg", 20, 300.0, {"active": True})])
    low = _low(r)
    assert [c.strength for c in low.criteria] == ["strong", "consistent"] and low.conflicts == ()
    assert "necessary, not sufficient" in low.criteria[1].text and low.identified_by == ("CIF", "SHG")


def test_shg_active_with_a_centrosymmetric_cif_is_a_conflict():
    low = _low(idn.identify(_model(), [CENTRO_CIF, Fact("shg", 20, 300.0, {"active": True})]))
    assert len(low.conflicts) == 1 and "centrosymmetric" in low.conflicts[0].text
    assert low.conflicts[0].measurement_ids == (11, 20)


def test_shg_silent_with_a_polar_cif_and_switching_are_conflicts():
    facts = [POLAR_CIF, Fact("shg", 20, 310.0, {"active": False}), Fact("switching", 30, 320.0)]
    low = _low(idn.identify(_model(), facts))
    assert any(c.strength == "against" and "evidence against a polar phase" in c.text for c in low.criteria)
    assert len(low.conflicts) == 2 and low.switching_ids == (30,)


def test_shg_silent_above_the_transition_is_no_conflict_with_the_low_temperature_cif():
    r = idn.identify(_model(), [POLAR_CIF, Fact("shg", 20, 450.0, {"active": False})])
    high = next(p for p in r.phases if p.t_from_K >= 430.0 - 1e-9)
    assert all(p.conflicts == () for p in r.phases) and high.criteria[0].strength == "against"


def test_shg_vanishing_with_pr_and_the_permittivity_peak_is_a_strong_criterion():
    loops = [phases.LoopPoint(40 + i, t, t < 430) for i, t in enumerate((400.0, 410.0, 420.0, 428.0, 435.0))]
    eps = [phases.PermittivityMaximum(50, 431.0, False)]
    model = _model(loops=loops, permittivity=eps)
    r = idn.identify(model, [Fact("shg", 20, 300.0, {"active": True, "t_vanish_K": 432.5,
                                                      "t_vanish_resolution_K": 2.5})])
    assert [c.strength for c in r.criteria] == ["strong"] and "polar order is lost" in r.criteria[0].text
    # without Pr -> 0 and the permittivity peak the same vanishing only supports the DSC transition
    weak = idn.identify(_model(), [Fact("shg", 20, 300.0, {"active": True, "t_vanish_K": 432.5})])
    assert [c.strength for c in weak.criteria] == ["supports"]


def test_powder_match_across_a_transition_is_a_conflict_and_within_a_phase_identifies_it():
    same = Fact("pxrd", 60, 320.0, {"verdict": "matches", "reference": 10, "reference_label": "CIF #10",
                                     "reference_t_K": 300.0})
    low = _low(idn.identify(_model(), [POLAR_CIF, same]))
    assert "PXRD match" in low.identified_by and low.conflicts == ()
    hot = Fact("pxrd", 61, 450.0, {"verdict": "matches", "reference": 10, "reference_label": "CIF #10",
                                    "reference_t_K": 300.0})
    r = idn.identify(_model(), [POLAR_CIF, hot])
    assert any("across the transition at 430 K" in c.text for p in r.phases for c in p.conflicts)


def test_hexagonal_columnar_phase_with_stacking_at_a_switching_temperature_is_strong_evidence():
    facts = [Fact("saxs", 70, 450.0, {"lattice": "hexagonal", "a_nm": 3.2, "stacking_A": 3.5}),
             Fact("switching", 31, 455.0)]
    r = idn.identify(_model(), facts)
    high = next(p for p in r.phases if p.t_from_K >= 430.0 - 1e-9)
    assert high.identity == "hexagonal columnar mesophase"
    assert any(c.strength == "strong" and "switched phase" in c.text for c in high.criteria)
    # the same lattice without a stacking peak only supports the identity
    plain = idn.identify(_model(), [Fact("saxs", 70, 450.0, {"lattice": "hexagonal", "a_nm": 3.2}),
                                    Fact("switching", 31, 455.0)])
    assert not any(c.strength == "strong" for p in plain.phases for c in p.criteria)
