"""Synthetic SHG temperature runs: the signal of a second-order ferroelectric vanishing at Tc.

The second-harmonic intensity goes as chi(2)^2, and chi(2) is proportional to the spontaneous polarisation in
the ferroelectric phase (Boyd, Nonlinear Optics, 2008, ch. 1; Lines and Glass 1977, ch. 1), so with the Landau
order parameter Ps ~ (Tc - T)^beta the ratio to the reference is r0 ((Tc - T)/(Tc - T0))^(2 beta) below Tc and
zero above, plus a detector floor and a few percent of multiplicative noise.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def shg_run(t_K, *, tc_K: float, ratio_at_first: float, rng: np.random.Generator, beta: float = 0.5,
            floor: float = 0.002, noise: float = 0.03) -> pd.DataFrame:
    """Columns ``T (K)`` and ``SHG/ref ()`` for the temperatures ``t_K`` (in the order given)."""
    t = np.asarray(t_K, dtype=float)
    t0 = float(t.min())
    shape = np.where(t < tc_K, np.clip((tc_K - t) / (tc_K - t0), 0, None) ** (2 * beta), 0.0)
    ratio = ratio_at_first * shape * (1 + noise * rng.standard_normal(len(t))) + floor * rng.random(len(t))
    return pd.DataFrame({"T (K)": np.round(t, 2), "SHG/ref ()": np.round(np.clip(ratio, 0, None), 5)})
