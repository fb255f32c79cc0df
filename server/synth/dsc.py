"""Synthetic DSC traces: a sloped baseline plus transition peaks of prescribed enthalpy.

Each transition adds a peak whose area is exactly its enthalpy: the heat flow per gram
is dH * beta * g(T), with g a unit-area shape in K and beta the scan rate in K/s, so
integral Phi dt = dH. Shapes (``kind``), with u the distance from ``t_K`` in the
direction of the scan (K):

* ``"melting"``: the classic first-order DSC peak of a pure substance, a linear rise from
  the onset ``t_K`` over ``width_K`` (thermal-resistance-limited) and an exponential
  return with decay ``width_K / 2``; the extrapolated onset is exactly ``t_K``;
* ``"gaussian"``: symmetric, centred on ``t_K``, full width at half maximum ``width_K``;
* ``"lambda"``: a slow exponential rise (scale ``width_K``) up to ``t_K`` and a sharp
  drop over ``width_K / 10``, as at an order-disorder (lambda) transition.

On cooling (``heating=False``) each transition is crossed the other way: its heat is
released (exothermic peak) and the shape runs in the scan direction, so a "melting"
peak becomes a freezing peak with its sharp edge first. Supercooling is not modelled.

References
----------
G. W. H. Hoehne, W. F. Hemminger and H.-J. Flammersheim, Differential Scanning
Calorimetry, 2nd ed., Springer 2003, ch. 5 (peak shape of a melting pure substance).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd


def _shape_per_K(u: np.ndarray, kind: str, width_K: float) -> np.ndarray:
    """Unit-area peak shape (1/K) against the distance u (K) from t_K along the scan."""
    w = float(width_K)
    if not w > 0:
        raise ValueError("width_K must be positive")
    g = np.zeros_like(u)
    if kind == "melting":
        tau = w / 2.0
        rise = (u >= 0) & (u <= w)
        tail = u > w
        g[rise] = u[rise] / w
        g[tail] = np.exp(-(u[tail] - w) / tau)
        return g / (w / 2.0 + tau)
    if kind == "gaussian":
        sigma = w / (2.0 * math.sqrt(2.0 * math.log(2.0)))
        return np.exp(-0.5 * (u / sigma) ** 2) / (sigma * math.sqrt(2.0 * math.pi))
    if kind == "lambda":
        drop = w / 10.0
        left = u <= 0
        right = (u > 0) & (u < drop)
        g[left] = np.exp(u[left] / w)
        g[right] = 1.0 - u[right] / drop
        return g / (w + drop / 2.0)
    raise ValueError(f"kind must be 'melting', 'gaussian' or 'lambda', got {kind!r}")


def _fraction(u: np.ndarray, g: np.ndarray) -> np.ndarray:
    """The fraction transformed along the scan: the cumulative area of the unit-area shape ``g`` over ``u``
    (samples in scan order, so ``u`` increases), 0 before the transition and 1 after it."""
    area = np.concatenate(([0.0], np.cumsum(0.5 * (g[1:] + g[:-1]) * np.diff(u))))
    return area / area[-1] if area[-1] > 0 else area


def dsc_trace(
    transitions: Sequence[Mapping[str, float | str]],
    *,
    t_start_K: float,
    t_end_K: float,
    rate_K_min: float = 10.0,
    mass_mg: float = 5.0,
    baseline_mW: float = 0.0,
    baseline_slope: float = 0.0,
    noise_mW: float = 0.0,
    rng: np.random.Generator | None = None,
    heating: bool = True,
    sample_interval_s: float = 0.5,
    endo: str = "up",
) -> pd.DataFrame:
    """A DSC run at constant rate in the upload format.

    Parameters
    ----------
    transitions : sequence of mappings
        Each with ``t_K`` (onset for "melting", centre for "gaussian", peak for "lambda"),
        ``dh_J_g`` (enthalpy of the transition as crossed on heating, J/g; > 0 endothermic),
        ``width_K`` and ``kind`` (module docstring; default "melting"); optional ``step_mW``, the change of
        the baseline across the transition (a heat-capacity step, mW), which follows the fraction
        transformed, so the true enthalpy is the area above that sigmoidal baseline.
    t_start_K, t_end_K : float
        Start and end of the scan; t_end_K > t_start_K on heating, < on cooling.
    rate_K_min : float
        Scan rate (K/min, positive).
    mass_mg : float
        Sample mass (mg); heat flow in mW = W/g x mg.
    baseline_mW, baseline_slope : float
        Baseline at ``t_start_K`` (mW) and its slope (mW/K).
    noise_mW : float
        Standard deviation of white noise (mW).
    rng : numpy.random.Generator, optional
        Noise source; ``default_rng(0)`` when None.
    heating : bool
        Heating (True) or cooling (False) scan.
    sample_interval_s : float
        Time between samples (s).
    endo : {"up", "down"}
        Sign convention of the written heat flow.

    Returns
    -------
    pandas.DataFrame
        Columns "T (K)", "t (s)", "heat flow (mW)"; ``frame.attrs`` holds the conditions
        (``mass_mg``, ``rate_K_min``, ``endo``) and the transitions, units in the key names.
    """
    if rate_K_min <= 0 or mass_mg <= 0 or sample_interval_s <= 0:
        raise ValueError("rate_K_min, mass_mg and sample_interval_s must be positive")
    direction = 1.0 if heating else -1.0
    if direction * (t_end_K - t_start_K) <= 0:
        raise ValueError("t_end_K must be above t_start_K on heating and below it on cooling")
    if endo not in ("up", "down"):
        raise ValueError("endo must be 'up' or 'down'")
    rng = rng if rng is not None else np.random.default_rng(0)
    beta_K_s = rate_K_min / 60.0
    duration_s = abs(t_end_K - t_start_K) / beta_K_s
    t_s = np.arange(0.0, duration_s + 0.5 * sample_interval_s, sample_interval_s)
    T = t_start_K + direction * beta_K_s * t_s
    phi_W_g = np.zeros_like(T)
    steps_mW = np.zeros_like(T)
    for tr in transitions:
        kind = str(tr.get("kind", "melting"))
        u = direction * (T - float(tr["t_K"]))
        # Crossed on cooling, the transition runs backwards and gives its heat back.
        g = _shape_per_K(u, kind, float(tr["width_K"]))
        phi_W_g += direction * float(tr["dh_J_g"]) * beta_K_s * g
        if tr.get("step_mW"):
            # The heat capacity changes with the fraction transformed, so the baseline steps as the
            # cumulative area of the peak (Hoehne et al. 2003, ch. 5, the sigmoidal baseline).
            steps_mW += float(tr["step_mW"]) * _fraction(u, g)
    hf_mW = phi_W_g * mass_mg + baseline_mW + baseline_slope * (T - t_start_K) + steps_mW
    if noise_mW > 0:
        hf_mW = hf_mW + noise_mW * rng.standard_normal(len(T))
    if endo == "down":
        hf_mW = -hf_mW
    frame = pd.DataFrame({"T (K)": T, "t (s)": t_s, "heat flow (mW)": hf_mW})
    frame.attrs.update(
        model="linear baseline + unit-area peak shapes scaled to dH (Hoehne et al. 2003)",
        mass_mg=float(mass_mg),
        rate_K_min=float(rate_K_min),
        endo=endo,
        heating=bool(heating),
        transitions=[dict(tr) for tr in transitions],
        baseline_mW=float(baseline_mW),
        baseline_slope_mW_K=float(baseline_slope),
        noise_mW=float(noise_mW),
    )
    return frame


def heat_cool_trace(
    heating: Sequence[Mapping[str, float | str]],
    cooling: Sequence[Mapping[str, float | str]],
    *,
    t_low_K: float,
    t_high_K: float,
    rng: np.random.Generator,
    baseline_slope: float = 0.0,
    **run: float | str,  # rate_K_min, mass_mg, baseline_mW, noise_mW, sample_interval_s, endo as for dsc_trace
) -> pd.DataFrame:
    """One file of a heating run from ``t_low_K`` to ``t_high_K`` and the cooling run straight back, as an
    instrument writes a heat-cool programme: the time runs on, and the cooling baseline starts where the
    heating one ended and slopes back. ``cooling`` lists the transitions as met on cooling (their ``t_K``
    below the heating ones where the transition supercools; the model itself has no supercooling)."""
    start_mW = float(run.pop("baseline_mW", 0.0))
    heat = dsc_trace(heating, t_start_K=t_low_K, t_end_K=t_high_K, baseline_mW=start_mW,
                     baseline_slope=baseline_slope, rng=rng, **run)
    cool = dsc_trace(cooling, t_start_K=t_high_K, t_end_K=t_low_K, heating=False,
                     baseline_mW=start_mW + baseline_slope * (t_high_K - t_low_K), baseline_slope=-baseline_slope,
                     rng=rng, **run)
    cool["t (s)"] += heat["t (s)"].iloc[-1] + float(run.get("sample_interval_s", 0.5))
    frame = pd.concat([heat, cool.iloc[1:]], ignore_index=True)
    frame.attrs.update(heat.attrs, heating=None, transitions_cooling=[dict(tr) for tr in cooling])
    return frame
