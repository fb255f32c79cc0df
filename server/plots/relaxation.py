"""Figures for dielectric spectra: eps' and eps'' against frequency per temperature with the fitted curves, and
the relaxation-time map ln tau against 1000/T with the Arrhenius (and Vogel-Fulcher) line."""

from __future__ import annotations

import math

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from server.analysis.constants import R_J_MOLK
from server.analysis.relaxation import RelaxationResult, havriliak_negami
from server.plots import PALETTE, SERIES, base_layout

X_F = "f (Hz)"
Y_REAL = "ε′ (1)"
Y_LOSS = "ε″ (1)"
X_INV_T = "1000/T (1/K)"
Y_TAU = "τ at the loss peak (s)"


def spectrum_figure(isotherms: list[tuple[float, np.ndarray, np.ndarray, np.ndarray]],
                    result: RelaxationResult) -> go.Figure:
    """Three panels: ε′(f) and ε″(f) (log axes) per temperature, measured points and the fitted function, and
    τ against 1000/T with the fitted law."""
    fig = make_subplots(rows=3, cols=1, vertical_spacing=0.09, row_heights=[0.32, 0.34, 0.34])
    fits = {round(i.t_K, 3): i for i in result.isotherms}
    for k, (t, f, er, ei) in enumerate(isotherms):
        t = float(np.mean(t)) if np.ndim(t) else float(t)
        colour = SERIES[k % len(SERIES)]
        name = f"{t:.4g} K"
        fig.add_trace(go.Scatter(x=f, y=er, mode="markers", name=name, legendgroup=name,
                                 marker=dict(color=colour, size=5)), row=1, col=1)
        fig.add_trace(go.Scatter(x=f, y=ei, mode="markers", name=name, legendgroup=name, showlegend=False,
                                 marker=dict(color=colour, size=5)), row=2, col=1)
        fit = fits.get(round(t, 3))
        if fit is not None and fit.tau_s is not None:
            ff = np.logspace(math.log10(float(np.min(f))), math.log10(float(np.max(f))), 200)
            m = havriliak_negami(ff, fit.eps_inf, fit.d_eps, fit.tau_s, fit.alpha, fit.beta, fit.sigma_S_m or 0.0)
            for row, y in ((1, m.real), (2, -m.imag)):
                fig.add_trace(go.Scatter(x=ff, y=y, mode="lines", name=f"fit {name}", legendgroup=name,
                                         showlegend=False, line=dict(color=colour, width=1.5)), row=row, col=1)
    used = [i for i in result.isotherms if i.peak_in_window and i.tau_peak_s is not None]
    if used:
        x = np.array([1000.0 / i.t_K for i in used])
        fig.add_trace(go.Scatter(x=x, y=[i.tau_peak_s for i in used], mode="markers", name="τ (loss peak)",
                                 marker=dict(color=PALETTE["black"], size=7)), row=3, col=1)
        a = result.arrhenius
        if a.ea_kJ_mol is not None:
            xx = np.linspace(x.min(), x.max(), 50)
            fig.add_trace(go.Scatter(x=xx, y=a.tau0_s * np.exp(a.ea_kJ_mol * 1e3 / R_J_MOLK * xx / 1000.0),
                                     mode="lines", name=f"Arrhenius, Ea {a.ea_kJ_mol:.3g} kJ/mol",
                                     line=dict(color=PALETTE["vermillion"])), row=3, col=1)
        if a.curved and a.vf_b_K is not None:
            tt = 1000.0 / np.linspace(x.min(), x.max(), 50)
            fig.add_trace(go.Scatter(x=1000.0 / tt, y=a.vf_tau0_s * np.exp(a.vf_b_K / (tt - a.t_vf_K)),
                                     mode="lines", name="Vogel-Fulcher", line=dict(color=PALETTE["blue"], dash="dash")),
                          row=3, col=1)
    base_layout(fig, x_title=X_F, y_title=Y_REAL)
    fig.update_xaxes(type="log", title_text=X_F, row=1, col=1)
    fig.update_xaxes(type="log", title_text=X_F, row=2, col=1)
    fig.update_yaxes(type="log", title_text=Y_LOSS, row=2, col=1)
    fig.update_xaxes(title_text=X_INV_T, row=3, col=1)
    fig.update_yaxes(type="log", title_text=Y_TAU, row=3, col=1)
    fig.update_layout(height=900)
    return fig
