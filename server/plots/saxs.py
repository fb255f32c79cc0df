"""SAXS/WAXS curves: log intensity against q, with the indexed reflections marked and the wide-angle spacings."""

from __future__ import annotations

import math

import numpy as np
import plotly.graph_objects as go

from server.analysis.saxs import SaxsResult
from server.plots import PALETTE, base_layout


def saxs_figure(result: SaxsResult, q: np.ndarray, intensity: np.ndarray, *, title: str | None = None) -> go.Figure:
    """I(q) on a log axis; one marker per indexed peak (their hk in the legend), and the stacking and halo."""
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=q, y=intensity, mode="lines", name="measured", line=dict(color=PALETTE["black"], width=1)))
    if result.indexed_peaks:
        fig.add_trace(go.Scatter(x=[p["q_per_nm"] for p in result.indexed_peaks],
                                 y=[p["intensity"] for p in result.indexed_peaks], mode="markers",
                                 name=f"{result.lattice} lattice ({', '.join(p['hk'] for p in result.indexed_peaks)})",
                                 marker=dict(color=PALETTE["vermillion"], size=7)))
    wide = [(v, name) for v, name in ((result.stacking_A, "π-stacking"), (result.chain_halo_A, "chain halo")) if v]
    if wide:
        qs = [2 * math.pi / (v / 10.0) for v, _ in wide]
        ys = [float(np.interp(x, q, intensity)) for x in qs]
        fig.add_trace(go.Scatter(x=qs, y=ys, mode="markers",
                                 name="wide angles: " + ", ".join(f"{n} {v:.2f} Å" for v, n in wide),
                                 marker=dict(color=PALETTE["blue"], size=7, symbol="diamond")))
    fig = base_layout(fig, x_title="q (1/nm)", y_title="intensity (counts)", title=title)
    fig.update_yaxes(type="log")
    return fig
