"""Figures for P-E loops and PUND records."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from server.analysis.hysteresis import LoopResult
from server.analysis.pund import PundResult
from server.plots import PALETTE, base_layout

E_TITLE = "E (kV/cm)"
P_TITLE = "P (uC/cm²)"


def loop_figure(result: LoopResult, *, title: str | None = None) -> go.Figure:
    """The analysed cycle with +/-Pr marked on the P axis and +/-Ec on the E axis.

    Hover text gives each value with its unit; the verdict goes into the legend entry of
    the loop, so a lossy-dielectric ellipse is never shown as a bare "loop".
    """
    cyc = result.cycle
    fig = go.Figure()
    fig.add_trace(
        go.Scatter(
            x=cyc.e_kV_cm,
            y=cyc.p_uC_cm2,
            mode="lines",
            name=f"cycle {result.cycle_used} of {result.cycles_found} ({result.verdict.replace('_', ' ')})",
            line=dict(color=PALETTE["blue"], width=2),
            hovertemplate="E %{x:.4g} kV/cm<br>P %{y:.4g} uC/cm²<extra></extra>",
        )
    )
    fig.add_trace(
        go.Scatter(
            x=[0.0, 0.0],
            y=[result.pr_pos_uC_cm2, result.pr_neg_uC_cm2],
            mode="markers",
            name="±Pr",
            marker=dict(color=PALETTE["vermillion"], size=10, symbol="diamond"),
            text=[f"+Pr = {result.pr_pos_uC_cm2:.4g} uC/cm²", f"−Pr = {result.pr_neg_uC_cm2:.4g} uC/cm²"],
            hovertemplate="%{text}<extra></extra>",
        )
    )
    fig.add_trace(
        go.Scatter(
            x=[result.ec_pos_kV_cm, result.ec_neg_kV_cm],
            y=[0.0, 0.0],
            mode="markers",
            name="±Ec",
            marker=dict(color=PALETTE["green"], size=10, symbol="square"),
            text=[f"+Ec = {result.ec_pos_kV_cm:.4g} kV/cm", f"−Ec = {result.ec_neg_kV_cm:.4g} kV/cm"],
            hovertemplate="%{text}<extra></extra>",
        )
    )
    return base_layout(fig, x_title=E_TITLE, y_title=P_TITLE, title=title)


def pund_figure(frame: pd.DataFrame, result: PundResult, *, title: str | None = None) -> go.Figure:
    """P (or Q, as recorded) against time with the five pulses shaded and labelled.

    ``frame`` is the canonical frame given to :func:`server.analysis.pund.analyse_pund`;
    charge is drawn as recorded when the frame holds ``Q_uC`` and no ``P_uC_cm2``,
    otherwise the polarization the analysis used.
    """
    if "P_uC_cm2" not in frame.columns and "Q_uC" in frame.columns:
        t = frame["t_s"].to_numpy(dtype=float)
        y = frame["Q_uC"].to_numpy(dtype=float)
        y_title, unit = "Q (uC)", "uC"
    else:
        t, y = result.t_s, result.p_uC_cm2
        y_title, unit = P_TITLE, "uC/cm²"
    fig = go.Figure()
    fig.add_trace(
        go.Scatter(
            x=t,
            y=y,
            mode="lines",
            name=y_title.split(" ")[0],
            line=dict(color=PALETTE["blue"], width=2),
            hovertemplate=f"t %{{x:.4g}} s<br>%{{y:.4g}} {unit}<extra></extra>",
        )
    )
    shades = {"preset": PALETTE["black"], "P": PALETTE["vermillion"], "U": PALETTE["orange"],
              "N": PALETTE["green"], "D": PALETTE["sky"]}  # fmt: skip
    for pulse in result.pulses:
        fig.add_vrect(
            x0=pulse.t_start_s,
            x1=pulse.t_end_s,
            fillcolor=shades[pulse.name],
            opacity=0.15,
            line_width=0,
            annotation_text=pulse.name if pulse.name != "preset" else "pre",
            annotation_position="top left",
        )
    # invisible markers so each pulse's numbers show on hover
    centres = [(p.t_start_s + p.t_end_s) / 2.0 for p in result.pulses]
    fig.add_trace(
        go.Scatter(
            x=centres,
            y=[float(np.interp(c, t, y)) for c in centres],
            mode="markers",
            name="pulses",
            marker=dict(color=PALETTE["black"], size=6),
            text=[
                f"{p.name} ({'+' if p.sign > 0 else '−'}): ΔP to pulse end {p.change_uC_cm2:.4g} uC/cm²"
                for p in result.pulses
            ],
            hovertemplate="%{text}<extra></extra>",
            showlegend=False,
        )
    )
    return base_layout(fig, x_title="t (s)", y_title=y_title, title=title)
