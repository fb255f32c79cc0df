"""Side-by-side comparison of two to six compounds for a group meeting: one figure with the main
curve of each compound's latest measurement of a kind overlaid, optionally on reduced temperature
T/Tc, and a table of their figures of merit.

Tc is the compound's lowest transition temperature found by a dielectric peak or DSC
(:func:`server.plots.summary.transitions_table`); a compound without one cannot be drawn on T/Tc
and the request is refused with its code named.
"""

from __future__ import annotations

from typing import Any, Optional

import plotly.graph_objects as go
from sqlmodel import Session

from .. import access, merit
from ..access import Actor
from ..errors import InputError
from ..kinds import KINDS
from ..plots import SERIES, base_layout, summary, vector
from ..precision import significant
from . import figures_vector, measurements, registry, samples
from .errors import NotFound

#: Kinds with one main curve to overlay, and whether their x axis is a temperature.
OVERLAY_KINDS = {"pe_loop": False, "dielectric": True, "dsc": True}
MIN_CODES, MAX_CODES = 2, 6


def parse_codes(text: Optional[str]) -> list[str]:
    codes = [c.strip() for c in (text or "").split(",") if c.strip()]
    codes = list(dict.fromkeys(codes))
    if not MIN_CODES <= len(codes) <= MAX_CODES:
        raise InputError(f"pick {MIN_CODES} to {MAX_CODES} compound codes, separated by commas", field="codes")
    return codes


def parse_kind(text: Optional[str]) -> str:
    if text not in OVERLAY_KINDS:
        raise InputError(f"kind must be one of {', '.join(OVERLAY_KINDS)}", field="kind")
    return text


def comparison(session: Session, codes: list[str], kind: str, *, actor: Optional[Actor],
               reduced: bool = False) -> dict[str, Any]:
    """``{"figure": go.Figure, "rows": [...], "keys": [ResultKey...], "missing": [codes]}``."""
    if reduced and not OVERLAY_KINDS[kind]:
        raise InputError(f"T/Tc applies to temperature scans, not to {KINDS[kind].label}", field="reduced")
    spec = KINDS[kind]
    keys = [spec.result_key(k) for k in spec.summary_keys]
    fig = go.Figure()
    rows, missing = [], []
    x_title = y_title = ""
    for i, code in enumerate(codes):
        compound = registry.get_compound(session, code)
        if not access.may_see_structure(actor, compound):
            raise NotFound(f"no compound {code}")
        found, _ = measurements.list_measurements(session, compound=compound.code, kind=kind, limit=1000)
        live = [m for m in found if not m.archived]
        if not live:
            missing.append(code)
            continue
        m = measurements.newest(live)
        # apparent values (server/merit.py: by the loop's own shape or by PUND of its sample) say so
        shown = merit.apparent_keys(m, samples.apparent_reason(session, m))
        plot = figures_vector.measurement_plot(session, m)
        main = next(tr for tr in plot.data if (tr.xaxis or "x") == "x" and (tr.yaxis or "y") == "y")
        x = list(vector.trace_values(main.x))
        y = list(vector.trace_values(main.y))
        x_title = plot.layout.xaxis.title.text or next(
            (plot.layout[a].title.text for a in sorted(plot.layout) if a.startswith("xaxis")
             and plot.layout[a].title.text), "")
        y_title = plot.layout.yaxis.title.text or ""
        tc = None
        if reduced:
            items = [measurements.measurement_read(session, r) for r in live]
            temps = [t["t_K"] for t in summary.transitions_table(items) if t["t_K"]]
            if not temps:
                raise InputError(f"{code} has no transition temperature (dielectric peak or DSC), so no T/Tc",
                                 field="reduced")
            tc = min(temps)
            x = [v / tc for v in x]
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"{code} (#{m.id})",
                                 line=dict(color=SERIES[i % len(SERIES)], width=2)))
        rows.append({"code": code, "measurement": m.id, "tc_K": significant(tc, 5) if tc else "",
                     "t": significant(m.temperature_K, 5) if m.temperature_K else "",
                     "values": [_value(m.results, k, shown) for k in keys]})
    if reduced:
        x_title = "T/Tc (1)"
    base_layout(fig, x_title=x_title, y_title=y_title)
    return {"figure": fig, "rows": rows, "keys": keys, "missing": missing, "kind": spec}


def _value(results: dict[str, Any], rk: Any, apparent: frozenset[str] = frozenset()) -> str:
    value = results.get(rk.key)
    if isinstance(value, list):
        return str(len(value))
    text = significant(value, rk.digits) if value is not None else "—"
    return f"{text} (apparent)" if rk.key in apparent and value is not None else text


def figure_as_json(data: dict) -> str:
    """The comparison's interactive figure (Plotly JSON) for the page."""
    from ..plots import figure_json

    return figure_json(data["figure"])


def figure_file(data: dict, fmt: str) -> bytes:
    """The comparison's figure as an SVG or PDF file (``plots.vector``)."""
    from ..plots import vector

    return vector.render(data["figure"], fmt)
