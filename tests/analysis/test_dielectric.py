"""Dielectric analysis: parallel-plate permittivity, peaks, dispersion, Curie-Weiss and Landau.

Expected values come from outside the code under test: the parallel-plate formula with
CODATA 2018 eps0 (docs/methods.md, computed), curves written down in this file from the
Curie-Weiss and Landau formulas (analytic models), and the order of magnitude of Curie
constants from Lines and Glass (1977; docs/methods.md, memory).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from server.analysis.dielectric import (
    METHOD,
    VERSION,
    analyse_dielectric,
    vogel_fulcher_fit,
    permittivity_from_capacitance,
    transition_hint,
)
from server.errors import AnalysisError
from server.ingest.conditions import parse_conditions
from server.ingest.table import read_table, to_csv_bytes
from server.synth.dielectric import curie_weiss_scan

EPS0 = 8.8541878128e-12  # F/m, CODATA 2018


def landau_second_order(t_K, c_K, tc_K, eps_inf):
    """eps' of a second-order Landau transition with T0 = Tc, written here from the theory.

    Above: 1/chi = (T - Tc)/C; below: 1/chi = 2 (Tc - T)/C (Lines and Glass 1977, ch. 3).
    """
    t = np.asarray(t_K, dtype=float)
    inv = np.where(t >= tc_K, (t - tc_K) / c_K, 2.0 * (tc_K - t) / c_K)
    return eps_inf + 1.0 / inv


def frame_from_eps(t, eps, f_Hz=None):
    data = {"T_K": t, "eps_r": eps}
    if f_Hz is not None:
        data["f_Hz"] = np.full(len(t), f_Hz)
    return pd.DataFrame(data)


def canonical(frame: pd.DataFrame) -> pd.DataFrame:
    """Synthetic file columns -> canonical columns, by hand (independent of ingest)."""
    out = pd.DataFrame({"T_K": frame["T (K)"], "f_Hz": frame["f (Hz)"]})
    if "C (pF)" in frame:
        out["C_F"] = frame["C (pF)"] * 1e-12
        out["tan_delta"] = frame["D ()"]
    else:
        out["eps_r"] = frame["eps_r ()"]
        out["eps_i"] = frame["eps_i ()"]
    return out


def test_module_protocol():
    assert "Curie-Weiss" in METHOD
    assert VERSION.startswith("dielectric/")


def test_parallel_plate_check_value():
    # docs/methods.md (computed from eps0 CODATA 2018): C 10 pF, d 1.000 mm, A 1.000 cm2 -> 11.2941
    eps = permittivity_from_capacitance(10e-12, area_cm2=1.0, thickness_um=1000.0)
    assert float(eps) == pytest.approx(11.2941, abs=5e-5)


def test_capacitance_path_uses_parallel_plate_and_loss():
    # A frame in capacitance; the row with C = 10 pF must give eps' 11.2941 (docs/methods.md)
    # and eps'' = eps' tan(delta) with tan(delta) = 0.02 -> 0.225882.
    t = np.arange(280.0, 321.0, 2.0)
    c_pF = 10.0 + 5.0 * np.exp(-(((t - 300.0) / 6.0) ** 2))
    c_pF[0] = 10.0
    frame = pd.DataFrame({"T_K": t, "f_Hz": 1e3, "C_F": c_pF * 1e-12, "tan_delta": 0.02})
    res = analyse_dielectric(frame, area_cm2=1.0, thickness_um=1000.0)
    curve = res.curves["frequencies"][0]
    assert curve["eps_r"][0] == pytest.approx(11.2941, abs=5e-5)
    assert curve["eps_i"][0] == pytest.approx(11.2941 * 0.02, abs=1e-5)
    # The Gaussian bump is centred on 300 K by construction.
    assert res.t_peak_K == pytest.approx(300.0, abs=0.3)


@pytest.mark.parametrize("eps_inf", [0.0, 12.0])
def test_curie_weiss_recovered_within_2_percent(eps_inf):
    # Analytic model written in this file: C = 3300 K, T0 = Tc = 350 K, 0.1 % noise.
    rng = np.random.default_rng(42)
    t = np.arange(300.0, 450.5, 1.0)
    t = t[t != 350.0]  # the model diverges at Tc
    eps = landau_second_order(t, 3300.0, 350.0, eps_inf) * (1 + 1e-3 * rng.standard_normal(len(t)))
    res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
    assert res.curie_constant_K == pytest.approx(3300.0, rel=0.02)
    assert res.t0_K == pytest.approx(350.0, abs=0.5)
    assert res.eps_inf == pytest.approx(eps_inf, abs=2.0)
    assert res.fit_r2 > 0.999
    assert res.t_peak_K == pytest.approx(350.0, abs=1.0)
    # Fit range: from 5 K (margin) above the peak to the top of the data.
    assert res.fit_t_min_K >= res.t_peak_K + 5.0
    assert res.fit_t_max_K == pytest.approx(450.0)
    assert res.transition_hint == "order_disorder"


def test_curie_weiss_without_eps_inf_would_be_biased():
    # Why eps_inf is fitted (docs/methods.md): with a large background a 2-parameter fit of
    # 1/eps would be off; the 3-parameter fit is not. Background 200, C 3300 K.
    t = np.arange(360.0, 450.5, 1.0)
    eps = 200.0 + 3300.0 / (t - 350.0)
    naive_slope = np.polyfit(t, 1 / eps, 1)[0]
    assert abs(1 / naive_slope - 3300.0) / 3300.0 > 0.2  # the naive estimate is far off
    res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
    assert "no_peak_in_range" in {f.code for f in res.flags}
    assert res.curie_constant_K == pytest.approx(3300.0, rel=0.02)
    assert res.eps_inf == pytest.approx(200.0, rel=0.02)


def test_landau_second_order_ratio_is_minus_two():
    # Landau theory (docs/methods.md, derived): slope of 1/eps below / above = -2.
    t = np.arange(300.0, 400.5, 0.5)
    t = t[t != 350.0]
    eps = landau_second_order(t, 3300.0, 350.0, 0.0)
    res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
    assert res.landau_slope_ratio == pytest.approx(-2.0, abs=0.05)


def test_landau_tricritical_ratio_from_generator():
    # Generator built to Landau's tricritical case: ratio -4 (docs/methods.md, derived).
    frame = curie_weiss_scan(
        3.0e3, 320.0, 320.0, 8.0, t_min_K=260.0, t_max_K=400.0, step_K=1.0,
        frequencies_Hz=[1e3], landau_order="tricritical", noise_rel=5e-4, rng=np.random.default_rng(3),
    )
    res = analyse_dielectric(
        canonical(frame), area_cm2=frame.attrs["area_cm2"], thickness_um=frame.attrs["thickness_um"]
    )
    assert res.landau_slope_ratio == pytest.approx(-4.0, abs=0.2)
    assert res.curie_constant_K == pytest.approx(3.0e3, rel=0.02)


def test_hint_kh2po4_like_order_disorder():
    # KH2PO4: C about 3.3e3 K, Tc 122 K (docs/methods.md, memory) -> order-disorder.
    frame = curie_weiss_scan(
        3.3e3, 122.0, 122.0, 5.0, t_min_K=90.0, t_max_K=200.0, step_K=1.0,
        frequencies_Hz=[1e3, 1e4, 1e5], noise_rel=1e-3, rng=np.random.default_rng(7),
    )
    res = analyse_dielectric(canonical(frame), area_cm2=0.1, thickness_um=500.0)
    assert res.transition_hint == "order_disorder"
    assert 1e3 / 3 < res.curie_constant_K < 1e3 * 10  # order of magnitude 1e3 K
    assert "frequency_dispersion" not in {f.code for f in res.flags}
    assert res.dispersion_K < 1.0


def test_hint_batio3_like_displacive():
    # BaTiO3: C about 1.5-1.7e5 K (docs/methods.md, memory), Tc about 393 K -> displacive.
    frame = curie_weiss_scan(
        1.6e5, 393.0, 393.0, 50.0, t_min_K=330.0, t_max_K=480.0, step_K=1.0,
        frequencies_Hz=[1e4], noise_rel=1e-3, rng=np.random.default_rng(8), as_capacitance=False,
    )
    res = analyse_dielectric(canonical(frame))
    assert res.transition_hint == "displacive"
    assert 1e5 / 3 < res.curie_constant_K < 1e5 * 3


@pytest.mark.parametrize(
    ("c_K", "hint"),
    [(3.2e3, "order_disorder"), (1.6e5, "displacive"), (1.5e4, "unclear"), (10.0, "unclear"), (-500.0, "unclear")],
)
def test_transition_hint_windows(c_K, hint):
    # Triglycine sulfate C about 3.2e3 K (Hoshino et al. 1957; docs/methods.md, memory).
    assert transition_hint(c_K) == hint


def test_relaxor_dispersion_detected():
    # Relaxor-like: Tm shifts by 6 K per decade over 3 decades -> about 18 K (input of the
    # phenomenological generator); a normal ferroelectric shifts by well under 1 K.
    frame = curie_weiss_scan(
        2.0e4, 250.0, 250.0, 20.0, t_min_K=200.0, t_max_K=340.0, step_K=1.0,
        frequencies_Hz=[1e2, 1e3, 1e4, 1e5], dispersion_K_per_decade=6.0, noise_rel=1e-3,
        rng=np.random.default_rng(11), as_capacitance=False,
    )
    res = analyse_dielectric(canonical(frame))
    assert res.dispersion_K == pytest.approx(18.0, abs=1.5)
    assert "frequency_dispersion" in {f.code for f in res.flags}
    assert res.transition_hint == "unclear"
    tps = [p.t_peak_K for p in res.peaks]
    assert tps == sorted(tps)  # peak moves up with frequency
    assert res.t_peak_K == pytest.approx(250.0, abs=1.0)  # lowest frequency
    assert list(res.frequencies) == [1e2, 1e3, 1e4, 1e5]


def test_single_frequency_from_kwarg():
    t = np.arange(300.0, 401.0, 1.0)
    t = t[t != 350.0]
    eps = landau_second_order(t, 3300.0, 350.0, 4.0)
    res = analyse_dielectric(pd.DataFrame({"T_K": t, "eps_r": eps}), frequency_Hz=1e3)
    assert res.frequencies == (1e3,)
    assert res.peaks[0].f_Hz == 1e3
    res2 = analyse_dielectric(pd.DataFrame({"T_K": t, "eps_r": eps}))
    assert "frequency_unknown" in {f.code for f in res2.flags}


def test_peak_at_high_edge_no_fit():
    t = np.arange(300.0, 340.0, 1.0)
    eps = landau_second_order(t, 3300.0, 350.0, 0.0)  # all below Tc: eps rises to the top
    res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
    codes = {f.code for f in res.flags}
    assert {"peak_at_edge", "no_peak_in_range"} <= codes
    assert res.t_peak_K is None and res.curie_constant_K is None
    assert res.peaks[0].at_edge == "high"


def test_too_few_points_above_peak():
    t = np.arange(330.0, 357.0, 1.0)
    t = t[t != 350.0]
    eps = landau_second_order(t, 3300.0, 350.0, 0.0)
    res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
    assert "too_few_points_above_peak" in {f.code for f in res.flags}
    assert res.curie_constant_K is None
    assert res.t_peak_K == pytest.approx(350.0, abs=1.0)


def test_negative_curie_constant_flagged():
    # A narrow bump at 300 K on a background that rises with T: above the peak eps' grows,
    # which Curie-Weiss can only describe with C < 0.
    t = np.arange(280.0, 360.0, 1.0)
    eps = 100.0 + 0.5 * (t - 280.0) + 400.0 * np.exp(-(((t - 300.0) / 2.0) ** 2))
    res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
    codes = {f.code for f in res.flags}
    assert "negative_curie_constant" in codes
    assert res.curie_constant_K is None
    assert res.transition_hint == "unclear"


def test_errors_name_the_field():
    frame = pd.DataFrame({"T_K": 300.0 + np.arange(10.0), "f_Hz": 1e3, "C_F": 1e-11, "tan_delta": 0.01})
    with pytest.raises(AnalysisError) as exc:
        analyse_dielectric(frame, thickness_um=100.0)
    assert exc.value.field == "area"
    with pytest.raises(AnalysisError) as exc:
        analyse_dielectric(frame, area_cm2=0.1)
    assert exc.value.field == "thickness"
    with pytest.raises(AnalysisError) as exc:
        analyse_dielectric(frame.drop(columns="T_K"), area_cm2=0.1, thickness_um=100.0)
    assert exc.value.column == "T"
    with pytest.raises(AnalysisError, match="at least 7"):
        analyse_dielectric(frame.iloc[:5], area_cm2=0.1, thickness_um=100.0)
    bad = frame.copy()
    bad.loc[3, "C_F"] = np.nan
    with pytest.raises(AnalysisError) as exc:
        analyse_dielectric(bad, area_cm2=0.1, thickness_um=100.0)
    assert exc.value.column == "C_F" and "row 4" in exc.value.message
    with pytest.raises(AnalysisError):
        analyse_dielectric(pd.DataFrame({"T_K": 300.0 + np.arange(10.0), "V_V": 1.0}))
    with pytest.raises(AnalysisError) as exc:
        analyse_dielectric(frame.assign(T_K=frame["T_K"] - 300.0), area_cm2=0.1, thickness_um=100.0)
    assert exc.value.column == "T_K"


def test_to_dict_contract_keys_and_json():
    t = np.arange(300.0, 401.0, 1.0)
    t = t[t != 350.0]
    res = analyse_dielectric(frame_from_eps(t, landau_second_order(t, 3300.0, 350.0, 4.0), 1e3))
    d = res.to_dict()
    for key in (
        "peaks", "t_peak_K", "eps_peak", "dispersion_K", "curie_constant_K", "t0_K", "eps_inf", "fit_r2",
        "fit_t_min_K", "fit_t_max_K", "landau_slope_ratio", "transition_hint", "frequencies", "points", "flags",
    ):
        assert key in d
    assert "curves" not in d
    assert set(d["peaks"][0]) >= {"f_Hz", "t_peak_K", "eps_peak"}
    json.dumps(d)


def test_round_trip_through_ingest():
    # Generator -> instrument file -> ingest -> conditions -> analysis.
    frame = curie_weiss_scan(
        3.3e3, 122.0, 122.0, 5.0, t_min_K=90.0, t_max_K=200.0, step_K=1.0, frequencies_Hz=[1e3, 1e5],
    )
    raw = to_csv_bytes(frame, metadata={"area": "10 mm^2", "thickness": "0.5 mm"})
    parsed = read_table(raw, filename="RMX-0001_eps.csv")
    cond = parse_conditions({}, parsed.metadata)
    res = analyse_dielectric(parsed.frame, area_cm2=cond.area_cm2, thickness_um=cond.thickness_um)
    assert res.curie_constant_K == pytest.approx(3.3e3, rel=0.02)
    assert res.t_peak_K == pytest.approx(122.0, abs=1.0)


def test_repeated_temperatures_are_averaged():
    # The same sweep twice, with readings +1 % and -1 %: the averages are the model values.
    t = np.arange(300.0, 401.0, 1.0)
    t = t[t != 350.0]
    eps = landau_second_order(t, 3300.0, 350.0, 4.0)
    frame = pd.concat([frame_from_eps(t, eps * 1.01, 1e3), frame_from_eps(t[::-1], eps[::-1] * 0.99, 1e3)])
    res = analyse_dielectric(frame)
    assert "repeated_temperatures" in {f.code for f in res.flags}
    np.testing.assert_allclose(res.curves["frequencies"][0]["eps_r"], eps, rtol=1e-12)
    assert res.curie_constant_K == pytest.approx(3300.0, rel=0.02)


# ---------------------------------------------------------------- loss and relaxors (issue 16)


def test_tan_delta_at_the_peak_and_curie_weiss_at_the_least_lossy_frequency():
    # Curie-Weiss above Tc (Lines and Glass 1977): C 3300 K (KH2PO4-like, memory), T0 = Tc 320 K,
    # eps_inf 6, loss tangent 0.01 (the generator's constant), 1 % noise on both. At 100 Hz a
    # conduction-like loss rises with T (tan delta up to ~1) and adds space-charge eps' of the same
    # size (Maxwell-Wagner; a model written here), which bends the 100 Hz curve; 10 kHz is clean.
    rng = np.random.default_rng(5)
    frame = canonical(curie_weiss_scan(3.3e3, 320.0, 320.0, 6.0, t_min_K=280.0, t_max_K=420.0, step_K=1.0,
                                       frequencies_Hz=[1e2, 1e4], noise_rel=0.01, rng=rng, as_capacitance=False))
    low = frame["f_Hz"] == 1e2
    extra = 40.0 * np.exp(-4000.0 * (1 / frame["T_K"] - 1 / 420.0))  # space charge, activated
    frame.loc[low, "eps_i"] = frame.loc[low, "eps_i"] + extra[low]
    frame.loc[low, "eps_r"] = frame.loc[low, "eps_r"] + extra[low]
    res = analyse_dielectric(frame)
    assert res.cw_frequency_Hz == 1e4
    assert "curie_weiss_frequency" in {f.code for f in res.flags}
    assert res.curie_constant_K == pytest.approx(3300.0, rel=0.05)
    assert res.t0_K == pytest.approx(320.0, abs=1.5)
    peak_10k = [p for p in res.peaks if p.f_Hz == 1e4][0]
    assert peak_10k.tan_delta_peak == pytest.approx(0.01, rel=0.05)  # the model's loss tangent
    d = res.to_dict()
    assert d["peaks"][1]["tan_delta_peak"] == pytest.approx(0.01, rel=0.05)
    assert d["tan_delta_peak"] is not None  # at the lowest frequency, beside t_peak_K


def test_vogel_fulcher_fit_of_a_moving_maximum():
    # Vogel-Fulcher (Cross, Ferroelectrics 76, 241 (1987)): f = f0 exp[-Ea/(kB (Tm - T_VF))].
    # Known answer: Ea/kB = 600 K (4.989 kJ/mol = 600 R / 1000, computed), T_VF 250 K, f0 1e12 Hz.
    # Each frequency gets a Lorentzian-shaped maximum at its Tm, sampled every 0.25 K, 0.01 % noise
    # (the three-point peak refinement turns more noise into scatter of Tm, to which VF is sensitive).
    ea_K, t_vf, f0 = 600.0, 250.0, 1e12
    freqs = [1e2, 1e3, 1e4, 1e5, 1e6]
    t = np.arange(240.0, 340.0, 0.25)
    rng = np.random.default_rng(8)
    rows = []
    for f in freqs:
        tm = t_vf + ea_K / np.log(f0 / f)
        eps = 5.0 + 1000.0 / (1.0 + ((t - tm) / 12.0) ** 2)
        eps = eps * (1 + 1e-4 * rng.standard_normal(t.size))
        rows.append(pd.DataFrame({"T_K": t, "f_Hz": f, "eps_r": eps, "eps_i": 0.05 * eps}))
    res = analyse_dielectric(pd.concat(rows, ignore_index=True))
    assert "frequency_dispersion" in {fl.code for fl in res.flags}
    assert res.vf_ea_kJ_mol == pytest.approx(600 * 8.314462618 / 1000, rel=0.15)
    assert res.vf_t_K == pytest.approx(250.0, abs=5.0)
    assert np.log10(res.vf_f0_Hz) == pytest.approx(12.0, abs=1.0)
    assert res.vf_ea_err_kJ_mol > 0 and res.vf_t_err_K > 0 and res.vf_log10_f0_err > 0
    # noise-free peaks recover the inputs closely
    exact = vogel_fulcher_fit(freqs, [t_vf + ea_K / np.log(f0 / f) for f in freqs])
    assert exact["vf_ea_kJ_mol"] == pytest.approx(600 * 8.314462618 / 1000, rel=1e-4)
    assert exact["vf_t_K"] == pytest.approx(250.0, abs=0.01)


def test_meaningless_curie_weiss_numbers_are_withheld():
    # Issue 16: no Curie-Weiss numbers that mean nothing. Above a peak at 320 K, (a) eps' = -5 +
    # 3000/(T - 290) (a background below zero cannot be: eps_inf >= 1 for any material) and
    # (b) an exponential fall (no 1/(T - T0) form at all) both fit with eps_inf < 0: neither C, T0
    # nor eps_inf is reported, and the flag says why.
    t = np.arange(280.0, 400.0, 1.0)
    for above in (-5 + 3000 / (t - 290), 60 * np.exp(-(t - 320) / 60) + 20):
        top = float(above[t == 320][0])
        eps = np.where(t < 320, np.minimum(50 + 2.0 * (t - 280), 0.999 * top), above)
        res = analyse_dielectric(frame_from_eps(t, eps, 1e3))
        assert res.curie_constant_K is None and res.t0_K is None and res.eps_inf is None
        assert "curie_weiss_withheld" in {f.code for f in res.flags}
        assert res.to_dict()["curie_constant_K"] is None
