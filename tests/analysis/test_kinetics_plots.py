"""Structure of the kinetics figures: axis titles with units, traces carry the data."""

from __future__ import annotations

import numpy as np
import pytest

from server.analysis.calibration import calibrate
from server.analysis.kinetics import eyring_fit
from server.plots.kinetics import calibration_figure, eyring_figure

T = np.array([300.0, 320.0, 340.0, 360.0])
K = np.array([0.022113, 0.17508, 1.0907, 5.5632]) * np.array([1.02, 0.98, 1.01, 0.99])


def test_eyring_figure_axes_and_data():
    fit = eyring_fit(T, K)
    fig = eyring_figure(fit, title="RMX-0001 in toluene-d8")
    assert fig.layout.xaxis2.title.text == "1000/T (1/K)"
    assert fig.layout.yaxis.title.text == "ln(k/T) (ln(s^-1 K^-1))"
    assert "residual" in fig.layout.yaxis2.title.text
    assert fig.layout.title.text == "RMX-0001 in toluene-d8"
    points, line, resid = fig.data[0], fig.data[1], fig.data[2]
    np.testing.assert_allclose(points.x, 1000.0 / T)
    np.testing.assert_allclose(points.y, np.log(K / T))
    np.testing.assert_allclose(resid.y, fit.residuals)
    assert resid.yaxis == "y2"
    # the line passes through the least-squares fit: check one end against the points' fit
    slope, intercept = np.polyfit(1 / T, np.log(K / T), 1)
    assert line.y[0] == pytest.approx(intercept + slope * line.x[0] / 1000.0, rel=1e-9)


def test_calibration_figure_with_band():
    cal = calibrate([10.0, 12.1, 13.9, 16.2, 17.8], [8.0, 10.0, 12.0, 14.0, 16.0])
    labels = [f"RMX-000{i}" for i in range(1, 6)]
    fig = calibration_figure(cal, labels)
    assert fig.layout.xaxis.title.text == "computed barrier (kcal/mol)"
    assert fig.layout.yaxis.title.text == "measured barrier (kcal/mol)"
    band, line, pts = fig.data
    assert band.fill == "toself"
    assert list(pts.text) == labels
    np.testing.assert_allclose(pts.y, cal.measured_kcal_mol)
    # band edges agree with predict() at the first grid point
    y0, lo0, hi0 = cal.predict(line.x[0])
    assert line.y[0] == pytest.approx(y0)
    assert band.y[0] == pytest.approx(hi0)
    assert band.y[-1] == pytest.approx(lo0)


def test_calibration_figure_insufficient_shows_message():
    cal = calibrate([12.0, 15.0], [10.0, 13.0])
    fig = calibration_figure(cal, ["RMX-0001", "RMX-0002"])
    assert len(fig.data) == 1
    assert fig.layout.annotations[0].text == cal.message
