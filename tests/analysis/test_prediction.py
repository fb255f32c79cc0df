"""Predictions from the campaign's data (server/analysis/prediction.py): checked against analytic
values and against the scaffold-mean baseline on the invented demo campaign (seed_demo/scenario.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from seed_demo import scenario
from server.analysis import prediction as pr


def _descriptor(c: scenario.CompoundPlan) -> pr.Descriptor:
    """The demo compound as the registry perceives it: one side-chain group per distinct chain, 3 sites each."""
    groups: dict[tuple, int] = {}
    for ch in c.chains:
        key = (ch.kind, ch.carbons, ch.branched_form is not None)
        groups[key] = groups.get(key, 0) + 3
    chains = tuple({"kind": k, "carbons": n, "branched": b, "count": cnt} for (k, n, b), cnt in groups.items())
    return pr.Descriptor(f"C{c.index}", c.bowl.bridge, chains)


@pytest.fixture(scope="module")
def campaign():
    return scenario.build()


def test_expected_improvement_matches_the_closed_form():
    # Jones, Schonlau & Welch (1998) eq. 15 at z = 0: EI = sigma * phi(0) = sigma / sqrt(2 pi).
    assert pr.expected_improvement(10.0, 2.0, 10.0) == pytest.approx(2.0 / math.sqrt(2 * math.pi), rel=1e-12)
    # Far above the best, EI -> mu - f*; far below, EI -> 0; no uncertainty: max(mu - f*, 0).
    assert pr.expected_improvement(30.0, 1.0, 10.0) == pytest.approx(20.0, rel=1e-9)
    assert pr.expected_improvement(0.0, 1.0, 10.0) < 1e-20
    assert pr.expected_improvement(12.0, 0.0, 10.0) == 2.0
    # A value by numerical integration of E[max(Y - f*, 0)], Y ~ N(11, 3^2).
    y = np.linspace(11 - 12 * 3, 11 + 12 * 3, 200001)
    ei = np.trapezoid(np.maximum(y - 10.0, 0) * stats.norm.pdf(y, 11, 3), y)
    assert pr.expected_improvement(11.0, 3.0, 10.0) == pytest.approx(ei, rel=1e-6)


def test_gp_recovers_a_noisy_line_with_honest_intervals():
    # y = 2x + 1 with 3 % noise: the GP's predictions follow the line and the LOO intervals cover ~95 %.
    rng = np.random.default_rng(7)
    x = np.linspace(0, 10, 40)[:, None]
    truth = 2 * x[:, 0] + 20
    y = truth * (1 + rng.normal(0, 0.03, len(truth)))
    gp = pr.fit_gp_regression(x, y)
    mu, sd = gp.predict(np.array([[5.0]]))
    assert mu[0] == pytest.approx(30.0, abs=2 * sd[0])
    loo_mu, loo_sd = gp.loo()
    cover = np.mean(np.abs(loo_mu - y) <= 1.96 * loo_sd)
    assert 0.85 <= cover <= 1.0
    # The noise the GP infers is about the 3 % put in (0.03 x ~30 = ~0.9 in data units).
    assert math.sqrt(gp.sn2) * gp.y_scale == pytest.approx(0.9, rel=0.5)


def test_loo_in_closed_form_equals_refitting_without_the_point():
    # R&W eqs. 5.10-5.12 give the same mean and variance as conditioning on the other n-1 points.
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 5, (15, 2))
    y = np.sin(x[:, 0]) + 0.1 * x[:, 1] + rng.normal(0, 0.05, 15)
    gp = pr.fit_gp_regression(x, y)
    mu, sd = gp.loo()
    i = 4
    keep = np.arange(15) != i
    sub = pr.GPRegressor(gp.x_mean, gp.x_scale, gp.y_mean, gp.y_scale, gp.x[keep], gp.y[keep], gp.ell, gp.sf2, gp.sn2)
    m_i, s_i = sub.predict(x[i:i + 1])
    assert mu[i] == pytest.approx(m_i[0], rel=1e-6)
    assert sd[i] == pytest.approx(s_i[0], rel=1e-6)


def test_demo_campaign_tc_beats_the_scaffold_mean(campaign):
    # The demo's Tc = T_bowl - 9 K x L +- 4 K (seed_demo/scenario.py): chain length carries most of the
    # variance within a bridge, so the GP's leave-one-out error must be well below the scaffold mean's.
    polar = [c for c in campaign.compounds if c.tc_K is not None]
    train = [(_descriptor(c), c.tc_K) for c in polar]
    res = pr.predict_property(train, [], prop="tc", unit="K")
    assert res.enough_data and res.model == "gp"
    assert res.loo_rmse_gp < 0.5 * res.loo_rmse_scaffold_mean
    # The jitter is uniform on +-4 K (sd 2.3 K); an honest model cannot do much better than that.
    assert 1.5 < res.loo_rmse_gp < 8.0
    assert res.loo_coverage_gp >= 0.8


def test_demo_switching_probability_beats_the_bridge_rate(campaign):
    train = [(_descriptor(c), c.polar) for c in campaign.compounds]
    res = pr.predict_switching(train, [])
    assert res.enough_data and res.model == "gp"
    assert res.loo_brier_gp < res.loo_brier_rate


def test_too_few_data_says_so_instead_of_predicting(campaign):
    few = [(_descriptor(c), c.tc_K) for c in campaign.compounds if c.tc_K is not None][:pr.MIN_COMPOUNDS - 1]
    res = pr.predict_property(few, [_descriptor(campaign.compounds[0])], prop="tc", unit="K")
    assert not res.enough_data and res.predictions == () and "at least" in res.message
    one_class = [(_descriptor(c), True) for c in campaign.compounds[:10]]
    assert not pr.predict_switching(one_class, []).enough_data


def test_scaffold_mean_interval_uses_students_t():
    # Two groups, known numbers: means 10 and 20, pooled sd sqrt((2+2)/(6-2)) = 1.
    b = ["A", "A", "A", "B", "B", "B"]
    y = np.array([9.0, 10.0, 11.0, 19.0, 20.0, 21.0])
    sm = pr.fit_scaffold_mean(b, y)
    mu, sd = sm.predict(["A", "C"])
    assert list(mu) == [10.0, 15.0] and sm.pooled_sd == pytest.approx(1.0) and sm.dof == 4
    assert sd[0] == pytest.approx(math.sqrt(1 + 1 / 3))


def test_pr_at_reference_measured_interpolated_or_none():
    L = pr.Loop
    # Within 5 K: the mean of the switching loops there (two specimens), the far loop ignored.
    at = pr.pr_at_reference([L(298.0, True, 4.0), L(302.0, True, 4.4), L(250.0, True, 9.0)], 300.0)
    assert at.how == "measured" and at.value_uC_cm2 == pytest.approx(4.2)
    # Either side: linear interpolation, (300 - 280) / (330 - 280) = 0.4 of the way from 5.0 to 2.5 -> 4.0 (computed).
    at = pr.pr_at_reference([L(280.0, True, 5.0), L(330.0, True, 2.5)], 300.0)
    assert at.how == "interpolated" and at.value_uC_cm2 == pytest.approx(4.0)
    # Only below (above Tc at 300 K nothing switches): no value, never extrapolated.
    assert pr.pr_at_reference([L(250.0, True, 6.0), L(270.0, True, 5.0), L(320.0, False, 0.02)], 300.0).value_uC_cm2 is None
    # A loop between the two that does not switch: the transition may lie between them.
    none = pr.pr_at_reference([L(280.0, True, 5.0), L(305.0, False, 0.1), L(330.0, True, 2.5)], 300.0)
    assert none.value_uC_cm2 is None and "does not switch" in none.reason
    # Too far apart to interpolate.
    assert pr.pr_at_reference([L(200.0, True, 5.0), L(330.0, True, 2.5)], 300.0).value_uC_cm2 is None
    # A loop that does not switch near the temperature gives no Pr (its apparent Pr is not one).
    assert pr.pr_at_reference([L(300.0, False, 0.3)], 300.0).value_uC_cm2 is None


def _with_estimate(code, bridge, carbons, barrier, depth):
    chains = ({"kind": "alkoxy", "carbons": carbons, "branched": False, "count": 6},)
    est = {} if barrier is None else {"barrier_computed_kcal_mol": barrier, "bowl_depth_computed_A": depth}
    return pr.Descriptor(code, bridge, chains, est)


def test_computed_estimates_are_used_where_present_and_only_when_they_help():
    # Invented: the property follows the computed barrier (1.5 K per kcal/mol, 3 % noise), not the chains.
    rng = np.random.default_rng(5)
    barriers = rng.uniform(8.0, 30.0, 14)
    train = [(_with_estimate(f"M{i}", "CH2", int(c), b, 0.8 + 0.01 * b), 300.0 + 1.5 * b * (1 + rng.normal(0, 0.03)))
             for i, (c, b) in enumerate(zip(rng.integers(2, 12, 14), barriers))]
    targets = [_with_estimate("T1", "CH2", 4, 28.0, 1.08), _with_estimate("T2", "CH2", 4, None, None)]
    r = pr.predict_property(train, targets, prop="tc", unit="K")
    assert r.n_with_estimates == 14 and r.estimates_used
    assert r.loo_rmse_with_estimates < 0.5 * r.loo_rmse_without_estimates
    assert "barrier_computed_kcal_mol (GFN2-xTB)" in r.features
    t1, t2 = r.predictions
    assert t1.with_estimates and t1.low < 300 + 1.5 * 28 < t1.high
    assert not t2.with_estimates  # no estimate: the structure-only model, with its wider interval
    assert (t2.high - t2.low) > (t1.high - t1.low)
    # Estimates on too few measured compounds: not used, and the message says how many there are.
    few = [(d if i < 3 else pr.Descriptor(d.code, d.bridge, d.chains), v) for i, (d, v) in enumerate(train)]
    r = pr.predict_property(few, targets, prop="tc", unit="K")
    assert not r.estimates_used and r.n_with_estimates == 3 and "at least" in r.estimates_message
    assert not any(p.with_estimates for p in r.predictions)
