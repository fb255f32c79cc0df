"""Synthetic SAXS/WAXS curves of columnar and lamellar mesophases.

Each reflection hk of the lattice is a pseudo-Voigt peak in q (30 % Lorentzian, half width ``width_per_nm``) at q_hk = 2 pi / d_hk (d from the lattice metric of
:mod:`server.analysis.saxs`), the first (strongest) at ``peak_counts`` and the higher orders at 6 %, 3.6 %, 2.2 % ... of it (the fall-off of a
column's form factor; a qualitative model, common practice), on a
power-law background (Porod-like q^-3, Glatter and Kratky 1982) and a constant. The wide-angle region has the
pi-stacking peak (Gaussian at 2 pi / d_stack) and the broad halo of molten chains. Counts are Poisson-distributed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..analysis.pxrd import pseudo_voigt
from ..analysis.saxs import _d_calc, _reflections


def lattice_metric(lattice: str, a_nm: float, b_nm: float | None = None, gamma_deg: float | None = None):
    """(A, B, C) of 1/d^2 = A h^2 + B k^2 + C h k for a lattice and its parameters."""
    if lattice == "lamellar":
        return (1.0 / a_nm**2, 0.0, 0.0)
    if lattice == "hexagonal":
        s = 4.0 / (3.0 * a_nm**2)
        return (s, s, s)
    if lattice == "rectangular":
        return (1.0 / a_nm**2, 1.0 / b_nm**2, 0.0)
    g = math.radians(gamma_deg)
    s2 = math.sin(g) ** 2
    return (1.0 / (a_nm**2 * s2), 1.0 / (b_nm**2 * s2), -2.0 * math.cos(g) / (a_nm * b_nm * s2))


def mesophase_curve(lattice: str, a_nm: float, *, rng: np.random.Generator, b_nm: float | None = None,
                    gamma_deg: float | None = None, n_reflections: int = 4, stacking_A: float | None = 3.5,
                    halo_A: float | None = 4.5, q_min: float = 0.8, q_max: float = 22.0, n_points: int = 1500,
                    peak_counts: float = 20000.0, width_per_nm: float = 0.04, skip: Sequence[str] = ()) -> pd.DataFrame:
    """I(q) of a mesophase, ``n_reflections`` lowest distinct spacings of the lattice (``skip``: hk labels left
    out, e.g. an extinct reflection), the stacking peak and the halo; columns ``q (1/nm)``, ``I ()``."""
    q = np.linspace(q_min, q_max, n_points)
    metric = lattice_metric(lattice, a_nm, b_nm, gamma_deg)
    seen: list[float] = []
    for hk in sorted(_reflections(lattice), key=lambda v: -_d_calc(metric, v)):
        d = _d_calc(metric, hk)
        if f"{hk[0]}{hk[1]}" in skip or any(abs(d - s) / s < 0.02 for s in seen):
            continue
        seen.append(d)
        if len(seen) >= n_reflections:
            break
    y = 50.0 * (q / q_min) ** -3 + 40.0
    for i, d in enumerate(seen):
        qk = 2 * math.pi / d
        amp = peak_counts * (1.0 if i == 0 else 0.06 * 0.6 ** (i - 1))
        y += amp * pseudo_voigt(q, qk, 2.0 * width_per_nm, eta=0.3)
    if halo_A:
        y += 400.0 * np.exp(-0.5 * ((q - 2 * math.pi / (halo_A / 10)) / 1.6) ** 2)
    if stacking_A:
        y += 250.0 * np.exp(-0.5 * ((q - 2 * math.pi / (stacking_A / 10)) / 0.25) ** 2)
    counts = rng.poisson(y).astype(float)
    return pd.DataFrame({"q (1/nm)": np.round(q, 5), "I ()": counts})
