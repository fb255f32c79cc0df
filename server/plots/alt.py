"""The text alternative of a figure: what it plots (axes with units) and its data as tables.

A plot is mouse-only and invisible to a screen reader; every page figure therefore carries a
caption built from the figure's own axis titles (which name quantity and unit, see
:mod:`server.plots`) and, collapsed beneath it, one table per trace with the plotted points
(WCAG 2.1 success criterion 1.1.1, "non-text content": a text alternative that serves the
equivalent purpose). Long traces are thinned evenly to at most ``max_rows`` rows, and the table
says so: the raw file and the SVG/PDF downloads hold every point.

Works on the JSON the pages embed (``figure_json``), including plotly's packed arrays
(``{"dtype": "f8", "bdata": <base64>}``), so the page needs nothing but what it already has.
"""

from __future__ import annotations

import base64
import json
import math
from typing import Any

import numpy as np

MAX_ROWS = 200  # rows per trace table: enough to read a curve, small enough for a page


def _values(v: Any) -> list:
    if v is None:
        return []
    if isinstance(v, dict) and "bdata" in v:
        arr = np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
        if v.get("shape"):
            arr = arr.reshape([int(n) for n in str(v["shape"]).split(",")])
        return arr.tolist()
    return list(v)


def _axis_title(layout: dict, ref: str | None, letter: str) -> str:
    name = f"{letter}axis" + ((ref or letter)[1:])
    title = (layout.get(name) or {}).get("title")
    text = title.get("text") if isinstance(title, dict) else title
    return str(text or letter)


def _cell(v: Any) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def figure_alt(fig_json: str, *, max_rows: int = MAX_ROWS) -> dict[str, Any]:
    """``{"axes": "P (µC/cm²) against E (kV/cm)", "traces": [...]}`` for a figure's JSON.

    Each trace: ``name``, ``x_title``, ``y_title``, ``rows`` (``[x, y, code]`` strings; ``code`` is
    the compound code of explorer points, else ""), ``total`` points and ``step`` (every step-th
    point is listed). ``codes``: the compounds plotted, in order, each once (explorer figures).
    """
    fig = json.loads(fig_json)
    layout = fig.get("layout") or {}
    traces, pairs = [], []
    for i, trace in enumerate(fig.get("data") or []):
        y = _values(trace.get("y"))
        x = _values(trace.get("x")) or list(range(len(y)))
        if not y:
            continue
        x_title = _axis_title(layout, trace.get("xaxis"), "x")
        y_title = _axis_title(layout, trace.get("yaxis"), "y")
        if (y_title, x_title) not in pairs:
            pairs.append((y_title, x_title))
        custom = _values(trace.get("customdata"))
        # explorer figures (layout.meta.click_to_compound) carry the compound code first in each point's customdata
        linked = bool((layout.get("meta") or {}).get("click_to_compound"))
        codes = [c[0] if isinstance(c, (list, tuple)) and c else "" for c in custom] if linked else []
        n = min(len(x), len(y))
        step = max(1, math.ceil(n / max_rows))
        rows = [[_cell(x[j]), _cell(y[j]), str(codes[j]) if j < len(codes) else ""] for j in range(0, n, step)]
        traces.append({"name": str(trace.get("name") or f"trace {i + 1}"), "x_title": x_title, "y_title": y_title,
                       "rows": rows, "total": n, "step": step})
    axes = "; ".join(f"{y} against {x}" for y, x in pairs)
    codes = list(dict.fromkeys(r[2] for t in traces for r in t["rows"] if r[2]))
    return {"axes": axes, "traces": traces, "codes": codes}
