"""Vector figures (SVG, PDF) for talks and papers, drawn with matplotlib from our plotly figures.

The plotly builders of :mod:`server.plots` stay the one home of what each figure shows (its
traces, colours, marked points and axis titles); this module redraws such a figure in
publication style, without a browser:

* single-column width, 8.5 cm (the single-column width of the common two-column journal
  layouts; common practice), 8 pt text;
* axis labels with units as the trade writes them: ``µC cm⁻²``, ``kV cm⁻¹``, ``ε′``
  (negative exponents rather than solidus, as recommended by the SI Brochure, 9th ed.,
  BIPM 2019, section 5.4.6);
* no toolbar, no hover text; text kept as text (SVG ``svg.fonttype = none``, PDF TrueType
  fonts) so labels can be edited and searched.

Every plotly trace our builders use is a ``Scatter`` (lines, markers, filled bands, error
bars); shapes are rectangles and lines (pulse windows, zero lines), annotations are text.
A trace of any other type raises ``ValueError`` rather than being left out silently.
"""

from __future__ import annotations

import base64
import io
import re
import textwrap
from typing import Any, Optional

import matplotlib
import numpy as np

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import plotly.graph_objects as go  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.transforms import blended_transform_factory  # noqa: E402
from matplotlib.ticker import FormatStrFormatter, NullFormatter  # noqa: E402

from ..precision import trade_text  # noqa: E402

#: Single-column figure width (cm); common practice for two-column journals.
COLUMN_WIDTH_CM = 8.5
CM = 1 / 2.54
FONT_PT = 8
LEGEND_WRAP = 48  # characters per legend line at 7 pt in one 8.5 cm column

STYLE = {
    "font.size": FONT_PT,
    "axes.labelsize": FONT_PT,
    "xtick.labelsize": FONT_PT - 1,
    "ytick.labelsize": FONT_PT - 1,
    "legend.fontsize": FONT_PT - 1,
    "axes.linewidth": 0.6,
    "lines.linewidth": 1.0,
    "xtick.direction": "in",
    "ytick.direction": "in",
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "svg.fonttype": "none",  # text stays text in the SVG
    "pdf.fonttype": 42,  # TrueType in the PDF (editable)
    "svg.hashsalt": "remanence",  # deterministic ids
}

# Units as the trade writes them: (pattern, replacement), applied in order.
_UNIT_WORDS = (
    (r"\buC\b", "µC"),
    (r"ε''", "ε″"),
    (r"ε'", "ε′"),
    (r"\s*\(relative permittivity, 1\)", ""),
    (r"\s*\(1\)$", ""),
)


def publication_label(title: str) -> str:
    """An axis title of our plotly builders as it is printed: ``P (uC/cm²)`` -> ``P (µC cm⁻²)``."""
    out = re.sub(r"<[^>]+>", "", title or "")
    for pattern, repl in _UNIT_WORDS:
        out = re.sub(pattern, repl, out)
    # the unit itself by the one rule (server/precision.py), with a plain space: figure fonts lack U+202F
    return trade_text(out.strip(), " ")


_DASH = {"dot": ":", "dash": "--", "dashdot": "-.", "longdash": "--", "solid": "-", None: "-"}
_SYMBOL = {
    "circle": "o", "square": "s", "diamond": "D", "triangle-up": "^", "triangle-down": "v", "x": "x",
    "star": "*", "hexagon": "h", "cross": "+",
}


def _marker(symbol: Any) -> tuple[str, bool]:
    """matplotlib marker and whether it is open, for a plotly symbol name."""
    name = str(symbol or "circle")
    open_ = name.endswith("-open")
    return _SYMBOL.get(name.removesuffix("-open"), "o"), open_


def _colour(value: Any, default: str = "#000000") -> Any:
    """A plotly colour as matplotlib takes it (hex or name, or ``rgba(r,g,b,a)``)."""
    if not value or not isinstance(value, str):
        return default
    m = re.fullmatch(r"rgba?\(([^)]*)\)", value.replace(" ", ""))
    if m:
        parts = [float(p) for p in m.group(1).split(",")]
        rgb = [p / 255 for p in parts[:3]]
        return (*rgb, parts[3] if len(parts) > 3 else 1.0)
    return value


def _axis_name(ref: str, letter: str) -> str:
    """``x2`` -> ``xaxis2``; ``x`` -> ``xaxis``."""
    return f"{letter}axis{ref[1:]}"


