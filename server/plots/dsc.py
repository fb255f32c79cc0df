"""Figure for DSC: heat flow (W/g, endothermic up) against T with baselines, onsets and integrated areas."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from server.analysis.dsc import DscResult, analyse_dsc
from server.plots import PALETTE, SERIES, base_layout, stacked_panels
from server.precision import value_text

X_T = "T (K)"
Y_HF = "heat flow (W/g), endo up"
Y_ZOOM = "heat flow (W/g), zoom"

#: A peak whose |dH| is below this fraction of the largest peak's gets a zoomed panel of its own: at 10 % it is
#: at most a tenth as tall as the melting peak beside it and easy to miss at full scale (common practice: small
#: solid-solid transitions are shown magnified beside the melting endotherm).
SMALL_PEAK_FRACTION = 0.10


def _rgba(hex_colour: str, alpha: float) -> str:
    h = hex_colour.lstrip("#")
    r, g, b = (int(h[i : i + 2], 16) for i in (0, 2, 4))
    return f"rgba({r},{g},{b},{alpha})"


def dsc_figure(result: DscResult, frame: pd.DataFrame | None = None, *, title: str | None = None) -> go.Figure:
    """Heat flow against temperature with each peak's baseline, shaded area, onset tangent and dH.

    Parameters
    ----------
    result : DscResult
        From :func:`server.analysis.dsc.analyse_dsc`.
    frame : pandas.DataFrame, optional
        The canonical frame the result came from; needed only when ``result`` carries no
        ``curves`` (e.g. rebuilt elsewhere): the trace is then analysed again with the
        result's mass, rate and sign convention.
    title : str, optional
        Figure title.

    Notes
    -----
    The signal is drawn with endothermic effects up, whatever the file's convention. A peak with |ΔH| below
    :data:`SMALL_PEAK_FRACTION` of the largest gets a second panel below, zoomed on its temperature window (the
    signal, its baseline and shaded area drawn again at a scale that shows them).
    """
    curves = result.curves
    if curves is None:
        if frame is None:
            raise ValueError("the result carries no curves: pass the frame it came from")
        curves = analyse_dsc(
            frame, mass_mg=result.mass_mg, rate_K_min=result.rate_K_min, endo=result.endo,
            molar_mass_g_mol=result.molar_mass_g_mol,
        ).curves
    fig = go.Figure()
    for k, seg in enumerate(curves["segments"]):
        colour = SERIES[k % len(SERIES)]
        fig.add_trace(
            go.Scatter(
                x=seg["t_K"], y=seg["heat_flow_W_g"], mode="lines",
                name=f"segment {seg['index']} ({seg['direction']})", line=dict(color=colour, width=1.5),
                hovertemplate="T = %{x:.2f} K<br>heat flow = %{y:.4g} W/g<extra></extra>",
            )
        )
    for j, pk in enumerate(curves["peaks"]):
        colour = SERIES[pk["segment"] % len(SERIES)]
        tw, sig, base = np.asarray(pk["t_K"]), np.asarray(pk["heat_flow_W_g"]), np.asarray(pk["baseline_W_g"])
        dh = pk["dh_J_g"]
        dh_text = value_text(dh, pk.get("dh_err_J_g"), 3)  # digits follow the uncertainty (server/precision.py)
        text = f"ΔH = {dh_text} J/g ({'endo' if dh > 0 else 'exo'})<br>peak {pk['peak_K']:.2f} K"
        onset = pk["onset"]
        if onset is not None:
            text += f"<br>onset {onset['t_K']:.2f} K"
        fig.add_trace(
            go.Scatter(
                x=np.concatenate([tw, tw[::-1]]), y=np.concatenate([sig, base[::-1]]),
                fill="toself", fillcolor=_rgba(colour, 0.25), line=dict(width=0), mode="lines",
                name=f"ΔH = {dh_text} J/g", legendgroup=f"peak{j}", hoveron="fills", text=text,
                hoverinfo="text",
            )
        )
        fig.add_trace(
            go.Scatter(
                x=tw, y=base, mode="lines", name="baseline", legendgroup=f"peak{j}", showlegend=False,
                line=dict(color=PALETTE["black"], width=1, dash="dash"), hoverinfo="skip",
            )
        )
        fig.add_trace(
            go.Scatter(
                x=[pk["peak_K"]], y=[pk["peak_W_g"]], mode="markers", name="peak", legendgroup=f"peak{j}",
                showlegend=False, marker=dict(symbol="triangle-up" if dh > 0 else "triangle-down", size=9,
                                              color=colour), hovertext=[text], hoverinfo="text",
            )
        )
        if onset is not None:
            t_on, y_on = onset["t_K"], onset["heat_flow_W_g"]
            t_tp, y_tp = onset["tangent_point_K"], onset["tangent_point_W_g"]
            # Tangent drawn from the onset a little past the tangent point; baseline drawn back from the onset.
            t_end = t_on + 1.3 * (t_tp - t_on)
            span = 0.5 * abs(t_tp - t_on) + 0.02 * abs(tw[-1] - tw[0])
            t_pre = t_on - span * np.sign(t_tp - t_on)
            fig.add_trace(
                go.Scatter(
                    x=[t_on, t_end], y=[y_on, y_on + onset["tangent_slope_W_gK"] * (t_end - t_on)],
                    mode="lines", name="onset tangent", legendgroup=f"peak{j}", showlegend=False,
                    line=dict(color=PALETTE["vermillion"], width=1), hoverinfo="skip",
                )
            )
            fig.add_trace(
                go.Scatter(
                    x=[t_pre, t_on], y=[onset["baseline_slope_W_gK"] * t_pre + onset["baseline_intercept_W_g"], y_on],
                    mode="lines", name="pre-transition baseline", legendgroup=f"peak{j}", showlegend=False,
                    line=dict(color=PALETTE["vermillion"], width=1, dash="dot"), hoverinfo="skip",
                )
            )
            fig.add_trace(
                go.Scatter(
                    x=[t_on, t_tp], y=[y_on, y_tp], mode="markers", name="onset", legendgroup=f"peak{j}",
                    showlegend=False, marker=dict(symbol=["x", "circle-open"], size=9, color=PALETTE["vermillion"]),
                    hovertext=[f"extrapolated onset {t_on:.2f} K", f"steepest point {t_tp:.2f} K"],
                    hoverinfo="text",
                )
            )
    base_layout(fig, x_title=X_T, y_title=Y_HF, title=title)
    if title:  # room for the title above the legend row
        fig.update_layout(margin=dict(t=90), title=dict(y=0.99, yanchor="top"))
    small = small_peaks(curves["peaks"])
    return _with_zoom(fig, curves, small) if small else fig


def small_peaks(peaks: list[dict]) -> list[dict]:
    """The peaks whose |ΔH| is below :data:`SMALL_PEAK_FRACTION` of the largest |ΔH| (none with one peak)."""
    sizes = [abs(pk["dh_J_g"]) for pk in peaks if pk.get("dh_J_g") is not None]
    if len(sizes) < 2 or max(sizes) <= 0:
        return []
    return [pk for pk in peaks if pk.get("dh_J_g") is not None and abs(pk["dh_J_g"]) < SMALL_PEAK_FRACTION * max(sizes)]


def _zoom_window(curves: dict, small: list[dict]) -> tuple[float, float]:
    """The temperature window of the small peaks, widened by half its width; if that would take in a large
    peak's maximum, the window of the first small peak alone."""
    chosen = {id(pk) for pk in small}
    large = [pk["peak_K"] for pk in curves["peaks"] if id(pk) not in chosen]

    def window(pks: list[dict]) -> tuple[float, float]:
        lo = min(float(np.min(pk["t_K"])) for pk in pks)
        hi = max(float(np.max(pk["t_K"])) for pk in pks)
        pad = 0.5 * max(hi - lo, 2.0)
        return lo - pad, hi + pad

    lo, hi = window(small)
    if any(lo <= t <= hi for t in large):
        lo, hi = window(small[:1])
    return lo, hi


