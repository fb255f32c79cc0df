"""Evidence rules for the compound verdict.

The expected codes follow from the definition of a ferroelectric (IEEE Std 180-1986; Lines
and Glass 1977): a polar phase whose polarisation a field switches; loops alone can mislead
(Scott, J. Phys.: Condens. Matter 20, 021001 (2008)). Each test builds the evidence a
chemist would have and states which rule decides it.
"""

from __future__ import annotations

import pytest

from server.analysis.results import Flag
from server.analysis.verdict import VERSION, Evidence, decide, describe_temperatures
from server.verdict_codes import LABELS
from server.errors import AnalysisError


def crystal(mid, verdict, t=None, sg=None, flags=(), **details):
    d = {"space_group": sg} if sg else {}
    d.update(details)
    return Evidence("crystal", mid, verdict, t, d, tuple(Flag(c, c) for c in flags))


def loop(mid, verdict, t=None, **details):
    return Evidence("pe_loop", mid, verdict, t, details)


def pund(mid, verdict, t=None, **details):
    return Evidence("pund", mid, verdict, t, details)


def dsc(mid, peaks, scan=(240.0, 420.0), cooling=False):
    """A DSC run heated over ``scan`` (and cooled back when ``cooling``); ``peaks`` are heating-peak
    temperatures or full peak dicts."""
    rows = [p if isinstance(p, dict) else {"peak_K": p, "scan": "heating", "endothermic": True} for p in peaks]
    segs = [{"t_from_K": scan[0], "t_to_K": scan[1], "scan": "heating"}]
    if cooling:
        segs.append({"t_from_K": scan[1], "t_to_K": scan[0], "scan": "cooling"})
    return Evidence("dsc", mid, "transition", None, {"peaks": rows, "segments": segs})


def dielectric(mid, t_peak, scan=(200.0, 420.0), dispersive=False):
    flags = (Flag("frequency_dispersion", "moves with frequency"),) if dispersive else ()
    return Evidence("dielectric", mid, "anomaly", None,
                    {"t_peak_K": t_peak, "t_min_K": scan[0], "t_max_K": scan[1]}, flags)


def test_polar_switching_supported_in_one_scanned_phase():
    # IEEE Std 180-1986: a spontaneous polarisation a field reverses. The polar structure (320 K) and the
    # PUND switching (300-340 K) lie in one DSC-scanned interval (240-420 K) above the 290 K transition.
    ev = [
        crystal(1, "polar", 320.0, "Pna2_1"),
        pund(2, "switching", 300.0),
        pund(3, "switching", 340.0),
        loop(4, "switching", 320.0),
        dsc(5, [290.0]),
    ]
    v = decide(ev)
    assert v.code == "polar_switching_supported"
    assert v.label == LABELS["polar_switching_supported"]
    assert v.switching_temperatures_K == (300.0, 340.0)
    assert v.transitions_K == (290.0,)
    assert "switches at 300-340 K" in v.reason
    assert "Pna2_1" in v.reason
    assert {u.measurement_id: u.role for u in v.used} == {
        1: "polar_phase", 2: "switching", 3: "switching", 4: "saturated_loop", 5: "transition"}
    assert v.conflicts == ()
    crit = {c.name: c.state for c in v.criteria}
    assert crit["polar structure in the switching phase"] == "met"
    assert crit["switching shown by PUND"] == "met"
    assert crit["saturated loop"] == "met"
    assert crit["second polarity test (SHG)"] == "untested"


def test_polar_structure_in_another_phase_does_not_support():
    # polar structure at 260 K, switching at 300-340 K, the 290 K transition in between (Lines and Glass 1977:
    # a transition changes the phase, so the structure does not describe the switching phase)
    ev = [crystal(1, "polar", 260.0), pund(2, "switching", 300.0), pund(3, "switching", 340.0), dsc(4, [290.0])]
    v = decide(ev)
    assert v.code == "switching_phase_unknown"
    assert "lies across the transition at 290 K" in v.reason


