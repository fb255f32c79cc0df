"""Vector figures of stored records: a measurement's figure and the compound-level figures, as SVG or PDF.

The figures themselves are the plotly builders' (``Kind.figure``, :mod:`server.plots.summary`);
:mod:`server.plots.vector` redraws them in publication style.
"""

from __future__ import annotations

from typing import Optional

import plotly.graph_objects as go
import plotly.io as pio
from sqlmodel import Session

from ..models import Compound, Measurement
from ..plots import summary, vector
from . import measurements
from .errors import NotFound

FORMATS = {"svg": "image/svg+xml", "pdf": "application/pdf"}

#: Compound-level figures: name -> what it shows (the route and the report pack list them).
COMPOUND_FIGURES = {"switching": "Pr and Ec of every P-E loop against its measurement temperature"}


def measurement_plot(session: Session, m: Measurement) -> go.Figure:
    """The measurement's plotly figure (from the cached one); NotFound for kinds without a figure."""
    text = measurements.measurement_figure(session, m)
    if text is None:
        raise NotFound(f"measurement {m.id} ({m.kind}) has no figure")
    return pio.from_json(text)


def compound_plot(session: Session, compound: Compound, name: str) -> Optional[go.Figure]:
    """A compound-level figure by name; None when there is too little data to draw it."""
    if name not in COMPOUND_FIGURES:
        raise NotFound(f"no compound figure {name!r}; there are: {', '.join(COMPOUND_FIGURES)}")
    rows, _ = measurements.list_measurements(session, compound=compound.code, limit=1000)
    items = [measurements.measurement_read(session, m) for m in rows]
    from .compound_page import switching_lines  # the page's figure and this one are the same figure
    from . import samples

    lines, loose, _ = switching_lines(session, items, samples.samples_of_compound(session, compound))
    return summary.switching_by_series(lines, loose)


def render(fig: go.Figure, fmt: str) -> bytes:
    if fmt not in FORMATS:
        raise NotFound(f"no figure format {fmt!r}; there are: {', '.join(FORMATS)}")
    return vector.render(fig, fmt)
