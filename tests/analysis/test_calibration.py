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