def test_unscanned_gap_leaves_phase_continuity_not_shown():
    # The reproduced case: P2_1 at 150 K; PUND at 302-363 K; DSC from 240 K, permittivity from 340 K. 150-240 K
    # was never examined, so the structure and the switching are not shown to be one phase.
    ev = [crystal(1, "polar", 150.0, "P2_1"), pund(2, "switching", 302.0), pund(3, "switching", 363.0),
          dsc(4, [], scan=(240.0, 400.0)), dielectric(5, None, scan=(340.0, 400.0))]
    v = decide(ev)
    assert v.code == "switching_phase_unknown"
    assert "phase continuity not shown between 150 K and 240 K" in v.reason
    assert "a DSC or permittivity scan from 150 K to 240 K would close the gap" in v.reason
    rows = [(p.t_from_K, p.t_to_K, p.scanned) for p in v.phases]
    assert rows[0] == (150.0, 240.0, False)
    assert all(p.scanned for p in v.phases[1:])
    assert {c.name: c.state for c in v.criteria}["polar structure in the switching phase"] == "untested"


def test_loop_only_compound_gets_the_weaker_class():
    # Scott 2008: a closed loop alone can come from leakage or loss; without PUND switching is not confirmed.
    v = decide([loop(1, "switching", 295.0), loop(2, "switching", 310.0)])
    assert v.code == "loop_switching_only"
    assert v.switching_temperatures_K == (295.0, 310.0)
    assert "no PUND shows switching" in v.reason
    crit = {c.name: (c.state, c.measurements) for c in v.criteria}
    assert crit["switching shown by PUND"] == ("untested", ())
    assert crit["saturated loop"] == ("met", (1, 2))


def test_polar_unswitched_keeps_temperature_and_highest_field():
    v = decide([crystal(1, "polar", 150.0, "P2_1"), pund(2, "no_switching", 300.0, e_pulse_kV_cm=60.0)])
    assert v.code == "polar_unswitched"
    assert "pyroelectric at most" in v.reason
    assert "Not switched at 300 K up to 60 kV/cm" in v.reason
    assert v.switching_temperatures_K is None
    assert v.qualifiers == ("tested at one temperature only",)


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
    # 288 (DSC) and 291 (permittivity) are within 5 K: one transition, at the DSC peak
    assert v.transitions_K == pytest.approx((288.0, 352.0))
    assert v.transitions[0].sources == ("dsc", "dielectric")
    assert "Inconclusive P-E loops (measurement 3)" in v.reason


def test_heating_cooling_pair_is_one_transition_with_hysteresis():
    # Lines and Glass 1977 ch. 4: a first-order transition shows on heating and, lower, on cooling.
    peaks = [{"peak_K": 400.0, "scan": "heating", "endothermic": True, "ds_J_molK": 9.0, "onset_K": 398.0},
             {"peak_K": 392.0, "scan": "cooling", "endothermic": False, "ds_J_molK": -9.0}]
    v = decide([dsc(1, peaks, scan=(300.0, 420.0), cooling=True)])
    assert v.transitions_K == (400.0,)
    tr = v.transitions[0]
    assert (tr.t_heating_K, tr.t_cooling_K, tr.hysteresis_K) == (400.0, 392.0, 8.0)
    assert tr.transition_class == "solid_solid"
    assert "400 K" in v.reason and "hysteresis 8 K" in v.reason


def test_relaxor_maximum_is_not_a_transition():
    # Cross, Ferroelectrics 76, 241 (1987): a maximum that moves with frequency is relaxor dispersion.
    v = decide([dielectric(1, 278.0, dispersive=True)])
    assert v.transitions_K == ()
    assert v.code == "untested"
    assert "relaxor-like, at 278 K" in v.reason


def test_crystal_to_mesophase_peak_is_a_phase_boundary():
    # A large-entropy peak (60 J/(mol K)) with a small reversible clearing peak above it is crystal ->
    # mesophase, not isotropisation; it still splits the phases, so a 300 K polar structure says nothing
    # about switching at 340 K.
    peaks = [{"peak_K": 320.0, "scan": "heating", "endothermic": True, "ds_J_molK": 60.0},
             {"peak_K": 312.0, "scan": "cooling", "endothermic": False, "ds_J_molK": -58.0},
             {"peak_K": 420.0, "scan": "heating", "endothermic": True, "ds_J_molK": 6.0},
             {"peak_K": 418.0, "scan": "cooling", "endothermic": False, "ds_J_molK": -6.0}]
    v = decide([dsc(1, peaks, scan=(250.0, 450.0), cooling=True), crystal(2, "polar", 300.0, "P2_1"),
                pund(3, "switching", 340.0)])
    assert [t.transition_class for t in v.transitions] == ["chain_melting", "isotropisation"]
    assert v.code == "switching_phase_unknown"
    assert "lies across the transition at 320 K" in v.reason


