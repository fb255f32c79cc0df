"""Synthetic variable-temperature rate tables (upload kind ``nmr_rates``).

Rates follow the Eyring equation (Eyring, J. Chem. Phys. 3, 107 (1935),
doi:10.1063/1.1749604) with kappa = 1, as if obtained from NMR line-shape fits.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from server.analysis.constants import H_J_S, KB_J_K, R_J_MOLK
from server.errors import AnalysisError

T_COLUMN = "T (K)"
K_COLUMN = "k (1/s)"


def rate_table(
    dh_kJ_mol: float,
    ds_J_molK: float,
    t_K_values: Sequence[float],
    *,
    noise_rel: float = 0.05,
    rng: np.random.Generator | None = None,
) -> pd.DataFrame:
    """Rate constants at the given temperatures from dH and dS, with relative noise.

    Parameters
    ----------
    dh_kJ_mol : float
        Enthalpy of activation, kJ/mol.
    ds_J_molK : float
        Entropy of activation, J/(mol K).
    t_K_values : sequence of float
        Temperatures, K (> 0).
    noise_rel : float, optional
        Relative standard deviation of k (default 5 %). The noise is log-normal,
        k_noisy = k exp(noise_rel * N(0, 1)), so k stays positive and ln k (what the
        Eyring plot uses) gets Gaussian noise of standard deviation ``noise_rel``.
        0 gives exact values.
    rng : numpy.random.Generator, optional
        Source of noise; default ``numpy.random.default_rng(0)``, so output is
        reproducible unless a generator is passed.

    Returns
    -------
    pandas.DataFrame
        Columns ``"T (K)"`` and ``"k (1/s)"`` (the file headers of an ``nmr_rates``
        upload); ``frame.attrs["metadata"]`` holds the model parameters as strings,
        ready for ``# key: value`` lines.
    """
    for name, value in (("dh_kJ_mol", dh_kJ_mol), ("ds_J_molK", ds_J_molK), ("noise_rel", noise_rel)):
        if not math.isfinite(float(value)):
            raise AnalysisError(f"{name} must be finite, got {value!r}", field=name)
    if noise_rel < 0:
        raise AnalysisError(f"noise_rel cannot be negative, got {noise_rel:g}", field="noise_rel")
    t = np.asarray(list(t_K_values), dtype=float)
    if t.size == 0:
        raise AnalysisError("give at least one temperature", field="t_K_values")
    if not np.all(np.isfinite(t)) or np.any(t <= 0):
        raise AnalysisError("temperatures must be finite and above 0 K", field="t_K_values")
    gen = rng if rng is not None else np.random.default_rng(0)
    dg_J = dh_kJ_mol * 1e3 - t * ds_J_molK
    k = KB_J_K * t / H_J_S * np.exp(-dg_J / (R_J_MOLK * t))
    if noise_rel > 0:
        k = k * np.exp(noise_rel * gen.standard_normal(t.size))
    frame = pd.DataFrame({T_COLUMN: t, K_COLUMN: k})
    frame.attrs["metadata"] = {
        "model": "Eyring, kappa = 1",
        "dh_kJ_mol": f"{float(dh_kJ_mol):g}",
        "ds_J_molK": f"{float(ds_J_molK):g}",
        "noise_rel": f"{float(noise_rel):g}",
    }
    return frame
