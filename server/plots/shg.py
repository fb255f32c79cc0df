"""SHG runs: the ratio to the reference against temperature, the detection limit, and where the signal vanishes."""

from __future__ import annotations

import plotly.graph_objects as go

from server.analysis.shg import ShgResult
from server.plots import PALETTE, base_layout


def shg_figure(result: ShgResult, *, title: str | None = None) -> go.Figure:
    """Active points filled, silent points open; a dashed line at the detection limit and one at T_vanish."""
    fig = go.Figure()
    pts = result.points
    for active, name, symbol in ((True, "active", "circle"), (False, "below the detection limit", "circle-open")):
        sel = [p for p in pts if p["active"] is active]
        if sel:
            fig.add_trace(go.Scatter(x=[p["T_K"] for p in sel], y=[p["ratio"] for p in sel], mode="markers",
                                     name=name, marker=dict(color=PALETTE["blue"], symbol=symbol, size=8)))
    ts = [p["T_K"] for p in pts]
    fig.add_trace(go.Scatter(x=[min(ts), max(ts)], y=[result.detection_limit] * 2, mode="lines",
                             name=f"detection limit {result.detection_limit:g}",
                             line=dict(color=PALETTE["orange"], dash="dash")))
    if result.t_vanish_K is not None:
        fig.add_trace(go.Scatter(x=[result.t_vanish_K] * 2, y=[0, result.ratio_max], mode="lines",
                                 name=f"vanishes at {result.t_vanish_K:.0f} K",
                                 line=dict(color=PALETTE["vermillion"], dash="dot")))
    return base_layout(fig, x_title="T (K)", y_title=f"SHG / {result.reference_material}", title=title)
