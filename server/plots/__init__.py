"""Plotly figure builders, server-side, from pandas frames and analysis results.

Conventions: every axis title names the quantity and its unit ("E (kV/cm)");
colours come from :data:`PALETTE`, the Okabe-Ito colour-blind-safe set
(Okabe and Ito, "Color Universal Design", 2008), never from a product's scheme.
Figures are returned as ``plotly.graph_objects.Figure``; the web layer serialises them.
"""

from __future__ import annotations

import plotly.graph_objects as go

from ..palette import OKABE_ITO

PALETTE = OKABE_ITO
SERIES = [PALETTE[k] for k in ("blue", "vermillion", "green", "orange", "purple", "sky", "yellow", "black")]


def base_layout(fig: go.Figure, *, x_title: str, y_title: str, title: str | None = None) -> go.Figure:
    """Apply the house layout: titled axes, light grid, legend on top, compact margins."""
    fig.update_layout(
        title=title,
        template="simple_white",
        margin=dict(l=60, r=20, t=40 if title else 20, b=50),
        legend=dict(orientation="h", yanchor="bottom", y=1.02, xanchor="left", x=0),
        font=dict(family="system-ui, sans-serif", size=13),
        colorway=SERIES,
    )
    fig.update_xaxes(title_text=x_title, showgrid=True, gridcolor="#e5e5e5", zeroline=True, zerolinecolor="#bbbbbb")
    fig.update_yaxes(title_text=y_title, showgrid=True, gridcolor="#e5e5e5", zeroline=True, zerolinecolor="#bbbbbb")
    return fig


def figure_json(fig: go.Figure) -> str:
    """The figure as JSON safe to place inside a ``<script type="application/json">`` block."""
    return fig.to_json().replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
