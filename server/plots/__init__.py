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


#: Width of one character of an axis title, in units of the font size: a common approximation for
#: proportional sans-serif text (an average glyph is about 0.5-0.6 em wide); used to keep a rotated
#: y-axis title inside its own panel.
TITLE_EM_PER_CHAR = 0.6
TITLE_FONT_PX = 13  # base_layout's font size


def title_length_px(text: str, *, font_px: float = TITLE_FONT_PX) -> float:
    """Estimated length of an axis title in CSS pixels (``TITLE_EM_PER_CHAR`` per character)."""
    return len(text or "") * TITLE_EM_PER_CHAR * font_px


def stacked_panels(fig: go.Figure, titles: list[str], spans: list[float], *, min_height_px: int = 420) -> go.Figure:
    """Size a figure of vertically stacked panels so that no rotated y-axis title outgrows its panel.

    ``titles`` and ``spans`` run top to bottom: each panel's y title and the fraction of the plot area
    that panel takes (its axis domain length). The figure height becomes the smallest that gives every
    title its length plus a little air, at least ``min_height_px``; y axes get automatic margins and
    a title standoff, so titles clear the tick labels beside them instead of overlapping them.
    """
    margin = fig.layout.margin
    t, b = (margin.t or 0), (margin.b or 0)
    area = max((title_length_px(text) + 2 * TITLE_FONT_PX) / span for text, span in zip(titles, spans))
    fig.update_layout(height=int(max(min_height_px, area + t + b) + 0.5))
    fig.update_yaxes(automargin=True, title_standoff=8)
    return fig


def figure_json(fig: go.Figure) -> str:
    """The figure as JSON safe to place inside a ``<script type="application/json">`` block."""
    return fig.to_json().replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
