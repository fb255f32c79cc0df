"""The packing of a crystal structure: the unit cell and its atoms projected along one cell edge."""

from __future__ import annotations

from itertools import product

import numpy as np
import plotly.graph_objects as go

from server.analysis.crystal_cell import CellContents
from server.plots import PALETTE, base_layout

# Element colours from the Okabe-Ito set (server/palette.py); elements not named share one hue.
ELEMENT_COLOURS = {"C": PALETTE["black"], "H": "#b0b0b0", "O": PALETTE["vermillion"], "N": PALETTE["blue"],
                   "S": PALETTE["yellow"], "Se": PALETTE["orange"], "F": PALETTE["green"], "Cl": PALETTE["green"],
                   "Br": PALETTE["purple"], "I": PALETTE["purple"], "Si": PALETTE["sky"], "B": PALETTE["sky"]}
OTHER_COLOUR = PALETTE["purple"]
MARKER_PX = {"H": 4}
DEFAULT_MARKER_PX = 8
AXES = "abc"


def view_axis(contents: CellContents) -> int:
    """The cell edge to look along: the shortest (0, 1, 2 for a, b, c). In columnar bowl crystals the
    columns usually run along it, so the view looks down the columns."""
    return int(np.argmin(contents.edges_A))


def projection_basis(orth: np.ndarray, along: int) -> tuple[np.ndarray, np.ndarray]:
    """Two orthonormal vectors spanning the plane perpendicular to cell edge ``along``: u follows the
    next edge (cyclically) with its component along the view removed, v completes a right-handed set."""
    w = orth[:, along] / np.linalg.norm(orth[:, along])
    nxt = orth[:, (along + 1) % 3]
    u = nxt - (nxt @ w) * w
    u /= np.linalg.norm(u)
    return u, np.cross(w, u)


def packing_figure(contents: CellContents, *, title: str | None = None) -> go.Figure:
    """The unit cell's edges and atoms projected along its shortest edge (Å), one trace per element.

    Atoms are those of one cell, wrapped to [0, 1) in fractional coordinates (not whole molecules);
    hover shows each atom's element and fractional coordinates.
    """
    along = view_axis(contents)
    u, v = projection_basis(contents.orth, along)
    nxt = AXES[(along + 1) % 3]
    fig = go.Figure()
    corners = np.array(list(product((0.0, 1.0), repeat=3)))
    xs, ys = [], []
    for i, j in ((i, j) for i in range(8) for j in range(i + 1, 8)):
        if np.abs(corners[i] - corners[j]).sum() == 1:  # the 12 edges join corners one step apart
            for p in (corners[i], corners[j]):
                r = contents.orth @ p
                xs.append(float(r @ u))
                ys.append(float(r @ v))
            xs.append(None)
            ys.append(None)
    fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="unit cell", hoverinfo="skip",
                             line=dict(color="#666666", width=1.5)))
    cart = contents.cart_A
    elements = np.array(contents.elements)
    for el in sorted(set(contents.elements), key=lambda e: (e == "H", e)):
        mask = elements == el
        pts, fr = cart[mask], contents.frac[mask]
        colour = ELEMENT_COLOURS.get(el, OTHER_COLOUR)
        fig.add_trace(go.Scatter(
            x=pts @ u, y=pts @ v, mode="markers", name=f"{el} ({int(mask.sum())})",
            marker=dict(size=MARKER_PX.get(el, DEFAULT_MARKER_PX), color=colour, opacity=0.85,
                        line=dict(width=0.5, color="#ffffff")),
            customdata=fr, hovertemplate=f"{el}<br>x/a %{{customdata[0]:.3f}}, y/b %{{customdata[1]:.3f}}, "
                                         f"z/c %{{customdata[2]:.3f}}<extra></extra>"))
    base_layout(fig, x_title=f"along {nxt}, in the plane ⊥ {AXES[along]} (Å)",
                y_title=f"⊥ {nxt} in that plane (Å)", title=title)
    fig.update_yaxes(scaleanchor="x", scaleratio=1, zeroline=False)
    fig.update_xaxes(zeroline=False)
    fig.update_layout(height=520, legend=dict(title=dict(text=f"view along {AXES[along]}, {contents.space_group}")))
    return fig
