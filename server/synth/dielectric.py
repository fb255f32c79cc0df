"""Synthetic permittivity scans: Curie-Weiss above Tc, Landau-Devonshire below.

The susceptibility chi = eps' - eps_inf follows

* above Tc: 1/chi = (T - T0)/C (Curie-Weiss);
* below Tc, by ``landau_order``:

  - ``"second"``: 1/chi = (Tc - T0)/C - 2 (T - Tc)/C (slope -2 x the slope above);
  - ``"tricritical"``: the same with -4;
  - ``"first"``: the stable ordered phase of the Landau-Devonshire free energy
    F = a (T - T0) P^2/2 + b P^4/4 + c P^6/6 with a = 1/C, b < 0, c > 0 chosen so the
    transition falls at Tc (Tc - T0 = 3 b^2 / (16 a c)); 1/chi jumps to 4 x its value
    above at Tc.

For ``"second"`` and ``"tricritical"`` Landau theory has T0 = Tc; if T0 < Tc is passed the
curve is kept continuous at Tc (a phenomenological extension). The divergence at Tc is
rounded: 1/chi -> sqrt((1/chi)^2 + (rounding_K / C)^2), which caps eps' near C / rounding_K.
Frequency dispersion (relaxor-like) shifts the whole curve of frequency f up by
``dispersion_K_per_decade * log10(f / f_lowest)`` (phenomenological; the lowest frequency
keeps the given parameters).

References
----------
M. E. Lines and A. M. Glass, Principles and Applications of Ferroelectrics and Related
Materials, Oxford University Press 1977, ch. 3 (Landau-Devonshire theory).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from server.analysis.constants import EPS0_F_M


_SLOPE_RATIO = {"second": -2.0, "tricritical": -4.0}


def inverse_susceptibility(
    t_K: np.ndarray, curie_constant_K: float, t0_K: float, tc_K: float, landau_order: str = "second"
) -> np.ndarray:
    """1/chi (dimensionless, chi = eps' - eps_inf) of the model described in the module docstring."""
    t = np.asarray(t_K, dtype=float)
    c = float(curie_constant_K)
    out = (t - t0_K) / c
    below = t < tc_K
    if landau_order in _SLOPE_RATIO:
        out[below] = (tc_K - t0_K) / c + _SLOPE_RATIO[landau_order] * (t[below] - tc_K) / c
    elif landau_order == "first":
        if not t0_K < tc_K:
            raise ValueError("a first-order transition needs T0 below Tc")
        a, cc = 1.0 / c, 1.0
        b = -math.sqrt(16.0 * a * cc * (tc_K - t0_K) / 3.0)
        x = a * (t[below] - t0_K)
        p2 = (-b + np.sqrt(b * b - 4.0 * cc * x)) / (2.0 * cc)
        out[below] = x + 3.0 * b * p2 + 5.0 * cc * p2 * p2
    else:
        raise ValueError(f"landau_order must be 'second', 'tricritical' or 'first', got {landau_order!r}")
    return out


def curie_weiss_scan(
    curie_constant_K: float,
    t0_K: float,
    tc_K: float,
    eps_inf: float,
    *,
    t_min_K: float,
    t_max_K: float,
    step_K: float,
    frequencies_Hz: Sequence[float] = (1.0e3,),
    dispersion_K_per_decade: float = 0.0,
    landau_order: str = "second",
    area_cm2: float = 0.1,
    thickness_um: float = 500.0,
    noise_rel: float = 0.0,
    rng: np.random.Generator | None = None,
    as_capacitance: bool = True,
    tan_delta: float = 0.01,
    rounding_K: float = 0.3,
) -> pd.DataFrame:
    """Permittivity against temperature at several frequencies, in the upload format.

    Parameters
    ----------
    curie_constant_K, t0_K, tc_K, eps_inf : float
        Curie constant C (K), Curie-Weiss temperature T0 (K), transition temperature Tc (K)
        and background permittivity.
    t_min_K, t_max_K, step_K : float
        Temperature grid (inclusive of both ends when they fall on the grid).
    frequencies_Hz : sequence of float
        Measuring frequencies.
    dispersion_K_per_decade : float
        Shift of the curve per decade of frequency (0 for a normal ferroelectric).
    landau_order : {"second", "tricritical", "first"}
        Shape below Tc (module docstring).
    area_cm2, thickness_um : float
        Parallel-plate geometry used to turn eps' into capacitance.
    noise_rel : float
        Relative Gaussian noise on eps' (or C) and on tan(delta).
    rng : numpy.random.Generator, optional
        Noise source; ``default_rng(0)`` when None, so scans are reproducible.
    as_capacitance : bool
        Columns "C (pF)" and "D ()" when True, else "eps_r ()" and "eps_i ()".
    tan_delta : float
        Loss tangent (constant, a background loss).
    rounding_K : float
        Rounding of the divergence at Tc (K).

    Returns
    -------
    pandas.DataFrame
        Long-format table, one row per (T, f), columns "T (K)", "f (Hz)", then
        "C (pF)", "D ()" or "eps_r ()", "eps_i ()". ``frame.attrs`` holds the conditions
        (``area_cm2``, ``thickness_um``) and the model parameters, units in the key names.
    """
    if step_K <= 0 or t_max_K <= t_min_K:
        raise ValueError("need t_max_K > t_min_K and step_K > 0")
    if not frequencies_Hz:
        raise ValueError("need at least one frequency")
    rng = rng if rng is not None else np.random.default_rng(0)
    t = np.arange(t_min_K, t_max_K + 0.5 * step_K, step_K)
    f_low = float(min(frequencies_Hz))
    rows = []
    for f in frequencies_Hz:
        shift = dispersion_K_per_decade * math.log10(float(f) / f_low)
        inv = inverse_susceptibility(t - shift, curie_constant_K, t0_K, tc_K, landau_order)
        inv = np.sqrt(inv * inv + (rounding_K / curie_constant_K) ** 2)
        eps = eps_inf + 1.0 / inv
        eps = eps * (1.0 + noise_rel * rng.standard_normal(len(t)))
        d = tan_delta * (1.0 + noise_rel * rng.standard_normal(len(t)))
        rows.append(pd.DataFrame({"T": t, "f": float(f), "eps": eps, "D": d}))
    data = pd.concat(rows, ignore_index=True).sort_values(["T", "f"], kind="stable").reset_index(drop=True)
    if as_capacitance:
        c_pF = data["eps"] * EPS0_F_M * (area_cm2 * 1e-4) / (thickness_um * 1e-6) * 1e12
        frame = pd.DataFrame({"T (K)": data["T"], "f (Hz)": data["f"], "C (pF)": c_pF, "D ()": data["D"]})
    else:
        frame = pd.DataFrame(
            {"T (K)": data["T"], "f (Hz)": data["f"], "eps_r ()": data["eps"], "eps_i ()": data["eps"] * data["D"]}
        )
    frame.attrs.update(
        model="Curie-Weiss above Tc, Landau-Devonshire below (Lines and Glass 1977)",
        area_cm2=float(area_cm2),
        thickness_um=float(thickness_um),
        curie_constant_K=float(curie_constant_K),
        t0_K=float(t0_K),
        tc_K=float(tc_K),
        eps_inf=float(eps_inf),
        landau_order=landau_order,
        dispersion_K_per_decade=float(dispersion_K_per_decade),
        noise_rel=float(noise_rel),
        tan_delta=float(tan_delta),
        rounding_K=float(rounding_K),
    )
    return frame