def test_chain_melting_is_no_ferroic_transition():
    # 30 J/(mol K) over 6 chain CH2 = 5 J/(mol K) per CH2: chain melting (common practice; polyethylene's
    # fusion entropy, about 9.9 J/(mol K) per CH2, Wunderlich 1980, is the upper end). Not a ferroic transition.
    peaks = [{"peak_K": 289.0, "scan": "heating", "endothermic": True, "ds_J_molK": 30.0}]
    v = decide([dsc(1, peaks)], chain_ch2=6)
    assert v.transitions[0].transition_class == "chain_melting"
    assert v.transitions[0].ds_per_ch2_J_molK == pytest.approx(5.0)
    assert v.code == "untested"
    assert "chain melting" in v.reason
    # with a negative switching test it is "no switching seen", not a transition-only compound
    assert decide([dsc(1, peaks), pund(2, "no_switching", 300.0, e_pulse_kV_cm=60.0)],
                  chain_ch2=6).code == "no_switching_seen"
    # without chains the same peak is a solid-solid transition
    assert decide([dsc(1, peaks)]).code == "transition_only"


def test_no_switching_seen():
    v = decide([pund(1, "no_switching", 300.0, e_pulse_kV_cm=80.0)])
    assert v.code == "no_switching_seen"
    assert "Not switched at 300 K up to 80 kV/cm" in v.reason


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
    assert "P2_1/c" in v.reason and "Possible explanation" in v.reason


def test_centrosymmetric_phase_across_a_transition_is_no_conflict():
    # centrosymmetric at 250 K, transition at 270 K, switching at 300 K: another phase switches
    v = decide([crystal(1, "centrosymmetric", 250.0), pund(2, "switching", 300.0), dielectric(3, 270.0)])
    assert v.code == "switching_phase_unknown"
    assert "lies across the transition at 270 K" in v.reason


def test_conflicting_loop_and_pund_same_temperature():
    v = decide([loop(1, "switching", 300.0), pund(2, "no_switching", 304.0)])
    assert v.code == "conflicting"
    assert "PUND (measurement 2) shows none at 304 K" in v.reason
    # 10 K apart is not the same temperature: the loop stands, but only as the weaker class
    v2 = decide([loop(1, "switching", 300.0), pund(2, "no_switching", 310.0)])
    assert v2.code == "loop_switching_only"


def test_conflicting_even_with_polar_structure():
    v = decide([crystal(1, "polar", 300.0), loop(2, "switching", 300.0), pund(3, "no_switching", 300.0)])
    assert v.code == "conflicting"
    assert len(v.conflicts) == 1


def test_flat_core_contradicts_switching_by_inversion():
    # A flat core (bowl depth 0.05 A) cannot invert, yet PUND switches: a conflict for review.
    v = decide([crystal(1, "polar", 300.0, "P2_1", bowl_depth_A=0.05), pund(2, "switching", 300.0)])
    assert v.code == "conflicting"
    assert "flat core" in v.reason and "another mechanism" in v.reason


def test_rate_slower_than_drive_contradicts_full_switching():
    # Eyring (J. Chem. Phys. 3, 107 (1935)): with dS = 0, k = kB T / h exp(-dH / RT). dH below gives 4 s^-1 at
    # 298 K (kB T / h = 6.21e12 s^-1 at 298 K, CODATA), far slower than a 100 Hz loop.
    import math

    from scipy.constants import R, h, k

    dh = R * 298.0 * math.log(k * 298.0 / h / 4.0) / 1e3
    # A known mechanism (field-assisted switching) can explain it, so it is flagged for review and listed,
    # without overturning the class.
    v = decide([loop(1, "switching", 298.0, frequency_Hz=100.0)],
               rates=[{"measurement_id": 7, "dh_kJ_mol": dh, "ds_J_molK": 0.0}])
    assert v.code == "loop_switching_only"
    assert [c.blocking for c in v.conflicts] == [False]
    assert "4 s^-1" in v.reason and "100 Hz drive" in v.reason and "field-assisted or collective" in v.reason
    # the 1 ms PUND pulses (1000 s^-1) are faster than the 4 s^-1 rate too
    v2 = decide([pund(1, "switching", 298.0, pulse_width_s=1e-3)],
                rates=[{"measurement_id": 7, "dh_kJ_mol": dh, "ds_J_molK": 0.0}])
    assert "1 ms pulses" in v2.reason and len(v2.conflicts) == 1
    # a fast rate (dH 40 kJ/mol) raises no flag
    assert decide([loop(1, "switching", 298.0, frequency_Hz=100.0)],
                  rates=[{"measurement_id": 7, "dh_kJ_mol": 40.0, "ds_J_molK": 0.0}]).conflicts == ()


