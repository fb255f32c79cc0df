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
