"""Structure-property scatter with optional least-squares trend lines per group."""

from __future__ import annotations

from typing import Mapping, Optional, Sequence

import numpy as np
import plotly.graph_objects as go

from . import SERIES, base_layout

SYMBOLS = ("circle", "square", "diamond", "triangle-up", "x", "triangle-down", "star", "hexagon")


def trend(xs: Sequence[float], ys: Sequence[float]) -> tuple[float, float, float] | None:
    """Ordinary least-squares line y = a + b x with r^2; None with fewer than three distinct x."""
    x, y = np.asarray(xs, float), np.asarray(ys, float)
    if len(x) < 3 or np.ptp(x) == 0:
        return None
    b, a = np.polyfit(x, y, 1)
    resid = y - (a + b * x)
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(np.sum(resid ** 2)) / ss_tot if ss_tot > 0 else float("nan")
    return float(a), float(b), r2


def explorer_figure(points, *, x_title: str, y_title: str, with_trend: bool = False,
                    colours: Optional[Mapping[str, str]] = None) -> go.Figure:
    """One trace per group (colour and symbol both differ, so it reads without colour too).

    ``colours`` fixes the colour of named groups (verdict groups take their badge colours);
    other groups take the Okabe-Ito series in turn. Points of mixed-chain molecules (``p.mixed``)
    are drawn open, name their chains on hover and stay out of the trend lines.
    """
    fig = go.Figure()
    groups = sorted({p.group for p in points})
    for i, g in enumerate(groups):
        pts = [p for p in points if p.group == g]
        colour, symbol = (colours or {}).get(g, SERIES[i % len(SERIES)]), SYMBOLS[i % len(SYMBOLS)]
        fig.add_trace(go.Scatter(
            x=[p.x for p in pts], y=[p.y for p in pts], mode="markers", name=f"{g} ({len(pts)})",
            marker=dict(color=colour, symbol=[symbol + "-open" if p.mixed else symbol for p in pts],
                        size=10, line=dict(width=1, color="#333")),
            customdata=[[p.code, p.label, p.chains] for p in pts],
            hovertemplate="<b>%{customdata[0]}</b> %{customdata[1]}<br>%{customdata[2]}"
                          "<br>x %{x:.4g}<br>y %{y:.4g}<extra></extra>",
        ))
        pure = [p for p in pts if not p.mixed]
        fit = trend([p.x for p in pure], [p.y for p in pure]) if with_trend else None
        if fit:
            a, b, r2 = fit
            xs = np.linspace(min(p.x for p in pure), max(p.x for p in pure), 20)
            fig.add_trace(go.Scatter(x=xs, y=a + b * xs, mode="lines", line=dict(color=colour, dash="dot"),
                                     name=f"{g}: y = {a:.3g} {'+' if b >= 0 else '−'} {abs(b):.3g} x, r² = {r2:.2f}",
                                     hoverinfo="skip"))
    base_layout(fig, x_title=x_title, y_title=y_title)
    fig.update_layout(meta={"click_to_compound": True}, height=560)
    return fig
