"""Phase-identification evidence in the compound verdict (issues 18 and 15): SHG, powder patterns, columnar lattices.

Definitions used: SHG needs a non-centrosymmetric structure and is necessary, not sufficient, for a polar
phase (R. W. Boyd, Nonlinear Optics, 3rd ed. 2008, ch. 1.5; International Tables Vol. A, 10 polar of 21
non-centrosymmetric classes); a ferroelectric is a polar phase a field switches (IEEE Std 180-1986); a powder
pattern is the fingerprint of a crystal phase, so a changed pattern is a changed phase (Pecharsky and Zavalij,
Fundamentals of Powder Diffraction, 2nd ed. 2009); a hexagonal columnar lattice marks a mesophase (common practice).
"""

from __future__ import annotations

import numpy as np

from server.analysis import phases, pxrd
from server.analysis.verdict import Evidence, decide
from server.analysis.verdict_phase_id import PXRD, SAXS, SHG, SHG_VANISH
from tests.analysis.test_pxrd import _bowl, _frame
from tests.analysis.test_verdict import crystal, dielectric, dsc, loop, pund
from server.synth.pxrd import powder_pattern


def shg(mid, points, t_vanish=None, res=None):
    return Evidence("shg", mid, "vanishes" if t_vanish else ("active" if any(a for _, a in points) else "silent"),
                    points[0][0] if len(points) == 1 else None,
                    {"points": [{"T_K": t, "active": a} for t, a in points], "t_vanish_K": t_vanish,
                     "t_vanish_resolution_K": res})


def pattern(mid, verdict, t, reference=None, label=""):
    return Evidence("pxrd", mid, verdict, t, {"reference": reference, "reference_label": label})


def saxs(mid, t, lattice="hexagonal", a_nm=3.1, stacking_A=3.5):
    return Evidence("saxs", mid, f"{lattice} columnar", t, {"lattice": lattice, "a_nm": a_nm, "stacking_A": stacking_A})


def _crit(v):
    return {c.name: (c.state, c.measurements) for c in v.criteria}


BASE = [crystal(1, "polar", 300.0, "P2_1"), pund(2, "switching", 300.0), dsc(3, [], scan=(250.0, 400.0))]


def test_shg_active_in_the_switching_phase_meets_the_second_polarity_test():
    v = decide(BASE + [shg(4, [(300.0, True)])])
    assert v.code == "polar_switching_supported" and v.conflicts == ()
    assert _crit(v)[SHG] == ("met", (4,))


def test_shg_silent_where_switching_is_seen_contradicts_the_polar_claim():
    v = decide(BASE + [shg(4, [(302.0, False)])])
    assert v.code == "conflicting"
    assert _crit(v)[SHG] == ("unmet", (4,))
    assert "SHG is silent at 302 K" in v.reason and "detection limit" in v.reason
    # silent at 380 K, across the 350 K transition from the switching: no conflict, and untested in the claim's phase
    v2 = decide(BASE + [dielectric(5, 350.0, scan=(250.0, 400.0)), shg(4, [(380.0, False)])])
    assert v2.code == "polar_switching_supported" and _crit(v2)[SHG][0] == "untested"


def test_shg_silent_against_a_polar_structure_without_switching():
    v = decide([crystal(1, "polar", 150.0, "P2_1"), shg(4, [(152.0, False)])])
    assert v.code == "conflicting" and "has no inversion centre" in v.reason


def test_shg_active_with_a_centrosymmetric_structure_is_a_conflict():
    v = decide([crystal(1, "centrosymmetric", 295.0, "P2_1/c"), shg(4, [(295.0, True)])])
    assert v.code == "conflicting" and "centrosymmetric structure P2_1/c" in v.reason


def test_shg_vanishing_with_pr_is_a_criterion():
    # Lines and Glass 1977 ch. 1: at a ferroelectric Tc Pr -> 0 and the polar point group is lost together.
    loops = [loop(10 + i, "switching", t) for i, t in enumerate((320.0, 340.0, 350.0))] + [loop(20, "paraelectric", 362.0)]
    run = shg(4, [(t, t < 356.0) for t in (320.0, 330.0, 340.0, 350.0, 360.0, 370.0)], t_vanish=355.0, res=5.0)
    v = decide(loops + [run])
    assert _crit(v)[SHG_VANISH][0] == "met" and _crit(v)[SHG][0] == "met"
    far = shg(4, [(t, t < 300.0) for t in (290.0, 310.0)], t_vanish=300.0, res=10.0)
    assert _crit(decide(loops + [far]))[SHG_VANISH][0] == "unmet"
    assert _crit(decide(loops))[SHG_VANISH] == ("untested", ())


def _run(temps, t_change, rng):
    low, high = _bowl("P2_1", 6.0, True), _bowl("P-1", 4.2, False)
    out = []
    for i, t in enumerate(temps):
        f = _frame(powder_pattern([(low if t < t_change else high, 1.0)], rng=rng, lattice_strain=1e-4 * (t - 300)))
        out.append((100 + i, t, *pxrd.net_pattern(f)))
    return out