def test_conclusion_states_range_and_tc_from_three_probes():
    # Lines and Glass 1977 ch. 1: at Tc the permittivity peaks, the DSC shows the transition and Pr -> 0.
    loops = [loop(10 + i, "switching", t) for i, t in enumerate((302.0, 320.0, 340.0, 350.0))]
    loops.append(loop(20, "paraelectric", 362.0))
    peaks = [{"peak_K": 358.0, "onset_K": 357.0, "scan": "heating", "endothermic": True, "ds_J_molK": 6.0}]
    ev = [crystal(1, "polar", 300.0, "P2_1"), pund(2, "switching", 302.0), dsc(3, peaks, scan=(280.0, 400.0)),
          dielectric(4, 359.0, scan=(280.0, 400.0))] + loops
    v = decide(ev)
    assert v.code == "polar_switching_supported"
    assert "switches between 302 K and Tc = 357 ± 2 K (permittivity peak 359 K, DSC onset 357 K, " \
           "Pr -> 0 at 356 K)" in v.reason
    assert len(v.transitions_K) == 1
    crit = {c.name: c.state for c in v.criteria}
    assert crit["Pr vanishes at the permittivity peak and the DSC anomaly"] == "met"


def test_criteria_and_phases_keys():
    import json

    v = decide([crystal(1, "polar", 300.0), pund(2, "switching", 300.0), dsc(3, [350.0])])
    d = json.loads(json.dumps(v.to_dict()))
    assert all(set(c) == {"name", "state", "measurements"} and c["state"] in ("met", "unmet", "untested")
               for c in d["criteria"])
    assert all(set(p) == {"t_from_K", "t_to_K", "scanned", "identified_by"} for p in d["phases"])
    assert [(p["t_from_K"], p["t_to_K"]) for p in d["phases"]] == [(240.0, 350.0), (350.0, 420.0)]


def test_temperature_wording():
    from server.analysis.phases import PhaseTransition

    def tr(t, src, mid):
        return PhaseTransition(t, None, None, None, None, None, None, None, None, "unclassified", "", (src,), (mid,))

    trs = (tr(290.0, "dsc", 1), tr(380.0, "dielectric", 2))
    assert describe_temperatures("switching seen", [300.0, 340.0], trs) == (
        "switching seen at 300-340 K, above the transition at 290 K (DSC; unclassified)"
        " and below the transition at 380 K (permittivity; unclassified)"
    )
    assert describe_temperatures("switching seen", [280.0, 300.0], trs[:1]) == (
        "switching seen at 280-300 K, across the transition at 290 K (DSC; unclassified)"
    )
    assert describe_temperatures("switching seen", [300.0], ()) == "switching seen at 300 K"
    assert describe_temperatures("switching seen", [None], trs) == "switching seen (temperature not recorded)"


def test_unknown_temperatures_do_not_show_one_phase():
    v = decide([crystal(1, "polar"), pund(2, "switching")])
    assert v.code == "switching_phase_unknown"
    assert "not recorded" in v.reason


def test_bad_temperature_raises():
    with pytest.raises(AnalysisError):
        decide([pund(1, "switching", float("nan"))])
    with pytest.raises(AnalysisError):
        decide([dsc(1, [-5.0])])


def test_to_dict_json_ready():
    import json

    v = decide([crystal(1, "polar", 150.0), pund(2, "switching", 160.0), dsc(3, [], scan=(120.0, 200.0))])
    d = v.to_dict()
    json.dumps(d)
    assert d["code"] == "polar_switching_supported" and d["version"] == VERSION
    assert d["switching_temperatures_K"] == [160.0, 160.0]
    assert d["used"][0] == {"measurement_id": 1, "kind": "crystal", "role": "polar_phase", "temperature_K": 150.0}


