"""Per-compound summary: figures of merit against measurement temperature."""

from __future__ import annotations

from typing import Any, Iterable, Mapping, Optional, Sequence

import plotly.graph_objects as go
from plotly.subplots import make_subplots

from . import PALETTE, SERIES, base_layout


def switching_by_series(series: Sequence[tuple[str, Sequence[Mapping[str, Any]]]],
                        loose: Sequence[Mapping[str, Any]] = ()) -> Optional[go.Figure]:
    """Pr (top) and Ec (bottom) against temperature, one line per temperature series.

    ``series`` are (label, measurement dicts in run order); ``loose`` are loops in no series,
    drawn as unconnected markers: a line through loops of different samples or runs would
    suggest a sweep that was never made. None when there is nothing to draw.
    """
    def pts(rows):
        rows = [r for r in rows if r.get("temperature_K") is not None and r["results"].get("pr_uC_cm2") is not None]
        return ([r["temperature_K"] for r in rows], [r["results"].get("pr_uC_cm2") for r in rows],
                [r["results"].get("ec_kV_cm") for r in rows], [f"#{r['id']}" for r in rows])

    if not series and len([r for r in loose if r.get("temperature_K") is not None]) < 2:
        return None
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08)
    for i, (label, rows) in enumerate(series):
        t, pr, ec, text = pts(rows)
        colour = SERIES[i % len(SERIES)]
        fig.add_trace(go.Scatter(x=t, y=pr, mode="lines+markers", name=label, legendgroup=label, text=text,
                                 line=dict(color=colour),
                                 hovertemplate="T %{x:.1f} K<br>Pr %{y:.3g} µC/cm²<br>%{text}<extra></extra>"),
                      row=1, col=1)
        fig.add_trace(go.Scatter(x=t, y=ec, mode="lines+markers", name=label, legendgroup=label, showlegend=False,
                                 text=text, line=dict(color=colour, dash="dash"), marker=dict(symbol="square"),
                                 hovertemplate="T %{x:.1f} K<br>Ec %{y:.3g} kV/cm<br>%{text}<extra></extra>"),
                      row=2, col=1)
    if loose:
        t, pr, ec, text = pts(sorted(loose, key=lambda r: (r.get("temperature_K") is None, r.get("temperature_K") or 0)))
        fig.add_trace(go.Scatter(x=t, y=pr, mode="markers", name="loops in no series", legendgroup="loose",
                                 text=text, marker=dict(color=PALETTE["black"], symbol="circle-open")), row=1, col=1)
        fig.add_trace(go.Scatter(x=t, y=ec, mode="markers", name="loops in no series", legendgroup="loose",
                                 showlegend=False, text=text,
                                 marker=dict(color=PALETTE["black"], symbol="square-open")), row=2, col=1)
    base_layout(fig, x_title="", y_title="Pr (µC/cm²)")
    fig.update_xaxes(title_text="T (K)", row=2, col=1)
    fig.update_yaxes(title_text="Ec (kV/cm)", row=2, col=1)
    return fig


def transitions_table(rows: Iterable[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Transition temperatures found by dielectric peaks and DSC, for the compound summary; ``err`` is the
    value's standard uncertainty where the analysis gives one (DSC enthalpies), else absent."""
    out: list[dict[str, Any]] = []
    for r in rows:
        if r["kind"] == "dielectric" and r["results"].get("t_peak_K") is not None:
            out.append({"measurement": r["id"], "source": "dielectric peak", "t_K": r["results"]["t_peak_K"],
                        "value": r["results"].get("eps_peak"), "unit": "ε′ peak"})
        if r["kind"] == "dsc":
            for p in r["results"].get("peaks") or []:
                out.append({"measurement": r["id"], "source": f"DSC {p.get('direction', '')}",
                            "t_K": p.get("peak_K"), "value": p.get("dh_J_g"), "err": p.get("dh_err_J_g"),
                            "unit": "J/g"})
    return sorted(out, key=lambda d: (d["t_K"] is None, d["t_K"]))
