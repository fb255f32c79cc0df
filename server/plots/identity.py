"""Figures of identity evidence: an HRMS spectrum with the calculated isotope cluster overlaid."""

from __future__ import annotations

import re

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


def _envelope(x: np.ndarray, y: np.ndarray, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """At most ``2 * bins`` points keeping each bin's lowest and highest value (lines keep their tops)."""
    if x.size <= 2 * bins:
        return x, y
    edges = np.linspace(0, x.size, bins + 1).astype(int)
    xs, ys = [], []
    for a, b in zip(edges, edges[1:]):
        seg = y[a:b]
        lo, hi = a + int(np.argmin(seg)), a + int(np.argmax(seg))
        for i in sorted((lo, hi)):
            xs.append(x[i])
            ys.append(y[i])
    return np.asarray(xs), np.asarray(ys)


def nmr_spectrum_figure(ppm: np.ndarray, y: np.ndarray, result, *, title: str | None = None,
                        bins: int = 2500) -> go.Figure:
    """The spectrum on a reversed chemical-shift axis (high ppm on the left, as chemists print it), relative
    to its tallest point, with each signal's integration region as a bar under it labelled with its
    integral (n H when a structure scaled it)."""
    order = np.argsort(ppm)[::-1]
    x, yy = np.asarray(ppm, dtype=float)[order], np.asarray(y, dtype=float)[order]
    top = float(yy.max()) or 1.0
    ex, ey = _envelope(x, yy * 100.0 / top, bins)
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=ex, y=ey, mode="lines", name="spectrum", line=dict(color=PALETTE["black"], width=1)))
    xs, ys, text_x, text_y, text = [], [], [], [], []
    span = float(x.max() - x.min()) or 1.0
    for s in result.signals:
        if s.assigned:
            continue
        xs += [s.to_ppm, s.from_ppm, None]
        ys += [-4.0, -4.0, None]
        # a label close to the previous one (within 8 % of the axis) drops one row, so they never overprint
        crowded = bool(text_x) and abs(text_x[-1] - s.shift_ppm) < 0.08 * span and text_y[-1] == -9.0
        text_x.append(s.shift_ppm)
        text_y.append(-16.0 if crowded else -9.0)
        text.append(f"{s.n_H:.1f} H" if s.n_H is not None else f"{100 * s.integral_rel:.1f} %")
    if xs:
        fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="integrated signals",
                                 line=dict(color=PALETTE["vermillion"], width=3)))
        fig.add_trace(go.Scatter(x=text_x, y=text_y, mode="text", text=text, name="integrals",
                                 showlegend=False, textfont=dict(color=PALETTE["vermillion"], size=10)))
    mass, element = re.fullmatch(r"\^?(\d*)(.*)", (result.nucleus or "1H").strip()).groups()
    nucleus = mass.translate(str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")) + element
    fig = base_layout(fig, x_title=f"δ({nucleus}) (ppm)", y_title="intensity (% of tallest)", title=title)
    fig.update_xaxes(autorange="reversed")
    fig.update_yaxes(range=[-25.0, 105.0])  # room under the baseline for the integrals
    return fig
