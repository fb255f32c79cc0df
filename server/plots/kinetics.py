"""Figures for inversion-barrier kinetics: Eyring plot with residuals, barrier calibration."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from server.analysis.calibration import Calibration
from server.analysis.kinetics import EyringFit
from server.plots import PALETTE, base_layout

X_EYRING = "1000/T (1/K)"
Y_EYRING = "ln(k/T) (ln(s^-1 K^-1))"
Y_RESID = "residual (ln units)"
X_CAL = "computed barrier (kcal/mol)"
Y_CAL = "measured barrier (kcal/mol)"


def eyring_figure(fit: EyringFit, *, title: str | None = None) -> go.Figure:
    """Eyring plot, ln(k/T) against 1000/T, with the fitted line and a residuals panel."""
    x_pts = 1000.0 / fit.t_K
    y_pts = fit.ln_k_over_t()
    t_line = np.linspace(fit.t_min_K, fit.t_max_K, 50)
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.72, 0.28], vertical_spacing=0.06)
    fig.add_trace(
        go.Scatter(
            x=x_pts, y=y_pts, mode="markers", name="measured",
            marker=dict(color=PALETTE["blue"], size=8),
            customdata=np.column_stack([fit.t_K, fit.k_per_s]),
            hovertemplate="T = %{customdata[0]:.1f} K<br>k = %{customdata[1]:.4g} 1/s<extra></extra>",
        ),
        row=1, col=1,
    )
    fig.add_trace(
        go.Scatter(
            x=1000.0 / t_line, y=fit.fitted_ln_k_over_t(t_line), mode="lines",
            name=f"fit: dH = {fit.dh_kcal_mol:.2f} kcal/mol, dS = {fit.ds_cal_molK:.1f} cal/(mol K)",
            line=dict(color=PALETTE["vermillion"]),
        ),
        row=1, col=1,
    )
    fig.add_trace(
        go.Scatter(
            x=x_pts, y=fit.residuals, mode="markers", name="residual", showlegend=False,
            marker=dict(color=PALETTE["blue"], size=6),
        ),
        row=2, col=1,
    )
    fig.add_hline(y=0.0, line=dict(color=PALETTE["black"], width=1, dash="dot"), row=2, col=1)
    base_layout(fig, x_title=X_EYRING, y_title=Y_EYRING, title=title)
    fig.update_xaxes(title_text=None, row=1, col=1)
    fig.update_xaxes(title_text=X_EYRING, row=2, col=1)
    fig.update_yaxes(title_text=Y_EYRING, row=1, col=1)
    fig.update_yaxes(title_text=Y_RESID, row=2, col=1)
    return fig


def calibration_figure(
    cal: Calibration,
    points_labels: Sequence[str] | None = None,
    *,
    title: str | None = None,
) -> go.Figure:
    """Measured against computed barriers with the fit line and 95 % prediction band.

    ``points_labels`` name the points on hover (default: the calibration's labels).
    Without a fit (``status == "insufficient"``) the points are shown with the message.
    """
    labels = list(points_labels) if points_labels is not None else list(cal.labels)
    if len(labels) != cal.n:
        labels = list(cal.labels)
    fig = go.Figure()
    x = np.asarray(cal.computed_kcal_mol, dtype=float)
    y = np.asarray(cal.measured_kcal_mol, dtype=float)
    if cal.ok:
        span = float(x.max() - x.min())
        grid = np.linspace(x.min() - 0.1 * span, x.max() + 0.1 * span, 100)
        y_fit, lo, hi = cal.band(grid)
        fig.add_trace(go.Scatter(
            x=np.concatenate([grid, grid[::-1]]), y=np.concatenate([hi, lo[::-1]]),
            fill="toself", fillcolor="rgba(86,180,233,0.25)", line=dict(width=0),
            name="95 % prediction band", hoverinfo="skip",
        ))
        fig.add_trace(go.Scatter(
            x=grid, y=y_fit, mode="lines", line=dict(color=PALETTE["vermillion"]),
            name=f"fit: {cal.a_kcal_mol:.2f} + {cal.b:.3f} x computed (r2 = {cal.r2:.3f})",
        ))
    fig.add_trace(go.Scatter(
        x=x, y=y, mode="markers", name="compounds", text=labels,
        marker=dict(color=PALETTE["blue"], size=9),
        hovertemplate="%{text}<br>computed %{x:.2f} kcal/mol<br>measured %{y:.2f} kcal/mol<extra></extra>",
    ))
    if not cal.ok:
        fig.add_annotation(text=cal.message, xref="paper", yref="paper", x=0.5, y=0.5, showarrow=False)
    return base_layout(fig, x_title=X_CAL, y_title=Y_CAL, title=title)