def render(fig: go.Figure, fmt: str, *, height_cm: Optional[float] = None) -> bytes:
    """``fig`` redrawn in publication style as ``fmt`` (``svg`` or ``pdf``) bytes."""
    if fmt not in ("svg", "pdf"):
        raise ValueError(f"format {fmt!r}: svg or pdf")
    with plt.rc_context(STYLE):
        mfig = draw(fig, height_cm=height_cm)
        buf = io.BytesIO()
        meta = {"Creator": "Remanence"} if fmt == "pdf" else {"Date": None}
        mfig.savefig(buf, format=fmt, metadata=meta)  # exactly the column width: no tight bounding box
        plt.close(mfig)
    return buf.getvalue()


def draw(fig: go.Figure, *, height_cm: Optional[float] = None) -> Figure:
    """The matplotlib Figure for ``fig``: one matplotlib Axes per plotly x/y axis pair."""
    layout = fig.layout
    pairs: list[tuple[str, str]] = []
    for tr in fig.data:
        if tr.type != "scatter":
            raise ValueError(f"vector figures draw scatter traces; this figure has a {tr.type!r} trace")
        pair = (tr.xaxis or "x", tr.yaxis or "y")
        if pair not in pairs:
            pairs.append(pair)
    if not pairs:
        pairs = [("x", "y")]
    main_y = {}  # y axes that overlay another share its box (secondary y)
    for _, y in pairs:
        yl = layout[_axis_name(y, "y")]
        main_y[y] = yl.overlaying if (yl and yl.overlaying) else y
    rows = sorted({main_y[y] for _, y in pairs}, key=lambda y: -_domain(layout, y)[1])
    heights = [_domain(layout, y)[1] - _domain(layout, y)[0] for y in rows]
    height = height_cm or COLUMN_WIDTH_CM * (0.75 if len(rows) == 1 else 0.55 + 0.35 * len(rows))
    mfig = plt.figure(figsize=(COLUMN_WIDTH_CM * CM, height * CM), layout="constrained")
    grid = mfig.add_gridspec(len(rows), 1, height_ratios=heights, hspace=0.08)
    boxes: dict[str, Any] = {}
    for i, y in enumerate(rows):
        share = boxes[rows[0]] if i else None
        boxes[y] = mfig.add_subplot(grid[i, 0], sharex=share)
    axes: dict[str, Any] = {}
    for _, y in pairs:
        if main_y[y] == y:
            axes[y] = boxes[y]
        elif y not in axes:
            axes[y] = boxes[main_y[y]].twinx()
    handles: list[Any] = []
    for tr in fig.data:
        ax = axes[tr.yaxis or "y"]
        handles.extend(_trace(ax, tr))
    for shape in layout.shapes or ():
        _shape(shape, axes, boxes, rows)
    for y, ax in axes.items():
        yl = layout[_axis_name(y, "y")]
        if yl is not None:
            ax.set_ylabel(publication_label(yl.title.text or ""))
            if yl.range is not None and None not in tuple(yl.range) and yl.type != "log":
                ax.set_ylim(*yl.range)  # a builder that fixes its range (room for labels under a spectrum)
            if yl.type == "log":
                ax.set_yscale("log")
                ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
                ax.yaxis.set_minor_formatter(NullFormatter())
    for i, y in enumerate(rows):
        ax = boxes[y]
        xref = next(x for x, yy in pairs if main_y[yy] == y) if any(main_y[yy] == y for _, yy in pairs) else "x"
        xl = layout[_axis_name(xref, "x")]
        if i == len(rows) - 1:
            title = xl.title.text if xl is not None and xl.title.text else _first_x_title(layout)
            ax.set_xlabel(publication_label(title or ""))
        else:
            ax.tick_params(labelbottom=False)
        if xl is not None and xl.type == "log":
            ax.set_xscale("log")
        if xl is not None and xl.autorange == "reversed":  # chemical shift: high ppm on the left
            ax.invert_xaxis()
    for ann in layout.annotations or ():
        if ann.text and ann.xref == "paper" and ann.yref == "paper":
            boxes[rows[0]].text(ann.x if ann.x is not None else 0.5, ann.y if ann.y is not None else 0.5,
                                publication_label(ann.text), transform=boxes[rows[0]].transAxes,
                                ha="center", va="center")
    labelled = [h for h in handles if not h.get_label().startswith("_")]
    for h in labelled:  # long legend entries wrap to fit the column
        h.set_label(textwrap.fill(publication_label(h.get_label()), LEGEND_WRAP))
    if labelled:
        boxes[rows[0]].legend(handles=labelled, loc="lower left", bbox_to_anchor=(0, 1.02),
                              ncol=1 if max(len(h.get_label()) for h in labelled) > 22 else 2,
                              frameon=False, borderaxespad=0, handlelength=1.6, columnspacing=1.0)
    if layout.title and layout.title.text:
        mfig.suptitle(publication_label(layout.title.text), fontsize=FONT_PT)
    return mfig


