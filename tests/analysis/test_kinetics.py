"""Tests of server.analysis.kinetics and server.synth.nmr.

Expected values come from docs/methods.md ("computed" there from the
CODATA 2018 constants and the Eyring / Gutowsky-Holm formulas, independently of this
code), from the literature named beside each check, or from formulas written out here.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

from server.analysis import kinetics as kin
from server.errors import AnalysisError
from server.synth.nmr import rate_table

# CODATA 2018 exact values, typed here from the CODATA table (not imported from the code).
KB = 1.380649e-23
H = 6.62607015e-34
NA = 6.02214076e23
R = KB * NA


# ---------------------------------------------------------------- constants and units


def test_constants_are_codata_2018():
    # CODATA 2018: R = 8.314462618... J/(mol K) (exact, kB N_A)
    assert kin.R_J_MOLK == pytest.approx(8.314462618, rel=1e-10)
    assert kin.KB_J_K == 1.380649e-23
    assert kin.H_J_S == 6.62607015e-34
    assert kin.NA_PER_MOL == 6.02214076e23


def test_calorie_is_thermochemical():
    # 1 cal = 4.184 J exactly (thermochemical calorie)
    assert kin.kcal_to_kJ(1.0) == pytest.approx(4.184, rel=1e-15)
    assert kin.kJ_to_kcal(4.184) == pytest.approx(1.0, rel=1e-15)
    assert kin.kJ_to_kcal(kin.kcal_to_kJ(20.0)) == pytest.approx(20.0, rel=1e-15)


# ---------------------------------------------------------------- Eyring equation


def test_frequency_factor_at_298():
    # kB T/h at 298.15 K = 6.2124e12 1/s (docs/methods.md, computed from CODATA 2018)
    assert kin.eyring_rate_per_s(0.0, 298.15) == pytest.approx(6.2124e12, rel=1e-4)


def test_dg_of_unit_rate():
    # k = 1 1/s at 298.15 K -> dG 73.024 kJ/mol (docs/methods.md, computed)
    assert kin.dg_from_rate_kJ_mol(1.0, 298.15) == pytest.approx(73.024, abs=5e-4)


def test_rate_of_20_kcal_barrier():
    # dG 20 kcal/mol at 298.15 K -> k 0.013588 1/s (docs/methods.md, computed)
    assert kin.eyring_rate_per_s(kin.kcal_to_kJ(20.0), 298.15) == pytest.approx(0.013588, rel=1e-4)


def test_eyring_round_trip_and_kappa():
    k = kin.eyring_rate_per_s(65.0, 250.0)
    assert kin.dg_from_rate_kJ_mol(k, 250.0) == pytest.approx(65.0, rel=1e-12)
    # kappa multiplies the rate (Eyring equation); at fixed k it raises dG by R T ln(1/kappa)
    assert kin.eyring_rate_per_s(65.0, 250.0, kappa=0.5) == pytest.approx(k / 2, rel=1e-12)
    shift = kin.dg_from_rate_kJ_mol(k, 250.0) - kin.dg_from_rate_kJ_mol(k, 250.0, kappa=0.5)
    assert shift == pytest.approx(R * 250.0 * math.log(2) / 1e3, rel=1e-9)


@pytest.mark.parametrize(
    "call, field",
    [
        (lambda: kin.eyring_rate_per_s(50.0, 0.0), "temperature"),
        (lambda: kin.eyring_rate_per_s(50.0, -10.0), "temperature"),
        (lambda: kin.eyring_rate_per_s(float("nan"), 300.0), "dg"),
        (lambda: kin.eyring_rate_per_s(50.0, 300.0, kappa=0.0), "kappa"),
        (lambda: kin.dg_from_rate_kJ_mol(0.0, 300.0), "k"),
        (lambda: kin.dg_from_rate_kJ_mol(-1.0, 300.0), "k"),
        (lambda: kin.dg_from_rate_kJ_mol(1.0, 0.0), "temperature"),
        (lambda: kin.dg_from_rate_kJ_mol(1.0, float("inf")), "temperature"),
        (lambda: kin.dg_from_rate_kJ_mol(1.0, 300.0, kappa=-1), "kappa"),
        (lambda: kin.half_life_s(0.0), "k"),
        (lambda: kin.half_life_s("fast"), "k"),
    ],
)
def test_eyring_error_paths(call, field):
    with pytest.raises(AnalysisError) as err:
        call()
    assert err.value.field == field


def test_half_life_first_order():
    # first-order decay: t1/2 = ln 2 / k (any kinetics textbook)
    assert kin.half_life_s(0.5) == pytest.approx(1.386294361, rel=1e-9)


def test_relaxation_half_life_matches_two_site_ode():
    # Symmetric exchange A <-> B, both rate constants k: integrate the rate equations
    # independently and find when pA - pB has fallen to half its start value.
    k = 3.0

    def rhs(_t, p):
        return [-k * p[0] + k * p[1], k * p[0] - k * p[1]]

    def half(_t, p):
        return (p[0] - p[1]) - 0.5

    half.terminal = True
    sol = integrate.solve_ivp(rhs, (0, 10), [1.0, 0.0], events=half, rtol=1e-10, atol=1e-12)
    t_half = sol.t_events[0][0]
    assert kin.relaxation_half_life_s(k) == pytest.approx(t_half, rel=1e-6)
    # ... and the residence half-life of a molecule in A (no return counted) is ln2/k
    assert kin.half_life_s(k) == pytest.approx(2 * t_half, rel=1e-6)


# ---------------------------------------------------------------- coalescence


def test_coalescence_reference_case():
    # Tc 298.15 K, dnu 100 Hz -> k_c 222.144 1/s, dG 59.629 kJ/mol (docs/methods.md, computed)
    res = kin.coalescence(298.15, 100.0)
    assert res.k_s == pytest.approx(222.144, abs=5e-4)
    assert res.dg_kJ_mol == pytest.approx(59.629, abs=5e-4)
    assert res.dg_kcal_mol == pytest.approx(59.629 / 4.184, abs=2e-4)
    d = res.to_dict()
    for key in ("dg_kcal_mol", "dg_kJ_mol", "t_K", "k_s", "dnu_Hz", "dg_err_kcal_mol"):
        assert key in d
    assert d["t_K"] == 298.15 and d["dnu_Hz"] == 100.0


def test_coalescence_short_form():
    # docs/methods.md: dG_c = R Tc [22.962 + ln(Tc/dnu)] J/mol (Gutowsky-Holm + Eyring)
    tc, dnu = 250.0, 40.0
    expected_J = R * tc * (22.962 + math.log(tc / dnu))
    assert kin.coalescence(tc, dnu).dg_kJ_mol * 1e3 == pytest.approx(expected_J, rel=2e-5)


def test_coalescence_dmf():
    # N,N-dimethylformamide C-N rotation: dG about 21.0 kcal/mol near 120 degC
    # (Rabinovitz and Pines, J. Am. Chem. Soc. 91, 1585 (1969)). The pair below is
    # ILLUSTRATIVE, not quoted from the paper: Tc = 393.15 K (120 degC) and an N-methyl
    # separation of 8 Hz (about 0.13 ppm at 60 MHz). By hand:
    #   k_c = pi * 8 / sqrt(2) = 17.7715 1/s
    #   dG = R Tc [22.9618 + ln(393.15 / 8)] = 8.31446 * 393.15 * (22.9618 + 3.8948)
    #      = 3268.83 * 26.8566 = 87789 J/mol = 20.982 kcal/mol
    res = kin.coalescence(393.15, 8.0)
    assert res.k_s == pytest.approx(17.7715, abs=1e-3)
    assert res.dg_kcal_mol == pytest.approx(20.982, abs=0.1)
    assert abs(res.dg_kcal_mol - 21.0) < 0.5  # lands near the literature value


def test_coalescence_error_propagation_default_and_given():
    # Analytic partial derivatives of dG = R Tc ln(kB Tc sqrt2 / (h pi dnu)):
    #   d dG / d Tc = R [ln(kB Tc sqrt2 / (h pi dnu)) + 1],  d dG / d dnu = -R Tc / dnu,
    # errors taken independent, added in quadrature.
    tc, dnu = 393.15, 8.0

    def expected(s_tc, s_dnu):
        d_tc = R * (math.log(KB * tc * math.sqrt(2) / (H * math.pi * dnu)) + 1.0)
        d_dnu = -R * tc / dnu
        return math.hypot(d_tc * s_tc, d_dnu * s_dnu) / 4184.0

    res = kin.coalescence(tc, dnu)  # defaults: 2 K and 2 % of dnu (common practice)
    assert res.tc_err_K == 2.0 and res.dnu_err_Hz == pytest.approx(0.16)
    assert res.dg_err_kcal_mol == pytest.approx(expected(2.0, 0.16), rel=1e-5)
    res2 = kin.coalescence(tc, dnu, tc_err_K=5.0, dnu_err_Hz=1.0)
    assert res2.dg_err_kcal_mol == pytest.approx(expected(5.0, 1.0), rel=1e-5)
    assert kin.coalescence(tc, dnu, tc_err_K=0.0, dnu_err_Hz=0.0).dg_err_kcal_mol == 0.0


def test_coalescence_celsius_typed_as_kelvin():
    with pytest.raises(AnalysisError) as err:
        kin.coalescence(25.0, 50.0)
    assert err.value.field == "tc"
    assert "Tc = 25 K" in err.value.message
    assert "did you mean 25 degC = 298.15 K?" in err.value.message
    with pytest.raises(AnalysisError) as err:
        kin.coalescence(-20.0, 50.0)
    assert err.value.field == "tc"
    assert "did you mean -20 degC = 253.15 K?" in err.value.message


@pytest.mark.parametrize(
    "tc, dnu, kwargs, field",
    [
        (0.0, 50.0, {}, "tc"),
        (-300.0, 50.0, {}, "tc"),
        (99.0, 50.0, {}, "tc"),
        (650.0, 50.0, {}, "tc"),
        (float("nan"), 50.0, {}, "tc"),
        (300.0, 0.0, {}, "dnu"),
        (300.0, -5.0, {}, "dnu"),
        (300.0, float("inf"), {}, "dnu"),
        (300.0, 50.0, {"tc_err_K": -1.0}, "tc_err"),
        (300.0, 50.0, {"dnu_err_Hz": -1.0}, "dnu_err"),
    ],
)
def test_coalescence_error_paths(tc, dnu, kwargs, field):
    with pytest.raises(AnalysisError) as err:
        kin.coalescence(tc, dnu, **kwargs)
    assert err.value.field == field


def test_coalescence_bounds_accept_edges_and_flag_narrow():
    assert kin.coalescence(100.0, 50.0).tc_K == 100.0
    assert kin.coalescence(600.0, 50.0).tc_K == 600.0
    assert [f.code for f in kin.coalescence(300.0, 3.0).flags] == ["narrow_separation"]
    assert kin.coalescence(300.0, 30.0).flags == ()


# ---------------------------------------------------------------- Eyring fit

T_REF = [300.0, 320.0, 340.0, 360.0]
K_REF = [0.022113, 0.17508, 1.0907, 5.5632]  # docs/methods.md: dH 80 kJ/mol, dS -10 J/(mol K)


def test_synthetic_rates_match_references():
    # dH 80 kJ/mol, dS -10 J/(mol K) -> k 0.022113 / 0.17508 / 1.0907 / 5.5632 1/s
    # (docs/methods.md, computed)
    frame = rate_table(80.0, -10.0, T_REF, noise_rel=0.0)
    assert list(frame.columns) == ["T (K)", "k (1/s)"]
    assert frame["T (K)"].tolist() == T_REF
    np.testing.assert_allclose(frame["k (1/s)"].to_numpy(), K_REF, rtol=5e-5)


def test_eyring_fit_returns_inputs():
    # the rates above (5 significant digits, computed from the Eyring equation) fitted back
    # give dH 80 kJ/mol and dS -10 J/(mol K) (docs/methods.md, Kinetics)
    fit = kin.eyring_fit(T_REF, K_REF)
    assert fit.dh_kcal_mol * 4.184 == pytest.approx(80.0, abs=0.01)
    assert fit.ds_cal_molK * 4.184 == pytest.approx(-10.0, abs=0.05)
    assert fit.dh_kJ_mol == pytest.approx(80.0, abs=0.01)
    # dG(298.15) = dH - T dS = 80 + 2.9815 = 82.9815 kJ/mol (hand)
    assert fit.dg298_kcal_mol == pytest.approx(82.9815 / 4.184, abs=0.005)
    assert fit.r2 == pytest.approx(1.0, abs=1e-8)
    assert fit.points == 4 and fit.t_min_K == 300.0 and fit.t_max_K == 360.0
    # Arrhenius on Eyring data: Ea = dH + R T over the range (Laidler, Chemical Kinetics;
    # memory); with T taken as the harmonic mean of the temperatures, to 0.05 kJ/mol.
    t_h = 4 / sum(1 / t for t in T_REF)
    assert fit.ea_kJ_mol == pytest.approx(80.0 + R * t_h / 1e3, abs=0.05)
    d = fit.to_dict()
    for key in ("dh_kcal_mol", "ds_cal_molK", "dh_err_kcal_mol", "ds_err_cal_molK", "dg298_kcal_mol",
                "dg298_err_kcal_mol", "ea_kJ_mol", "ln_a", "ea_err_kJ_mol", "r2", "points", "t_min_K", "t_max_K"):
        assert key in d
    assert "residuals" not in d
    assert len(fit.residuals) == 4


def test_eyring_fit_errors_match_linregress():
    # Independent route: scipy.stats.linregress on the same ln(k/T) vs 1/T data; the
    # error of dG(298.15) from a regression on x' = 1/T - 1/298.15, whose intercept is
    # ln(k/T) at 298.15 K, so dG_err = R * 298.15 * intercept_stderr.
    rng = np.random.default_rng(7)
    t = np.array([280.0, 295.0, 310.0, 325.0, 340.0, 355.0])
    k = np.array([kin.eyring_rate_per_s(75.0 - ti * 0.015, ti) for ti in t]) * np.exp(0.1 * rng.standard_normal(6))
    fit = kin.eyring_fit(t, k)
    lr = stats.linregress(1 / t, np.log(k / t))
    assert fit.dh_kcal_mol == pytest.approx(-R * lr.slope / 4184, rel=1e-9)
    assert fit.dh_err_kcal_mol == pytest.approx(R * lr.stderr / 4184, rel=1e-6)
    assert fit.ds_err_cal_molK == pytest.approx(R * lr.intercept_stderr / 4.184, rel=1e-6)
    lr0 = stats.linregress(1 / t - 1 / 298.15, np.log(k / t))
    assert fit.dg298_err_kcal_mol == pytest.approx(R * 298.15 * lr0.intercept_stderr / 4184, rel=1e-6)
    assert fit.r2 == pytest.approx(lr.rvalue**2, rel=1e-9)
    lra = stats.linregress(1 / t, np.log(k))
    assert fit.ea_kJ_mol == pytest.approx(-R * lra.slope / 1e3, rel=1e-9)
    assert fit.ea_err_kJ_mol == pytest.approx(R * lra.stderr / 1e3, rel=1e-6)
    assert fit.ln_a == pytest.approx(lra.intercept, rel=1e-9)
    np.testing.assert_allclose(fit.residuals, np.log(k / t) - (lr.intercept + lr.slope / t), atol=1e-10)


def test_eyring_fit_noise_recovers_inputs_within_two_sigma():
    # 5 % log-normal noise, fixed seed: dH and dS land within 2 sigma of the truth
    frame = rate_table(80.0, -10.0, np.arange(280.0, 381.0, 10.0), noise_rel=0.05,
                       rng=np.random.default_rng(2))
    fit = kin.eyring_fit(frame["T (K)"], frame["k (1/s)"])
    assert abs(fit.dh_kJ_mol - 80.0) <= 2 * fit.dh_err_kcal_mol * 4.184
    assert abs(fit.ds_J_molK + 10.0) <= 2 * fit.ds_err_cal_molK * 4.184
    assert fit.dh_err_kcal_mol > 0 and fit.ds_err_cal_molK > 0  # noise gives finite errors


def test_eyring_fit_errors_have_the_right_coverage():
    # If the 1-sigma errors are right, |estimate - truth| / error follows Student t with
    # n - 2 = 9 dof, and P(|t_9| <= 2) = 0.924 (scipy.stats.t). Over 300 noisy data sets
    # the binomial spread of the fraction is about 0.015, so 0.87-0.97 is a wide window
    # that an error too small or too large by ~30 % would leave.
    t = np.arange(280.0, 381.0, 10.0)
    expected = stats.t.cdf(2, 9) - stats.t.cdf(-2, 9)
    assert expected == pytest.approx(0.924, abs=1e-3)
    inside_h = inside_s = 0
    n = 300
    for seed in range(n):
        frame = rate_table(80.0, -10.0, t, noise_rel=0.05, rng=np.random.default_rng(1000 + seed))
        fit = kin.eyring_fit(frame["T (K)"], frame["k (1/s)"])
        inside_h += abs(fit.dh_kJ_mol - 80.0) <= 2 * fit.dh_err_kcal_mol * 4.184
        inside_s += abs(fit.ds_J_molK + 10.0) <= 2 * fit.ds_err_cal_molK * 4.184
    assert 0.87 <= inside_h / n <= 0.97
    assert 0.87 <= inside_s / n <= 0.97


def test_weighted_fit_uses_given_sigmas():
    # Equal relative errors s on k -> sigma(ln(k/T)) = s for each point; weighted OLS
    # then has var(slope) = s^2 / Sxx (unscaled; Montgomery et al., ch. 5, memory).
    t = np.array([300.0, 320.0, 340.0, 360.0])
    k = np.array(K_REF) * np.array([1.03, 0.97, 1.02, 0.99])
    s = 0.05
    fit = kin.eyring_fit(t, k, k_err_per_s=s * k)
    plain = kin.eyring_fit(t, k)
    assert fit.weighted and not plain.weighted
    assert fit.dh_kcal_mol == pytest.approx(plain.dh_kcal_mol, rel=1e-9)
    x = 1 / t
    sxx = np.sum((x - x.mean()) ** 2)
    assert fit.dh_err_kcal_mol == pytest.approx(R * s / math.sqrt(sxx) / 4184, rel=1e-6)


def test_fit_flags():
    narrow = kin.eyring_fit([295.0, 300.0, 305.0], [1.0, 1.5, 2.2])
    codes = {f.code for f in narrow.flags}
    assert "narrow_temperature_range" in codes and "extrapolated_298" not in codes
    wide = kin.eyring_fit([280.0, 300.0, 320.0, 340.0], [0.01, 0.1, 0.8, 5.0])
    assert "narrow_temperature_range" not in {f.code for f in wide.flags}
    hot = kin.eyring_fit([340.0, 360.0, 380.0], [1.0, 5.0, 20.0])
    assert "extrapolated_298" in {f.code for f in hot.flags}
    replicate = kin.eyring_fit([300.0, 300.0, 340.0], [1.0, 1.1, 20.0])
    assert "few_temperatures" in {f.code for f in replicate.flags}
    bent = kin.eyring_fit([280.0, 300.0, 320.0, 340.0, 360.0], [1.0, 30.0, 1.0, 30.0, 1.0])
    assert "poor_linearity" in {f.code for f in bent.flags}


@pytest.mark.parametrize(
    "t, k, message",
    [
        ([300.0, 320.0], [1.0, 2.0], "at least three"),
        ([300.0, 320.0, 340.0], [1.0, 2.0, 0.0], "point 3: k must be positive"),
        ([300.0, 320.0, 340.0], [1.0, -2.0, 3.0], "point 2: k must be positive"),
        ([300.0, 0.0, 340.0], [1.0, 2.0, 3.0], "point 2: T must be above 0 K"),
        ([300.0, 320.0, 340.0], [1.0, float("nan"), 3.0], "point 2: k must be a finite number"),
        ([300.0, float("inf"), 340.0], [1.0, 2.0, 3.0], "point 2: T must be a finite number"),
        ([300.0, 320.0, 340.0], [1.0, "x", 3.0], "point 2: k must be a number"),
        ([300.0, 300.0, 300.0], [1.0, 2.0, 3.0], "same temperature"),
        ([300.0, 320.0, 340.0], [1.0, 2.0], "give one k per T"),
    ],
)
def test_eyring_fit_error_paths(t, k, message):
    with pytest.raises(AnalysisError) as err:
        kin.eyring_fit(t, k)
    assert message in err.value.message


def test_eyring_fit_bad_uncertainties():
    with pytest.raises(AnalysisError, match="point 1: the k uncertainty"):
        kin.eyring_fit(T_REF, K_REF, k_err_per_s=[0.0, 1.0, 1.0, 1.0])
    with pytest.raises(AnalysisError, match="3 rate uncertainties"):
        kin.eyring_fit(T_REF, K_REF, k_err_per_s=[1.0, 1.0, 1.0])


def test_analyse_rate_table():
    frame = pd.DataFrame({"T_K": T_REF, "k_per_s": K_REF})
    fit = kin.analyse_rate_table(frame)
    assert fit.dh_kJ_mol == pytest.approx(80.0, abs=0.01)


def test_analyse_rate_table_names_file_line_and_column():
    frame = pd.DataFrame({"T_K": T_REF, "k_per_s": [0.02, 0.17, -1.0, 5.5]})
    with pytest.raises(AnalysisError) as err:
        kin.analyse_rate_table(frame, first_data_line=4, source_columns={"k_per_s": "k (1/s)", "T_K": "T (K)"})
    assert err.value.line == 6  # third data row, first data row on line 4
    assert err.value.column == "k (1/s)"
    assert "point 3: k must be positive" in err.value.message
    with pytest.raises(AnalysisError, match="missing: k_per_s"):
        kin.analyse_rate_table(pd.DataFrame({"T_K": T_REF}))


# ---------------------------------------------------------------- rate summary


def test_cyclohexane_like_inversion_rate():
    # cyclohexane-like ring inversion barrier 10.8 kcal/mol (fact of the trade; Anet and
    # Bourn, J. Am. Chem. Soc. 89, 760 (1967), memory): k of order 1e5 1/s at 298 K
    summ = kin.rate_summary(10.8, 298.0)
    assert round(math.log10(summ.k_s)) == 5
    # by hand: kB T/h exp(-dG/RT) with the CODATA constants typed above
    k_hand = KB * 298.0 / H * math.exp(-10.8 * 4184 / (R * 298.0))
    assert summ.k_s == pytest.approx(k_hand, rel=1e-12)
    assert summ.half_life_s == pytest.approx(math.log(2) / k_hand, rel=1e-12)
    assert summ.keeps_up is None and summ.frequency_Hz is None


def test_rate_at_temperature_uses_dh_and_ds():
    # Eyring (J. Chem. Phys. 3, 107 (1935)): k = (kB T/h) exp(dS/R) exp(-dH/RT). dH 80 kJ/mol,
    # dS -10 J/(mol K) -> k 0.022113 / 0.17508 / 1.0907 / 5.5632 1/s at 300/320/340/360 K
    # (computed from the formula with CODATA 2018 constants, kept in the team's check values).
    dh, ds = 80 / 4.184, -10 / 4.184  # kcal/mol, cal/(mol K)
    for t, k in ((300, 0.022113), (320, 0.17508), (340, 1.0907), (360, 5.5632)):
        summ = kin.rate_summary(None, t, dh_kcal_mol=dh, ds_cal_molK=ds)
        assert summ.k_s == pytest.approx(k, rel=1e-4)
        assert summ.ds_assumed_zero is False and not summ.flags
        assert summ.dg_kcal_mol == pytest.approx(dh - t * ds / 1000, rel=1e-12)  # dG(T) = dH - T dS
    # Issue 16, defect 5: dS = -3.4 cal/(mol K); using dG(298.15 K) at every T is 28 % low at
    # 250 K and 54 % high at 400 K: factor exp[-dS (T - 298.15)/(R T)] (derived by hand).
    dh, ds = 15.0, -3.4
    dg298 = dh - 298.15 * ds / 1000
    for t, factor in ((250.0, 0.72), (400.0, 1.54)):
        right = kin.rate_summary(dg298, t, dh_kcal_mol=dh, ds_cal_molK=ds).k_s
        flat = kin.rate_summary(dg298, t)
        assert flat.k_s / right == pytest.approx(factor, abs=0.01)
        assert flat.ds_assumed_zero is True
        assert "ds_assumed_zero" in {f.code for f in flat.flags}
        assert flat.to_dict()["ds_assumed_zero"] is True
    # at 298.15 K both agree
    assert kin.rate_summary(dg298, 298.15).k_s == pytest.approx(
        kin.rate_summary(None, 298.15, dh_kcal_mol=dh, ds_cal_molK=ds).k_s, rel=1e-12)
    with pytest.raises(AnalysisError) as err:
        kin.rate_summary(None, 300.0)
    assert err.value.field == "dg"


def test_keeps_up_criterion_k_at_least_twice_f():
    # criterion (common practice): one inversion per field half-period, k >= 2 f
    k = kin.rate_summary(15.0, 300.0).k_s
    assert kin.rate_summary(15.0, 300.0, field_frequency_Hz=k / 2 * 0.99).keeps_up is True
    assert kin.rate_summary(15.0, 300.0, field_frequency_Hz=k / 2 * 1.01).keeps_up is False
    d = kin.rate_summary(15.0, 300.0, field_frequency_Hz=1e3).to_dict()
    assert set(d) >= {"k_s", "half_life_s", "keeps_up", "t_K", "frequency_Hz"}
    assert d["frequency_Hz"] == 1e3 and d["t_K"] == 300.0


@pytest.mark.parametrize(
    "args, field",
    [
        ((-1.0, 300.0, None), "dg"),
        ((float("nan"), 300.0, None), "dg"),
        ((10.0, 0.0, None), "temperature"),
        ((10.0, 300.0, 0.0), "frequency"),
        ((10.0, 300.0, -50.0), "frequency"),
        ((10.0, 300.0, float("nan")), "frequency"),
        ((99.0, 1.0, None), "dg"),  # rate underflows to zero: refused, not reported as 0
    ],
)
def test_rate_summary_error_paths(args, field):
    with pytest.raises(AnalysisError) as err:
        kin.rate_summary(*args)
    assert err.value.field == field


# ---------------------------------------------------------------- imported barriers


def test_imported_barrier_valid():
    b = kin.imported_barrier(18.5, "  GFN2-xTB  ", "  scan of the bowl depth ")
    assert b.dg_kJ_mol == pytest.approx(18.5 * 4.184, rel=1e-15)
    assert b.level_of_theory == "GFN2-xTB" and b.notes == "scan of the bowl depth"
    assert b.to_dict()["dg_kcal_mol"] == 18.5
    assert kin.imported_barrier(0.0, "DFT", None).notes is None
    assert kin.imported_barrier(99.9, "DFT", "").notes is None


@pytest.mark.parametrize(
    "dg, lot, notes, field",
    [
        (-0.1, "DFT", None, "dg"),
        (100.0, "DFT", None, "dg"),
        (float("nan"), "DFT", None, "dg"),
        ("abc", "DFT", None, "dg"),
        (10.0, "", None, "level_of_theory"),
        (10.0, "   ", None, "level_of_theory"),
        (10.0, None, None, "level_of_theory"),
        (10.0, "DFT", 5, "notes"),
    ],
)
def test_imported_barrier_error_paths(dg, lot, notes, field):
    with pytest.raises(AnalysisError) as err:
        kin.imported_barrier(dg, lot, notes)
    assert err.value.field == field


def test_imported_barrier_suggests_kJ():
    with pytest.raises(AnalysisError, match=r"35\.85 kcal/mol"):
        kin.imported_barrier(150.0, "DFT")  # 150 kJ/mol / 4.184 = 35.85 kcal/mol


# ---------------------------------------------------------------- synthetic generator


def test_rate_table_noise_is_reproducible_and_relative():
    t = np.linspace(300, 360, 200)
    a = rate_table(80.0, -10.0, t)
    b = rate_table(80.0, -10.0, t)
    pd.testing.assert_frame_equal(a, b)  # default generator is seeded
    exact = rate_table(80.0, -10.0, t, noise_rel=0.0)
    log_ratio = np.log(a["k (1/s)"] / exact["k (1/s)"])
    assert 0.04 < log_ratio.std() < 0.06  # log-normal noise, sd 0.05 of ln k
    assert a.attrs["metadata"]["dh_kJ_mol"] == "80"


@pytest.mark.parametrize(
    "args, kwargs",
    [
        ((80.0, -10.0, []), {}),
        ((80.0, -10.0, [300.0, 0.0]), {}),
        ((80.0, -10.0, [300.0]), {"noise_rel": -0.1}),
        ((float("nan"), -10.0, [300.0]), {}),
    ],
)
def test_rate_table_error_paths(args, kwargs):
    with pytest.raises(AnalysisError):
        rate_table(*args, **kwargs)


# ---------------------------------------------------------------- coupled coalescence (issue 16)


def test_coupled_ab_coalescence_kurland_rubin_wise():
    # Kurland, Rubin and Wise, J. Chem. Phys. 40, 2426 (1964): k_c = pi sqrt(dnu^2 + 6 J^2)/sqrt(2).
    # dnu 40 Hz, J 16 Hz: sqrt(1600 + 1536) = 56 Hz exactly, so k_c = pi 56 / sqrt(2) = 124.4007 1/s
    # (by hand), 1.4 times the Gutowsky-Holm value; dG = R Tc ln(kB Tc / (h k_c)).
    r = kin.coalescence(298.15, 40.0, j_Hz=16.0)
    assert r.k_s == pytest.approx(math.pi * 56 / math.sqrt(2), rel=1e-12)
    assert r.k_s == pytest.approx(124.4007, rel=1e-6)
    dg_hand = R * 298.15 * math.log(KB * 298.15 / (H * r.k_s)) / 1000
    assert r.dg_kJ_mol == pytest.approx(dg_hand, rel=1e-12)
    assert r.dg_kJ_mol < kin.coalescence(298.15, 40.0).dg_kJ_mol  # neglecting J overestimates dG
    assert "Kurland" in r.model and r.to_dict()["j_Hz"] == 16.0
    # J = 0 is Gutowsky-Holm (Tc 298.15 K, dnu 100 Hz -> k_c 222.144 1/s, dG 59.629 kJ/mol, computed)
    z = kin.coalescence(298.15, 100.0, j_Hz=0.0)
    assert z.k_s == pytest.approx(222.144, rel=1e-5) and z.dg_kJ_mol == pytest.approx(59.629, abs=1e-3)
    # the J uncertainty adds to the error
    assert kin.coalescence(298.15, 40.0, j_Hz=16.0, j_err_Hz=2.0).dg_err_kcal_mol > r.dg_err_kcal_mol
    with pytest.raises(AnalysisError) as err:
        kin.coalescence(298.15, 40.0, j_Hz=-16.0)
    assert err.value.field == "j"