def test_quality_flags_lower_a_structures_weight_but_keep_it():
    # Two polar structures in the scanned switching phase: the clean one is cited first; a structure with
    # quality flags still counts (flags lower the weight, never delete), and says so.
    flagged = crystal(1, "polar", 300.0, "P2_1", flags=("density_implausible", "column_too_long"))
    clean = crystal(2, "polar", 305.0, "Pna2_1")
    v = decide([flagged, clean, pund(3, "switching", 300.0), dsc(4, [])])
    assert v.code == "polar_switching_supported" and "Pna2_1" in v.reason
    v1 = decide([flagged, pund(3, "switching", 300.0), dsc(4, [])])
    assert v1.code == "polar_switching_supported"
    assert "weight lowered by density implausible, column too long" in v1.reason


# ----------------------------------------------------------------------------- conclusions (issue 15, item 3)


def test_series_tc_joins_the_permittivity_peak_and_the_dsc_anomaly_as_one_transition():
    # Lines and Glass 1977 ch. 1: at Tc the remanent polarisation vanishes, the permittivity peaks and the
    # DSC shows the latent heat. A Pr(T) power-law fit (Tc = 356 +- 2 K, from the series of loops 1-4) is
    # the series' Pr -> 0, with no non-switching loop above Tc to bracket it.
    ev = [loop(i, "switching", t) for i, t in enumerate((302.0, 320.0, 335.0, 350.0), start=1)]
    ev += [pund(5, "switching", 320.0), crystal(6, "polar", 320.0, "Pna2_1"),
           dsc(7, [{"peak_K": 360.0, "onset_K": 357.0, "scan": "heating", "endothermic": True, "ds_J_molK": 6.0}]),
           dielectric(8, 359.0, scan=(250.0, 400.0))]
    v = decide(ev, series_tc={"tc_K": 356.0, "tc_err_K": 2.0, "measurement_ids": [1, 2, 3, 4]})
    assert v.code == "polar_switching_supported"
    assert len(v.transitions) == 1
    tr = v.transitions[0]
    assert set(tr.sources) == {"dsc", "dielectric", "series"} and tr.t_pr_zero_K == 356.0
    assert {1, 2, 3, 4, 7, 8} <= set(tr.measurement_ids)
    pr_criterion = next(c for c in v.criteria if c.name.startswith("Pr vanishes"))
    assert pr_criterion.state == "met"
    # the conclusion states the range up to Tc with each observation of it
    c = v.conclusion
    assert "switches between 320 K and Tc = 357 ± 2 K" in c.text, c.text
    assert "permittivity peak 359 K, DSC onset 357 K, Pr -> 0 at 356 K" in c.text
    assert (c.t_from_K, c.t_to_K) == (320.0, 320.0)
    assert c.scanned_from_K == 240.0 and c.scanned_to_K == 360.0  # DSC from 240 K, up to the transition
    assert "Pr vanishes at the permittivity peak and the DSC anomaly" in c.criteria_met


def test_series_tc_without_an_error_is_not_used():
    ev = [loop(1, "switching", 300.0), loop(2, "switching", 310.0)]
    v = decide(ev, series_tc={"tc_K": 356.0, "tc_err_K": None, "measurement_ids": [1, 2]})
    assert v.transitions == ()


def test_conclusion_never_reaches_into_an_unscanned_phase():
    # The reproduced case of issue 15: a P2_1 structure at 150 K, PUND switching at 302 K, DSC from 240 K.
    # The conclusion speaks for 302 K within the scanned 240-420 K phase and names the gap, not 150 K.
    ev = [crystal(1, "polar", 150.0, "P2_1"), pund(2, "switching", 302.0), dsc(3, [], scan=(240.0, 420.0))]
    v = decide(ev)
    assert v.code == "switching_phase_unknown"
    c = v.conclusion
    assert (c.t_from_K, c.t_to_K) == (302.0, 302.0)
    assert (c.scanned_from_K, c.scanned_to_K) == (240.0, 420.0)
    assert "150" not in c.text
    assert "polar structure in the switching phase" in c.criteria_untested
    assert "phase continuity not shown between 150 K and 240 K" in v.reason


