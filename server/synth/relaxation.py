"""Synthetic dielectric spectra: a Havriliak-Negami relaxation whose time follows an Arrhenius law.

eps*(w) = eps_inf + d_eps / (1 + (i w tau)^alpha)^beta + sigma / (i eps0 w) at each temperature, with
tau(T) = tau0 exp(Ea / (R T)) (Havriliak and Negami, Polymer 8, 161 (1967); Cole-Cole for beta = 1 and Debye
for alpha = beta = 1; forms as in F. Kremer and A. Schoenhals, *Broadband Dielectric Spectroscopy*, Springer
2003, ch. 1). A bowl whose dipole turns over with the bowl relaxes this way in the solid. Noise is relative
and Gaussian on eps' and eps'' (or C and D); the set temperature drifts by ``drift_K`` within an isotherm, as a
cryostat's does.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from server.analysis.constants import EPS0_F_M, R_J_MOLK
from server.analysis.relaxation import havriliak_negami


def arrhenius_tau_s(t_K: float, tau0_s: float, ea_kJ_mol: float) -> float:
    """tau = tau0 exp(Ea / (R T))."""
    return tau0_s * math.exp(ea_kJ_mol * 1e3 / (R_J_MOLK * t_K))


def relaxation_spectra(
    temperatures_K: Sequence[float],
    *,
    tau0_s: float,
    ea_kJ_mol: float,
    d_eps: float,
    eps_inf: float,
    alpha: float = 1.0,
    beta: float = 1.0,
    sigma_S_m: float = 0.0,
    f_min_Hz: float = 0.1,
    f_max_Hz: float = 1e6,
    points_per_decade: int = 6,
    noise_rel: float = 0.0,
    drift_K: float = 0.0,
    rng: np.random.Generator | None = None,
    as_capacitance: bool = False,
    area_cm2: float = 0.1,
    thickness_um: float = 500.0,
) -> pd.DataFrame:
    """Permittivity against frequency at each temperature, in the upload format.

    Returns a long table, one row per (T, f), columns "T (K)", "f (Hz)" and "eps_r ()", "eps_i ()" (or "C (pF)",
    "D ()" for ``as_capacitance``, with the parallel-plate geometry ``area_cm2``, ``thickness_um``).
    """
    rng = rng if rng is not None else np.random.default_rng(0)
    decades = math.log10(f_max_Hz / f_min_Hz)
    f = np.logspace(math.log10(f_min_Hz), math.log10(f_max_Hz), int(round(decades * points_per_decade)) + 1)
    parts = []
    for t in temperatures_K:
        eps = havriliak_negami(f, eps_inf, d_eps, arrhenius_tau_s(t, tau0_s, ea_kJ_mol), alpha, beta, sigma_S_m)
        er = eps.real * (1.0 + noise_rel * rng.standard_normal(f.size))
        ei = -eps.imag * (1.0 + noise_rel * rng.standard_normal(f.size))
        tt = t + drift_K * rng.uniform(-1.0, 1.0, f.size)
        parts.append(pd.DataFrame({"T": tt, "f": f, "er": er, "ei": ei}))
    d = pd.concat(parts, ignore_index=True)
    if as_capacitance:
        c_pF = d["er"] * EPS0_F_M * (area_cm2 * 1e-4) / (thickness_um * 1e-6) * 1e12
        return pd.DataFrame({"T (K)": d["T"], "f (Hz)": d["f"], "C (pF)": c_pF, "D ()": d["ei"] / d["er"]})
    return pd.DataFrame({"T (K)": d["T"], "f (Hz)": d["f"], "eps_r ()": d["er"], "eps_i ()": d["ei"]})
