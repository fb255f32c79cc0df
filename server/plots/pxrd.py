"""Powder patterns: measured (background removed), simulated from the reference CIF, their difference,
and tick marks at the reference's reflections."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from server.analysis.pxrd import PxrdResult
from server.plots import PALETTE, base_layout


def pxrd_figure(result: PxrdResult, *, title: str | None = None) -> go.Figure:
    """Net measured counts against 2theta; with a reference, the scaled simulation, the difference
    (offset below zero) and one tick per reflection."""
    x, net = result.x, result.net
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=x, y=net, mode="lines", name="measured (background removed)",
                             line=dict(color=PALETTE["black"], width=1)))
    if result.calc is not None:
        top = float(np.max(net)) if net.size else 1.0
        fig.add_trace(go.Scatter(x=x, y=result.calc, mode="lines", name=f"simulated ({result.reference_label})",
                                 line=dict(color=PALETTE["vermillion"], width=1)))
        offset = -0.15 * top
        fig.add_trace(go.Scatter(x=x, y=net - result.calc + offset, mode="lines", name="difference",
                                 line=dict(color=PALETTE["blue"], width=1)))
        xs, ys = [], []
        for t in result.ticks:
            xs += [t, t, None]
            ys += [-0.04 * top, -0.08 * top, None]
        fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="reflections",
                                 line=dict(color=PALETTE["green"], width=1)))
    return base_layout(fig, x_title="2θ (deg)", y_title="intensity (counts)", title=title)
