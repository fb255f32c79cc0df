"""Tests of server.analysis.calibration (OLS line with a 95 % prediction interval).

Hand values below follow the textbook formulas of simple linear regression
(Montgomery, Peck and Vining, Introduction to Linear Regression Analysis, Wiley,
ch. 2) worked out with pencil-and-paper numbers, independently of the code.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from server.analysis.calibration import calibrate
from server.errors import AnalysisError


def test_exact_linear_data_give_exact_line():
    x = [5.0, 8.0, 10.0, 12.0, 15.0]
    y = [1.5 + 0.8 * v for v in x]  # measured = 1.5 + 0.8 computed, exactly
    cal = calibrate(y, x, labels=[f"RMX-000{i}" for i in range(1, 6)])
    assert cal.status == "ok" and cal.n == 5
    assert cal.a_kcal_mol == pytest.approx(1.5, abs=1e-12)
    assert cal.b == pytest.approx(0.8, abs=1e-12)
    assert cal.r2 == pytest.approx(1.0, abs=1e-12)
    assert cal.s_kcal_mol == pytest.approx(0.0, abs=1e-12)
    y0, lo, hi = cal.predict(20.0)
    assert y0 == pytest.approx(17.5, abs=1e-12)
    assert hi - lo == pytest.approx(0.0, abs=1e-10)
    assert cal.flags == ()


def test_small_data_set_against_hand_formula():
    # x = 1, 2, 3, 4; y = 2.1, 3.9, 6.2, 7.8 (worked by hand):
    #   xbar = 2.5, ybar = 5.0, Sxx = 5, Sxy = 4.35 + 0.55 + 0.60 + 4.20 = 9.70
    #   b = 9.70 / 5 = 1.94, a = 5.0 - 1.94 * 2.5 = 0.15
    #   fitted 2.09, 4.03, 5.97, 7.91 -> residuals 0.01, -0.13, 0.23, -0.11
    #   SSE = 0.0001 + 0.0169 + 0.0529 + 0.0121 = 0.0820, s^2 = 0.082 / 2 = 0.041
    #   se(b) = s / sqrt(Sxx); se(a) = s sqrt(1/n + xbar^2 / Sxx)
    #   t(0.975, 2 dof) = 4.3027 (Student t table, e.g. Montgomery et al., appendix)
    #   at x0 = 5: y0 = 0.15 + 9.70 = 9.85,
    #   half-width = t s sqrt(1 + 1/4 + (5 - 2.5)^2 / 5) = 4.3027 * 0.20248 * sqrt(2.5) = 1.3775
    cal = calibrate([2.1, 3.9, 6.2, 7.8], [1.0, 2.0, 3.0, 4.0])
    s = math.sqrt(0.041)
    assert cal.b == pytest.approx(1.94, abs=1e-12)
    assert cal.a_kcal_mol == pytest.approx(0.15, abs=1e-12)
    assert cal.s_kcal_mol == pytest.approx(s, rel=1e-10)
    assert cal.b_err == pytest.approx(s / math.sqrt(5.0), rel=1e-9)
    assert cal.a_err_kcal_mol == pytest.approx(s * math.sqrt(0.25 + 6.25 / 5.0), rel=1e-9)
    # r2 = 1 - SSE/SST, SST = 2.9^2 + 1.1^2 + 1.2^2 + 2.8^2 = 18.9
    assert cal.r2 == pytest.approx(1 - 0.082 / 18.9, rel=1e-10)
    y0, lo, hi = cal.predict(5.0)
    assert y0 == pytest.approx(9.85, abs=1e-12)
    assert (hi - lo) / 2 == pytest.approx(1.3775, abs=2e-4)
    assert y0 - lo == pytest.approx(hi - y0, rel=1e-12)
    # at xbar the band is narrowest: t s sqrt(1 + 1/4) = 4.3027 * 0.20248 * 1.1180 = 0.9740
    _, lo_c, hi_c = cal.predict(2.5)
    assert (hi_c - lo_c) / 2 == pytest.approx(0.9740, abs=2e-4)
    assert [f.code for f in cal.flags] == ["few_pairs"]


def test_band_matches_predict():
    cal = calibrate([2.1, 3.9, 6.2, 7.8, 9.9], [1.0, 2.0, 3.0, 4.0, 5.0])
    grid = np.linspace(0.0, 6.0, 7)
    y, lo, hi = cal.band(grid)
    for i, x0 in enumerate(grid):
        assert (y[i], lo[i], hi[i]) == pytest.approx(cal.predict(x0), rel=1e-12)
    width = hi - lo
    assert np.argmin(width) == 3  # x = 3.0 is the mean of the computed values


def test_insufficient_with_two_pairs():
    cal = calibrate([12.0, 15.0], [10.0, 13.0], labels=["RMX-0001", "RMX-0002"])
    assert cal.status == "insufficient"
    assert "at least 3" in cal.message
    assert cal.a_kcal_mol is None and cal.b is None
    d = cal.to_dict()
    assert d["status"] == "insufficient" and d["n"] == 2 and d["a_kcal_mol"] is None
    assert [p["label"] for p in d["points"]] == ["RMX-0001", "RMX-0002"]
    with pytest.raises(AnalysisError, match="no calibration line"):
        cal.predict(11.0)
    with pytest.raises(AnalysisError):
        cal.band([10.0, 11.0])
    assert calibrate([], []).status == "insufficient"


def test_constant_computed_values_are_insufficient():
    cal = calibrate([10.0, 11.0, 12.0], [9.0, 9.0, 9.0])
    assert cal.status == "insufficient" and "equal" in cal.message


def test_to_dict_keys():
    d = calibrate([10.0, 12.1, 13.9, 16.2], [8.0, 10.0, 12.0, 14.0], labels=list("ABCD")).to_dict()
    for key in ("status", "message", "n", "a_kcal_mol", "b", "a_err_kcal_mol", "b_err", "r2", "s_kcal_mol", "points"):
        assert key in d
    assert d["points"][0]["label"] == "A"
    assert d["points"][0]["residual_kcal_mol"] is not None


@pytest.mark.parametrize(
    "measured, computed, labels, field",
    [
        ([1.0, 2.0, 3.0], [1.0, 2.0], None, None),
        ([1.0, float("nan"), 3.0], [1.0, 2.0, 3.0], None, "measured"),
        ([1.0, 2.0, 3.0], [1.0, 2.0, float("inf")], None, "computed"),
        ([1.0, "x", 3.0], [1.0, 2.0, 3.0], None, "measured"),
        ([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], ["a", "b"], "labels"),
    ],
)
def test_error_paths(measured, computed, labels, field):
    with pytest.raises(AnalysisError) as err:
        calibrate(measured, computed, labels)
    assert err.value.field == field


def test_predict_rejects_non_finite():
    cal = calibrate([2.1, 3.9, 6.2, 7.8], [1.0, 2.0, 3.0, 4.0])
    with pytest.raises(AnalysisError):
        cal.predict(float("nan"))
    with pytest.raises(AnalysisError):
        cal.band([1.0, float("inf")])


# ----------------------------------------------------------------------------- rules (issue 16, item 9)

from server.analysis.calibration import (INTERVAL_LIMIT_KCAL, CalibrationPair,  # noqa: E402
                                         calibrate_pairs)


def _pairs(rng, bridge, a, b, xs, noise=0.25):
    """Pairs on measured = a + b computed with Gaussian noise (kcal/mol): generated, known line."""
    return [CalibrationPair(f"{bridge}-{i}", a + b * x + noise * rng.standard_normal(), x, bridge=bridge)
            for i, x in enumerate(xs)]


def test_planar_minima_are_left_out_of_the_line():
    # The reproduced case: four pairs, two of them collapsed to planar (computed 0 and 0.07 kcal/mol). With
    # them, the line is set by two points at the origin; without them, too few pairs remain for a line.
    pairs = [CalibrationPair("A", 9.8, 8.0), CalibrationPair("B", 12.1, 10.5),
             CalibrationPair("C", 15.2, 0.0, planar=True), CalibrationPair("D", 16.0, 0.07)]
    naive = calibrate([p.measured_kcal_mol for p in pairs], [p.computed_kcal_mol for p in pairs])
    assert naive.ok and naive.b < 0  # the failed computations turn the slope over
    s = calibrate_pairs(pairs)
    assert [p.label for p in s.excluded] == ["C", "D"]
    assert s.pooled.status == "insufficient" and s.pooled.n == 2
    assert "planar_excluded" in {f.code for f in s.pooled.flags}
    assert s.predict(9.0)["shown"] is False
    assert "planar" in s.predict(0.05)["reason"]


def test_a_bridge_type_with_five_pairs_gets_its_own_line():
    # Two generated families: CH2-bridged bowls on measured = 2.0 + 0.90 computed, S-bridged ones on
    # measured = 6.0 + 0.60 computed. Six CH2 pairs (>= 5) get their own line; three S pairs use the pooled one.
    rng = np.random.default_rng(4)
    ch2 = _pairs(rng, "CH2", 2.0, 0.90, [8.0, 9.5, 11.0, 12.5, 14.0, 15.5])
    s_pairs = _pairs(rng, "S", 6.0, 0.60, [7.0, 10.0, 13.0])
    s = calibrate_pairs(ch2 + s_pairs)
    assert set(s.by_bridge) == {"CH2"}
    cal = s.by_bridge["CH2"]
    assert abs(cal.b - 0.90) < 3 * cal.b_err and abs(cal.a_kcal_mol - 2.0) < 3 * cal.a_err_kcal_mol
    assert s.line_for("CH2")[1] == "bridge CH2" and s.line_for("S")[1] == "pooled"
    p = s.predict(12.0, "CH2")
    assert p["shown"] and p["line"] == "bridge CH2"
    assert p["lower"] < 2.0 + 0.9 * 12.0 < p["upper"]
    assert p["upper"] - p["lower"] <= INTERVAL_LIMIT_KCAL


def test_no_calibrated_value_with_an_interval_wider_than_the_limit():
    # Three noisy pairs (1 dof, t = 12.7): the 95 % prediction interval is far wider than 3 kcal/mol.
    rng = np.random.default_rng(9)
    s = calibrate_pairs(_pairs(rng, "CH2", 2.0, 0.9, [8.0, 11.0, 14.0], noise=0.4))
    assert s.pooled.ok
    y, lo, hi = s.pooled.predict(11.0)
    assert hi - lo > INTERVAL_LIMIT_KCAL
    p = s.predict(11.0, "CH2")
    assert p["shown"] is False and p["calibrated"] is None and "wider than" in p["reason"]