def test_pxrd_pattern_change_is_a_phase_boundary_on_heating_and_cooling():
    # VT-PXRD in 20 K steps with counting noise and thermal expansion; the structure changes at 350 K on heating
    # and, with 10 K hysteresis, at 340 K on cooling. No DSC or permittivity: the patterns alone place the boundary.
    rng = np.random.default_rng(11)
    heat = _run([300.0, 320.0, 340.0, 360.0, 380.0], 350.0, rng)
    cool = [(200 + i, *p[1:]) for i, p in enumerate(_run([380.0, 360.0, 330.0, 310.0], 340.0, rng))]
    ch = pxrd.pattern_changes(heat, scan="heating") + pxrd.pattern_changes(cool, scan="cooling")
    assert sorted((c.t_K, c.scan) for c in ch) == [(345.0, "cooling"), (350.0, "heating")]
    scans = phases.pattern_scans([(m, t) for m, t, *_ in heat], ch, "heating")
    ev = [crystal(1, "polar", 300.0, "P2_1"), pund(2, "switching", 320.0), pund(3, "switching", 370.0)]
    v = decide(ev, pattern_changes=ch, pattern_scans=scans)
    assert v.transitions_K == (350.0,)  # one physical transition, heating and cooling runs together
    assert v.transitions[0].sources == ("pxrd",) and "PXRD pattern change" in v.transitions[0].label()
    # the 320 K switching is in the scanned crystal phase of the CIF; the 370 K switching is across the boundary
    assert v.code == "polar_switching_supported"
    assert v.conclusion.scanned_from_K is None  # 320 and 370 K lie in different phases
    v2 = decide(ev[:1] + ev[2:], pattern_changes=ch, pattern_scans=scans)
    assert v2.code == "switching_phase_unknown" and "lies across the transition at 350 K" in v2.reason


def test_powder_pattern_must_be_the_claimed_structure():
    v = decide(BASE + [pattern(4, "matches", 300.0, reference=1, label="CIF #1")])
    assert v.code == "polar_switching_supported" and _crit(v)[PXRD] == ("met", (1, 4))
    bad = decide(BASE + [pattern(4, "no_match", 298.0)])
    assert bad.code == "conflicting" and _crit(bad)[PXRD] == ("unmet", (4,))
    assert "matches none of the registered structures" in bad.reason and "solvate" in bad.reason
    extra = decide(BASE + [pattern(4, "extra_phase", 300.0, reference=1, label="CIF #1")])
    assert extra.code == "conflicting" and "plus another phase" in extra.reason
    assert _crit(decide(BASE))[PXRD] == ("untested", ())


def test_columnar_lattice_marks_the_switching_mesophase():
    # Hexagonal columnar, a = 3.1 nm, 3.5 A pi-stacking at the 360 K switching temperature; no crystal structure.
    v = decide([pund(2, "switching", 360.0), saxs(5, 362.0)])
    assert v.code == "switching_phase_unknown"
    assert _crit(v)[SAXS] == ("met", (2, 5))
    assert "hexagonal columnar mesophase at 362 K" in v.reason and "strong evidence" in v.reason
    # the criterion is not listed for a compound with no sign of a mesophase
    assert SAXS not in _crit(decide(BASE))


def test_crystal_counted_as_the_phase_of_a_columnar_mesophase_is_a_conflict():
    # The reproduced issue-15 risk: a low-temperature crystal structure certifying a mesophase. The DSC saw no
    # transition, but the scattering at the switching temperature shows a columnar lattice.
    v = decide(BASE + [saxs(5, 300.0)])
    assert v.code == "conflicting"
    assert "hexagonal mesophase at 300 K" in v.reason and "crystal -> mesophase transition" in v.reason


def test_shg_vanishing_on_heating_is_a_phase_boundary():
    """SHG needs a non-centrosymmetric phase (Boyd 2008, ch. 1.5; Kurtz and Perry, J. Appl. Phys. 39, 3798
    (1968)), so a signal lost on heating ends the acentric phase: a transition in phases.build, joined to a
    permittivity peak within the run's step, else a transition of its own (issue 18, SHG as a phase boundary)."""
    run = shg(4, [(t, t < 345.0) for t in (320.0, 330.0, 340.0, 350.0, 360.0)], t_vanish=345.0, res=5.0)
    v = decide([loop(1, "switching", 320.0), dsc(3, [], scan=(250.0, 400.0)), run])
    [tr] = v.transitions
    assert tr.t_K == 345.0 and tr.sources == ("shg",) and tr.measurement_ids == (4,)
    assert "SHG vanishes" in tr.label() and v.transitions_K == (345.0,)
    # a phase boundary: the DSC-scanned range splits at 345 K, so 320 K and 360 K are not one phase
    assert [(p.t_from_K, p.t_to_K) for p in v.phases if p.scanned][:2] == [(250.0, 345.0), (345.0, 400.0)]
    # beside a permittivity peak 3 K away it is the same transition, seen by two probes
    v2 = decide([loop(1, "switching", 320.0), dielectric(5, 348.0, scan=(250.0, 400.0)), run])
    [tr2] = v2.transitions
    assert set(tr2.sources) == {"dielectric", "shg"} and tr2.t_K == 348.0 and set(tr2.measurement_ids) == {4, 5}
    # a run that stays active names no boundary
    assert decide([loop(1, "switching", 320.0), shg(6, [(320.0, True), (360.0, True)])]).transitions == ()
