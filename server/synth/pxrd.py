"""Synthetic powder patterns: lines simulated from CIFs, mixed, broadened, on a background, with counting noise.

Each phase contributes the kinematic pattern of its structure (:func:`server.analysis.pxrd.simulate`:
m |F|^2 Lp per line, pseudo-Voigt peaks) scaled by its weight; the detector sees the sum plus a
background that falls off from low angles and an amorphous hump near 20 deg, shifted by a zero error,
and the counts are Poisson-distributed (counting statistics, Pecharsky and Zavalij 2009, ch. 4).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..analysis.pxrd import simulate


def powder_pattern(phases: Sequence[tuple[bytes, float]], *, rng: np.random.Generator, wavelength_A: float = 1.540593,
                   two_theta_min_deg: float = 4.0, two_theta_max_deg: float = 40.0, step_deg: float = 0.01,
                   fwhm_deg: float = 0.10, zero_shift_deg: float = 0.0, peak_counts: float = 5000.0,
                   background_counts: float = 150.0, lattice_strain: float = 0.0) -> pd.DataFrame:
    """A pattern of the ``phases`` (CIF bytes, weight), in counts per step.

    ``lattice_strain`` scales every d by (1 + strain) (thermal expansion between two temperatures of one
    phase). The strongest peak of the mixture reaches about ``peak_counts`` above the background.
    """
    x = np.arange(two_theta_min_deg, two_theta_max_deg + step_deg / 2, step_deg)
    y = np.zeros_like(x)
    for cif, weight in phases:
        sim = simulate(cif, wavelength_A=wavelength_A * (1.0 + lattice_strain) ** -1,
                       two_theta_min_deg=max(two_theta_min_deg - 2, 0.5), two_theta_max_deg=two_theta_max_deg + 2)
        y += weight * sim.profile(x, fwhm_deg, zero_shift_deg)
    if y.max() > 0:
        y *= peak_counts / y.max()
    bkg = background_counts * (0.6 + 0.4 * np.exp(-(x - x[0]) / 8.0)) + 0.3 * background_counts * np.exp(
        -0.5 * ((x - 20.0) / 4.0) ** 2)
    counts = rng.poisson(np.clip(y + bkg, 0, None)).astype(float)
    return pd.DataFrame({"2theta (deg)": np.round(x, 4), "I ()": counts})
