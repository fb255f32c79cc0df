"""Per-compound summary: figures of merit against measurement temperature."""

from __future__ import annotations

from typing import Any, Iterable, Mapping, Optional

import plotly.graph_objects as go
from plotly.subplots import make_subplots

from . import PALETTE, base_layout


def switching_vs_temperature(rows: Iterable[Mapping[str, Any]]) -> Optional[go.Figure]:
    """Pr and Ec of every P-E loop against its temperature; None with fewer than two such loops.

    ``rows`` are measurement dicts (kind, temperature_K, results, verdict, id).
    """
    loops = sorted(
        (r for r in rows if r["kind"] == "pe_loop" and r.get("temperature_K") is not None
         and r["results"].get("pr_uC_cm2") is not None),
        key=lambda r: r["temperature_K"],
    )
    if len(loops) < 2:
        return None
    t = [r["temperature_K"] for r in loops]
    labels = [(f"#{r['id']} {r.get('verdict') or ''}".strip()
               + (" (apparent Pr, Ec)" if r["results"].get("apparent") else "")) for r in loops]
    fig = make_subplots(specs=[[{"secondary_y": True}]])
    fig.add_trace(go.Scatter(x=t, y=[r["results"]["pr_uC_cm2"] for r in loops], mode="lines+markers", name="Pr",
                             text=labels, line=dict(color=PALETTE["blue"]),
                             hovertemplate="T %{x:.1f} K<br>Pr %{y:.3g} µC/cm²<br>%{text}<extra></extra>"),
                  secondary_y=False)
    fig.add_trace(go.Scatter(x=t, y=[r["results"]["ec_kV_cm"] for r in loops], mode="lines+markers", name="Ec",
                             text=labels, line=dict(color=PALETTE["vermillion"], dash="dash"),
                             marker=dict(symbol="square"),
                             hovertemplate="T %{x:.1f} K<br>Ec %{y:.3g} kV/cm<br>%{text}<extra></extra>"),
                  secondary_y=True)
    base_layout(fig, x_title="T (K)", y_title="Pr (µC/cm²)")
    fig.update_yaxes(title_text="Ec (kV/cm)", secondary_y=True, showgrid=False)
    return fig


def transitions_table(rows: Iterable[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Transition temperatures found by dielectric peaks and DSC, for the compound summary."""
    out: list[dict[str, Any]] = []
    for r in rows:
        if r["kind"] == "dielectric" and r["results"].get("t_peak_K") is not None:
            out.append({"measurement": r["id"], "source": "dielectric peak", "t_K": r["results"]["t_peak_K"],
                        "value": r["results"].get("eps_peak"), "unit": "ε′ peak"})
        if r["kind"] == "dsc":
            for p in r["results"].get("peaks") or []:
                out.append({"measurement": r["id"], "source": f"DSC {p.get('direction', '')}",
                            "t_K": p.get("peak_K"), "value": p.get("dh_J_g"), "unit": "J/g"})
    return sorted(out, key=lambda d: (d["t_K"] is None, d["t_K"]))
