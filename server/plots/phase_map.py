"""The phase map of a compound: a temperature axis with each phase interval, what identifies it, and where the
switching measurements fall."""

from __future__ import annotations

import plotly.graph_objects as go

from server.analysis.identification import Fact, PhaseIdentification
from server.analysis.phases import PhaseModel
from server.plots import PALETTE, SERIES, base_layout

#: One row per kind of fact, bottom to top.
_ROWS = ("switching", "shg", "saxs", "pxrd", "crystal")
_ROW_NAMES = {"switching": "switching", "shg": "SHG", "saxs": "X-ray scattering", "pxrd": "powder pattern",
              "crystal": "CIF"}


def phase_map_figure(ident: PhaseIdentification, model: PhaseModel, facts: list[Fact], *,
                     title: str | None = None) -> go.Figure:
    """Phase intervals as filled bands (named by identity), transitions as vertical lines, and one marker row per
    kind of evidence at its temperature (SHG open when silent, a powder pattern open unless it matches)."""
    fig = go.Figure()
    top = len(_ROWS)
    for i, ph in enumerate(ident.phases):
        if ph.t_from_K is None or ph.t_to_K is None:
            continue
        name = f"{ph.t_from_K:.0f}-{ph.t_to_K:.0f} K: {ph.identity or 'not identified'}"
        if ph.conflicts:
            name += f" ({len(ph.conflicts)} conflict{'s' if len(ph.conflicts) > 1 else ''})"
        fig.add_trace(go.Scatter(x=[ph.t_from_K, ph.t_to_K, ph.t_to_K, ph.t_from_K, ph.t_from_K],
                                 y=[-0.5, -0.5, top - 0.5, top - 0.5, -0.5], mode="lines", fill="toself",
                                 opacity=0.25, line=dict(color=SERIES[i % len(SERIES)], width=0), name=name))
    for tr in model.transitions:
        fig.add_trace(go.Scatter(x=[tr.t_K, tr.t_K], y=[-0.5, top - 0.5], mode="lines",
                                 line=dict(color=PALETTE["black"], dash="dash", width=1),
                                 name=f"transition {tr.t_K:.0f} K", showlegend=True))
    for row, kind in enumerate(_ROWS):
        pts = [f for f in facts if f.kind == kind and f.t_K is not None]
        if not pts:
            continue
        positive = [f for f in pts if _positive(f)]
        negative = [f for f in pts if not _positive(f)]
        for group, symbol, suffix in ((positive, "circle", ""), (negative, "circle-open", " (negative)")):
            if group:
                fig.add_trace(go.Scatter(x=[f.t_K for f in group], y=[row] * len(group), mode="markers",
                                         name=_ROW_NAMES[kind] + suffix,
                                         marker=dict(symbol=symbol, size=9, color=PALETTE["vermillion"] if
                                                     kind == "switching" else PALETTE["blue"])))
    fig = base_layout(fig, x_title="T (K)", y_title="evidence", title=title)
    fig.update_yaxes(tickmode="array", tickvals=list(range(top)), ticktext=[_ROW_NAMES[k] for k in _ROWS],
                     range=[-0.6, top - 0.4])
    return fig


def _positive(f: Fact) -> bool:
    if f.kind == "shg":
        return bool(f.details.get("active"))
    if f.kind == "pxrd":
        return f.details.get("verdict") == "matches"
    if f.kind == "saxs":
        return f.details.get("lattice") not in (None, "", "undetermined")
    return True
