"""The Okabe-Ito colour-blind-safe palette: the one set of hues figures and verdict badges use.

M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations that are
friendly to colorblind people" (2008), https://jfly.uni-koeln.de/color/. The eight hues are given
there as RGB triples; the hexadecimal forms below are those triples.
"""

from __future__ import annotations

OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}
