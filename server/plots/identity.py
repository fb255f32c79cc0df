"""Figures of identity evidence: an HRMS spectrum with the calculated isotope cluster overlaid."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from server.analysis.hrms import HrmsResult
from server.plots import PALETTE, base_layout


def _sticks(x, y):
    """Vertical lines from zero to each (x, y), as one trace with gaps."""
    xs, ys = [], []
    for a, b in zip(x, y):
        xs += [a, a, None]
        ys += [0.0, b, None]
    return xs, ys


def hrms_figure(result: HrmsResult, frame: pd.DataFrame, *, title: str | None = None) -> go.Figure:
    """The observed spectrum (line for a profile, sticks for a peak list), relative to its strongest point
    in the cluster window, with the calculated cluster drawn as sticks scaled to 100 % at its strongest peak."""
    mz = frame["mz"].to_numpy(dtype=float)
    y = frame["intensity"].to_numpy(dtype=float)
    order = np.argsort(mz)
    mz, y = mz[order], y[order]
    if result.cluster:
        lo, hi = result.cluster[0].calc_mz - 3.0, result.cluster[-1].calc_mz + 3.0
        keep = (mz >= lo) & (mz <= hi)
        if keep.sum() >= 2:
            mz, y = mz[keep], y[keep]
    scale = 100.0 / float(y.max()) if y.size and y.max() > 0 else 1.0
    fig = go.Figure()
    if result.centroided:
        xs, ys = _sticks(mz, y * scale)
        fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="observed", line=dict(color=PALETTE["black"])))
    else:
        fig.add_trace(go.Scatter(x=mz, y=y * scale, mode="lines", name="observed", line=dict(color=PALETTE["black"])))
    xs, ys = _sticks([c.calc_mz for c in result.cluster], [c.calc_rel_pct for c in result.cluster])
    fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines+markers", name=f"calculated {result.ion} ({result.ion_formula})",
                             line=dict(color=PALETTE["vermillion"], width=2), marker=dict(size=4)))
    return base_layout(fig, x_title="m/z", y_title="relative intensity (%)", title=title)