def test_conclusion_of_a_switching_temperature_no_scan_reached_says_inferred():
    v = decide([loop(1, "switching", 300.0), dsc(2, [], scan=(320.0, 400.0))])
    assert v.code == "loop_switching_only"
    assert v.conclusion.scanned_from_K is None
    assert "no DSC, permittivity or series scan reached 300 K: the phase there is inferred only" in v.conclusion.text


def test_negative_conclusion_keeps_temperature_and_highest_field():
    # A negative result is only as wide as its test: "not switched at 300 K up to 60 kV/cm".
    v = decide([pund(1, "no_switching", 300.0, e_pulse_kV_cm=60.0), dsc(2, [], scan=(250.0, 400.0))])
    assert v.code == "no_switching_seen"
    assert "not switched at 300 K up to 60 kV/cm" in v.conclusion.text
    assert "in the phase scanned from 250 K to 400 K" in v.conclusion.text
    assert v.conclusion.criteria_unmet == ("switching shown by PUND",)


def test_identity_criterion_lists_measurements_on_unconfirmed_batches_and_keeps_the_code():
    # Issue 17: physical data on a batch whose identity nobody confirmed still count, but the verdict says so.
    ev = [crystal(1, "polar", 300.0, "P2_1"), pund(2, "switching", 300.0), dsc(3, [], scan=(250.0, 400.0))]
    plain = decide(ev)
    assert "identity of every measured batch confirmed" not in {c.name for c in plain.criteria}
    part = decide(ev, identity={1: True, 2: False, 3: True})
    assert part.code == plain.code == "polar_switching_supported"
    crit = {c.name: (c.state, c.measurements) for c in part.criteria}
    assert crit["identity of every measured batch confirmed"] == ("unmet", (2,))
    assert "identity of every measured batch confirmed" in part.conclusion.criteria_unmet
    assert "unmet: identity of every measured batch confirmed" in part.conclusion.text
    full = decide(ev, identity={1: True, 2: True, 3: True})
    assert "identity of every measured batch confirmed" in full.conclusion.criteria_met
    assert decide([], identity={}).criteria[-1].state == "untested"


def test_planar_computed_minimum_contradicts_measured_inversion():
    """Issue 15 item 4 / issue 18: a GFN2-xTB minimum that relaxed to planar (barrier about 0, flat core) says the
    bowl does not invert, while a switching loop or a coalescence barrier says it does (Gutowsky and Holm,
    J. Chem. Phys. 25, 1228 (1956)). The measurement outweighs the computation: listed for review, class kept."""
    planar = [{"estimate_id": 11, "barrier_kcal_mol": 0.07, "bowl_depth_A": 0.01, "planar": True}]
    v = decide([loop(1, "switching", 300.0, frequency_Hz=100.0)], computed_minima=planar)
    assert v.code == "loop_switching_only"
    [c] = v.conflicts
    assert not c.blocking and c.measurement_ids == (1,)
    assert "#11 relaxed to a planar minimum (barrier 0.07 kcal/mol, bowl depth 0.01 Å)" in c.message
    assert "collapsed to planar" in c.suggestion
    # a dynamic-NMR barrier alone (no loop) is contradicted too; the rate table's measurement is named
    nmr = [{"estimate_id": 12, "measurement_id": 5, "method": "eyring", "dg_kcal_mol": 14.3}]
    [c2] = decide([], computed_minima=planar, nmr_barriers=nmr).conflicts
    assert c2.measurement_ids == (5,) and "14.3 kcal/mol (eyring, measurement 5)" in c2.message
    # a barrier of zero counts as planar even unflagged; a curved minimum, or nothing measured, raises no flag
    flat_zero = [{"estimate_id": 13, "barrier_kcal_mol": 0.0, "bowl_depth_A": None, "planar": False}]
    assert len(decide([pund(2, "switching", 300.0)], computed_minima=flat_zero).conflicts) == 1
    curved = [{"estimate_id": 14, "barrier_kcal_mol": 12.5, "bowl_depth_A": 0.9, "planar": False}]
    assert decide([loop(1, "switching", 300.0)], computed_minima=curved, nmr_barriers=nmr).conflicts == ()
    assert decide([loop(3, "no_switching", 300.0)], computed_minima=planar).conflicts == ()