def _first_x_title(layout: Any) -> str:
    for name in sorted(k for k in layout if k.startswith("xaxis")):
        if layout[name].title.text:
            return layout[name].title.text
    return ""


def _domain(layout: Any, y: str) -> tuple[float, float]:
    yl = layout[_axis_name(y, "y")]
    if yl is None or yl.domain is None:
        return (0.0, 1.0)
    return tuple(yl.domain)


def trace_values(v: Any) -> list:
    """A trace's data as a list; plotly JSON's typed arrays (``{"dtype", "bdata"}``) decoded."""
    if v is None:
        return []
    if isinstance(v, dict) and "bdata" in v:
        arr = np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
        return arr.tolist()
    return list(v)


def _trace(ax: Any, tr: Any) -> list[Any]:
    """Draw one plotly scatter trace on ``ax``; its legend handles."""
    x, y = trace_values(tr.x), trace_values(tr.y)
    if not y:
        return []
    if not x:
        x = list(range(len(y)))
    label = tr.name if (tr.name and tr.showlegend is not False) else "_nolegend_"
    line = tr.line or {}
    colour = _colour(line.color or (tr.marker.color if isinstance(tr.marker.color, str) else None))
    if tr.fill == "toself":
        poly = ax.fill([float(a) for a in x], [float(b) for b in y], color=_colour(tr.fillcolor, colour),
                       linewidth=0, label=label, zorder=1)
        return poly
    mode = tr.mode or "lines+markers"
    out = []
    if "lines" in mode:
        out += ax.plot(x, y, linestyle=_DASH.get(line.dash, "-"), color=colour,
                       linewidth=0.5 * float(line.width) if line.width else 1.0,
                       label=label if "markers" not in mode else "_nolegend_", zorder=2)
    if "markers" in mode:
        symbols = tr.marker.symbol
        symbols = list(symbols) if isinstance(symbols, (list, tuple)) else [symbols] * len(y)
        size = tr.marker.size if isinstance(tr.marker.size, (int, float)) else (8 if len(y) < 40 else 4)
        mcolour = _colour(tr.marker.color if isinstance(tr.marker.color, str) else None, colour)
        first = True
        for sym in dict.fromkeys(symbols):
            idx = [i for i, s in enumerate(symbols) if s == sym]
            marker, open_ = _marker(sym)
            handle = ax.plot([x[i] for i in idx], [y[i] for i in idx], linestyle="-" if "lines" in mode else "none",
                             marker=marker, markersize=0.45 * float(size), color=mcolour,
                             markerfacecolor="none" if open_ else mcolour, markeredgewidth=0.7,
                             label=label if first else "_nolegend_", zorder=3)
            first = False
            out += handle
    if "text" in mode and tr.text is not None and not isinstance(tr.text, str):
        colour_t = _colour(tr.textfont.color if tr.textfont and isinstance(tr.textfont.color, str) else None, colour)
        for a, b, t in zip(x, y, tr.text):
            if a is not None and b is not None and t:
                ax.text(float(a), float(b), publication_label(str(t)), ha="center", va="top", color=colour_t,
                        fontsize=FONT_PT - 1, zorder=4)
    err = tr.error_y
    if err is not None and err.array is not None and err.visible is not False:
        ax.errorbar(x, y, yerr=trace_values(err.array), fmt="none", ecolor=colour, elinewidth=0.6, capsize=1.5)
    return out


def _shape(shape: Any, axes: dict[str, Any], boxes: dict[str, Any], rows: list[str]) -> None:
    """A rectangle or line of the plotly layout (pulse windows, zero lines)."""
    yref, xref = shape.yref or "y", shape.xref or "x"
    ax = axes.get(yref.split(" ")[0]) or boxes[rows[0]]
    x_frac = xref == "paper" or xref.endswith("domain")  # axis fractions, not data
    y_frac = yref == "paper" or yref.endswith("domain")
    target = blended_transform_factory(ax.transAxes if x_frac else ax.transData,
                                       ax.transAxes if y_frac else ax.transData)
    line = shape.line or {}
    colour = _colour(shape.fillcolor if shape.type == "rect" else line.color, "#999999")
    if shape.type == "rect":
        from matplotlib.patches import Rectangle

        ax.add_patch(Rectangle((shape.x0, shape.y0), shape.x1 - shape.x0, shape.y1 - shape.y0, transform=target,
                               facecolor=colour, alpha=shape.opacity if shape.opacity is not None else 1.0,
                               linewidth=0, zorder=0))
    elif shape.type == "line":
        ax.plot([shape.x0, shape.x1], [shape.y0, shape.y1], transform=target, color=_colour(line.color, "#000"),
                linestyle=_DASH.get(line.dash, "-"), linewidth=0.6, zorder=1)