def _with_zoom(full: go.Figure, curves: dict, small: list[dict]) -> go.Figure:
    """``full`` on top, and below it a panel zoomed on the small peaks (x and y ranges of that window)."""
    lo, hi = _zoom_window(curves, small)
    fig = make_subplots(rows=2, cols=1, row_heights=[0.62, 0.38], vertical_spacing=0.16)
    for tr in full.data:
        fig.add_trace(tr, row=1, col=1)
    ys = []
    for k, seg in enumerate(curves["segments"]):
        t, y = np.asarray(seg["t_K"], dtype=float), np.asarray(seg["heat_flow_W_g"], dtype=float)
        keep = (t >= lo) & (t <= hi)
        if not keep.any():
            continue
        ys.append(y[keep])
        fig.add_trace(go.Scatter(x=t[keep], y=y[keep], mode="lines", name=f"segment {seg['index']} (zoom)",
                                 showlegend=False, line=dict(color=SERIES[k % len(SERIES)], width=1.5),
                                 hovertemplate="T = %{x:.2f} K<br>heat flow = %{y:.4g} W/g<extra></extra>"),
                      row=2, col=1)
    for pk in small:
        colour = SERIES[pk["segment"] % len(SERIES)]
        tw, sig, base = np.asarray(pk["t_K"]), np.asarray(pk["heat_flow_W_g"]), np.asarray(pk["baseline_W_g"])
        fig.add_trace(go.Scatter(x=np.concatenate([tw, tw[::-1]]), y=np.concatenate([sig, base[::-1]]),
                                 fill="toself", fillcolor=_rgba(colour, 0.25), line=dict(width=0), mode="lines",
                                 name=f"ΔH = {value_text(pk['dh_J_g'], pk.get('dh_err_J_g'), 3)} J/g (zoom)",
                                 showlegend=False, hoveron="fills", hoverinfo="text",
                                 text=f"ΔH = {value_text(pk['dh_J_g'], pk.get('dh_err_J_g'), 3)} J/g<br>"
                                      f"peak {pk['peak_K']:.2f} K"),
                      row=2, col=1)
        fig.add_trace(go.Scatter(x=tw, y=base, mode="lines", name="baseline (zoom)", showlegend=False,
                                 line=dict(color=PALETTE["black"], width=1, dash="dash"), hoverinfo="skip"),
                      row=2, col=1)
    fig.update_layout(full.layout)
    fig.update_layout(annotations=[dict(
        text=f"zoom: peak(s) below {SMALL_PEAK_FRACTION:.0%} of the largest ΔH", xref="x2 domain", yref="y2 domain",
        x=0.0, y=1.02, xanchor="left", yanchor="bottom", showarrow=False, font=dict(size=12))])
    fig.update_xaxes(title_text=X_T, showgrid=True, gridcolor="#e5e5e5", row=2, col=1, range=[lo, hi])
    fig.update_yaxes(title_text=Y_ZOOM, showgrid=True, gridcolor="#e5e5e5", row=2, col=1)
    fig.update_xaxes(title_text=X_T, row=1, col=1)
    fig.update_yaxes(title_text=Y_HF, row=1, col=1)
    if ys:
        y = np.concatenate(ys)
        span = float(np.max(y) - np.min(y)) or 1e-6
        fig.update_yaxes(range=[float(np.min(y)) - 0.1 * span, float(np.max(y)) + 0.1 * span], row=2, col=1)
    return stacked_panels(fig, [Y_HF, Y_ZOOM], [0.62 * 0.84, 0.38 * 0.84], min_height_px=560)
