"""Figures for permittivity against temperature: eps' and tan delta per frequency, 1/eps' with Curie-Weiss."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from server.analysis.dielectric import DielectricResult
from server.plots import PALETTE, SERIES, base_layout, stacked_panels

X_T = "T (K)"
Y_EPS = "ε' (relative permittivity, 1)"
Y_TAN = "tan δ = ε''/ε' (1)"
Y_INV = "1/ε' (1)"


def frequency_label(f_Hz: float | None) -> str:
    """'1 kHz', '100 Hz', '1.5 MHz'; 'f not given' for None."""
    if f_Hz is None:
        return "f not given"
    for scale, unit in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if f_Hz >= scale:
            return f"{f_Hz / scale:g} {unit}"
    return f"{f_Hz:g} Hz"


def permittivity_figure(result: DielectricResult, *, title: str | None = None) -> go.Figure:
    """eps' against T per frequency with peak markers, tan delta(T) if the loss was measured (log axis),
    and 1/eps' with the Curie-Weiss fit (at ``cw_frequency_Hz``).

    Parameters
    ----------
    result : DielectricResult
        From :func:`server.analysis.dielectric.analyse_dielectric` (needs ``curves``).
    title : str, optional
        Figure title.
    """
    if result.curves is None:
        raise ValueError("the result carries no curves; analyse the file again to plot it")
    per_f = result.curves["frequencies"]
    has_loss = any(c["eps_i"] is not None for c in per_f)
    rows = 3 if has_loss else 2
    heights = [0.4, 0.3, 0.3] if has_loss else [0.6, 0.4]
    fig = make_subplots(rows=rows, cols=1, shared_xaxes=True, row_heights=heights, vertical_spacing=0.06)
    inv_row = rows
    for k, c in enumerate(per_f):
        colour = SERIES[k % len(SERIES)]
        label = frequency_label(c["f_Hz"])
        fig.add_trace(
            go.Scatter(
                x=c["t_K"], y=c["eps_r"], mode="lines+markers", name=label, legendgroup=label,
                line=dict(color=colour), marker=dict(size=4, color=colour),
                hovertemplate=f"{label}<br>T = %{{x:.2f}} K<br>ε' = %{{y:.4g}}<extra></extra>",
            ),
            row=1, col=1,
        )
        peak = c["peak"]
        if peak.t_peak_K is not None:
            fig.add_trace(
                go.Scatter(
                    x=[peak.t_peak_K], y=[peak.eps_peak], mode="markers", name=f"peak {label}",
                    legendgroup=label, showlegend=False,
                    marker=dict(symbol="diamond-open", size=11, color=colour, line=dict(width=2)),
                    hovertemplate=f"peak at {label}<br>T = %{{x:.2f}} K<br>ε' = %{{y:.4g}}<extra></extra>",
                ),
                row=1, col=1,
            )
        if has_loss and c["eps_i"] is not None:
            fig.add_trace(
                go.Scatter(
                    x=c["t_K"], y=np.asarray(c["eps_i"]) / np.asarray(c["eps_r"]), mode="lines",
                    name=f"tan δ {label}", legendgroup=label, showlegend=False, line=dict(color=colour, dash="dot"),
                    hovertemplate=f"{label}<br>T = %{{x:.2f}} K<br>tan δ = %{{y:.3g}}<extra></extra>",
                ),
                row=2, col=1,
            )
        fig.add_trace(
            go.Scatter(
                x=c["t_K"], y=1.0 / np.asarray(c["eps_r"]), mode="markers", name=f"1/ε' {label}",
                legendgroup=label, showlegend=False, marker=dict(size=4, color=colour),
                hovertemplate=f"{label}<br>T = %{{x:.2f}} K<br>1/ε' = %{{y:.4g}}<extra></extra>",
            ),
            row=inv_row, col=1,
        )
    cw = result.curves.get("curie_weiss")
    if cw is not None:
        name = (
            f"Curie-Weiss: C = {result.curie_constant_K:.3g} K, T0 = {result.t0_K:.1f} K, "
            f"ε∞ = {result.eps_inf:.3g}"
            + (f" ({frequency_label(result.cw_frequency_Hz)})" if result.cw_frequency_Hz else "")
        )
        fig.add_trace(
            go.Scatter(x=cw["t_K"], y=1.0 / cw["eps_r"], mode="lines", name=name, legendgroup="cw",
                       line=dict(color=PALETTE["black"], width=2)),
            row=inv_row, col=1,
        )
        fig.add_trace(
            go.Scatter(x=cw["t_ext_K"], y=1.0 / cw["eps_r_ext"], mode="lines", name="Curie-Weiss, extrapolated",
                       legendgroup="cw", showlegend=False, line=dict(color=PALETTE["black"], width=1, dash="dash")),
            row=inv_row, col=1,
        )
        fig.add_trace(
            go.Scatter(x=cw["t_K"], y=cw["eps_r"], mode="lines", name="Curie-Weiss fit", legendgroup="cw",
                       showlegend=False, line=dict(color=PALETTE["black"], width=1.5, dash="dash")),
            row=1, col=1,
        )
    landau = result.curves.get("landau")
    if landau is not None and result.landau_slope_ratio is not None:
        # Lines through 1/(eps' - eps_inf); drawn on the 1/eps' axis after adding the background back.
        bg = landau["background"]
        for side, (tt, inv_chi) in (("below", landau["below"]), ("above", landau["above"])):
            fig.add_trace(
                go.Scatter(
                    x=tt, y=1.0 / (1.0 / inv_chi + bg), mode="lines",
                    name=f"Landau slopes, ratio {result.landau_slope_ratio:.2f}", legendgroup="landau",
                    showlegend=side == "below", line=dict(color=PALETTE["purple"], width=3),
                    opacity=0.6,
                ),
                row=inv_row, col=1,
            )
    base_layout(fig, x_title="", y_title=Y_EPS, title=title)
    fig.update_xaxes(title_text=None)
    fig.update_xaxes(title_text=X_T, row=rows, col=1)
    fig.update_yaxes(title_text=Y_EPS, row=1, col=1)
    if has_loss:
        fig.update_yaxes(title_text=Y_TAN, type="log", row=2, col=1)
    fig.update_yaxes(title_text=Y_INV, row=inv_row, col=1)
    if title:  # room for the title above the legend row(s)
        fig.update_layout(margin=dict(t=100), title=dict(y=0.99, yanchor="top"))
    # each y title must fit its own panel (issue 22 item 11: the stacked titles ran into each other)
    axes = ["yaxis"] + [f"yaxis{k}" for k in range(2, rows + 1)]
    stacked_panels(fig, [fig.layout[a].title.text for a in axes],
                   [fig.layout[a].domain[1] - fig.layout[a].domain[0] for a in axes])
    return fig
