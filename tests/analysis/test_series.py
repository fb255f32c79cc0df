"""Pr(T), Ec(T) and Ec(f) across a series, against the analytic models they describe."""

from __future__ import annotations

import numpy as np
import pytest

from server.analysis.series import combine_tc, fit_ec_trend, fit_pr_temperature


def landau_series(tc_K, beta, a, temps, rng, rel_noise=0.03, floor_uC_cm2=0.01):
    # Landau mean-field order parameter below a continuous transition, Pr = A (Tc - T)^beta with
    # beta = 1/2 (Lines and Glass 1977, Principles and Applications of Ferroelectrics, ch. 3);
    # zero above Tc. Noise: 3 % of the value plus a small floor, as loops give near Tc.
    pr = a * np.clip(tc_K - temps, 0, None) ** beta
    return np.abs(pr * (1 + rel_noise * rng.standard_normal(temps.size)) + floor_uC_cm2 * rng.standard_normal(temps.size))


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_power_law_recovers_tc_and_beta_within_their_errors(seed):
    rng = np.random.default_rng(seed)
    temps = np.concatenate([np.arange(290.0, 340.0, 4.0), [344.0, 348.0, 352.0]])
    pr = landau_series(341.0, 0.5, 0.15, temps, rng)
    fit = fit_pr_temperature(temps, pr)
    assert fit.tc_err_K and fit.beta_err
    # The model's own parameters (Tc = 341 K, beta = 1/2, Lines and Glass 1977 ch. 3) within 3 standard errors.
    assert abs(fit.tc_K - 341.0) < 3 * fit.tc_err_K
    assert abs(fit.beta - 0.5) < 3 * fit.beta_err
    assert fit.tc_err_K < 5 and fit.beta_err < 0.2
    assert not fit.first_order and not fit.apparent
    assert fit.tc_bracket_K == (338.0, 344.0)


def test_heating_order_does_not_matter():
    rng = np.random.default_rng(7)
    temps = np.arange(300.0, 350.0, 3.0)
    pr = landau_series(330.0, 0.5, 0.2, temps, rng)
    a = fit_pr_temperature(temps, pr)
    b = fit_pr_temperature(temps[::-1], pr[::-1])
    assert a.tc_K == pytest.approx(b.tc_K) and a.beta == pytest.approx(b.beta)


def test_a_jump_to_zero_is_a_first_order_signature():
    rng = np.random.default_rng(4)
    # A first-order transition: Pr stays near 70 % of its low-temperature value up to Tc, then drops to zero
    # (Lines and Glass 1977 ch. 3, first-order Landau-Devonshire case: a discontinuous order parameter).
    temps = np.arange(300.0, 352.0, 4.0)
    pr = np.where(temps < 330.0, 2.0 * (1 - 0.3 * (temps - 300.0) / 30.0), 0.0)
    pr = np.abs(pr * (1 + 0.03 * rng.standard_normal(temps.size)) + 0.01 * rng.standard_normal(temps.size))
    fit = fit_pr_temperature(temps, pr)
    assert fit.first_order and fit.apparent
    assert (fit.jump_from_K, fit.jump_to_K) == (328.0, 332.0)
    assert "first_order_jump" in {f.code for f in fit.flags}


def test_too_few_switching_loops_give_no_fit():
    fit = fit_pr_temperature([300.0, 310.0, 320.0, 340.0], [1.0, 0.8, 0.5, 0.0])
    assert fit.tc_K is None and fit.beta is None
    assert "too_few_points" in {f.code for f in fit.flags}
    assert fit.tc_bracket_K == (320.0, 340.0)


def test_no_switching_at_all():
    fit = fit_pr_temperature([300.0, 310.0], [0.0, 0.0])
    assert fit.tc_K is None and fit.flags[0].code == "no_switching"


def test_ec_of_frequency_power_law_exponent():
    rng = np.random.default_rng(5)
    f = np.array([1, 3, 10, 30, 100, 300, 1000.0])
    # Ec = C f^alpha with alpha = 0.1, an analytic power law; 2 % noise.
    ec = 20.0 * f ** 0.1 * (1 + 0.02 * rng.standard_normal(f.size))
    trend = fit_ec_trend(f, ec, variable="frequency")
    assert abs(trend.slope - 0.1) < 3 * trend.slope_err


def test_ec_of_temperature_line_and_too_few_points():
    t = np.array([300.0, 310.0, 320.0, 330.0, 340.0])
    ec = 50.0 - 0.8 * (t - 300.0)  # a straight line, slope -0.8 kV/cm/K, exactly
    trend = fit_ec_trend(t, ec, variable="temperature")
    assert trend.slope == pytest.approx(-0.8)
    assert fit_ec_trend([300.0, 310.0], [1.0, 2.0], variable="temperature").slope is None


def test_combined_tc_is_the_weighted_mean():
    rng = np.random.default_rng(9)
    temps = np.arange(290.0, 352.0, 4.0)
    fits = [fit_pr_temperature(temps, landau_series(341.0, 0.5, 0.15, temps, rng)) for _ in range(2)]
    est = combine_tc(fits)
    w = [1 / f.tc_err_K ** 2 for f in fits]
    # Inverse-variance weighting (Bevington and Robinson 2003, eq. 4.17-4.19).
    assert est["tc_K"] == pytest.approx(sum(wi * f.tc_K for wi, f in zip(w, fits)) / sum(w))
    assert est["tc_err_K"] == pytest.approx(sum(w) ** -0.5)
    assert combine_tc([]) is None
