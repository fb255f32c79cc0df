"""Fits across a measurement series: Pr(T) near a ferroelectric transition, Ec(T) and Ec(f).

Pr(T) is fitted with the order-parameter law of Landau mean-field theory,
``Pr = A (Tc - T)^beta`` below Tc (zero above), leaving ``beta`` free: mean-field theory gives
beta = 1/2 for a continuous (second-order) transition (Lines and Glass 1977, ch. 3). A
polarization that falls from a large value to zero between two neighbouring temperatures is
the signature of a first-order transition; the power law then describes only the continuous
part, and its Tc and beta are apparent values.

Ec(T) is described by a straight line (the slope in kV/cm per K) and Ec(f) by a power law
``Ec = C f^alpha`` (a straight line in log-log), the empirical description commonly used for
the frequency dependence of the coercive field of ferroelectric films and ceramics
(e.g. Scott, *Ferroelectric Memories*, Springer 2000, ch. 5; cited from memory). Both are
descriptions of the data, not physical models, and say so in their results.

References
----------
M. E. Lines and A. M. Glass, *Principles and Applications of Ferroelectrics and Related
Materials*, Oxford: Clarendon Press, 1977, ch. 3 (Landau-Devonshire theory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Optional, Sequence

import numpy as np
from scipy.optimize import curve_fit

from .results import Flag

METHOD = ("Pr(T) fitted with the Landau order-parameter law Pr = A (Tc - T)^beta (Lines and Glass 1977, ch. 3), "
          "first-order jumps reported; Ec(T) linear and Ec(f) power-law descriptions")
VERSION = "series/1.0"

#: Below this fraction of the series' largest Pr a loop counts as not switching (our own
#: threshold: a few per cent is above the noise of the loops the group records).
SWITCHING_FRACTION = 0.05
#: A last switching Pr above this fraction of the largest Pr, followed by no switching at the
#: next temperature, is reported as a jump (our own threshold).
JUMP_FRACTION = 0.3
MIN_POWER_LAW_POINTS = 4  # three parameters and at least one degree of freedom


def _power_law(t_K: np.ndarray, a: float, tc_K: float, beta: float) -> np.ndarray:
    return a * np.clip(tc_K - t_K, 0.0, None) ** beta


@dataclass(frozen=True)
class PrTemperatureFit:
    """Result of :func:`fit_pr_temperature`; ``None`` where the value is undefined."""

    points: int
    switching_points: int
    tc_K: Optional[float] = None
    tc_err_K: Optional[float] = None
    beta: Optional[float] = None
    beta_err: Optional[float] = None
    a_uC_cm2: Optional[float] = None
    apparent: bool = False
    first_order: bool = False
    jump_from_K: Optional[float] = None
    jump_to_K: Optional[float] = None
    jump_pr_uC_cm2: Optional[float] = None
    tc_bracket_K: Optional[tuple[float, float]] = None
    flags: tuple[Flag, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"model": "Pr = A (Tc - T)^beta", "points": self.points, "switching_points": self.switching_points,
                "tc_K": self.tc_K, "tc_err_K": self.tc_err_K, "beta": self.beta, "beta_err": self.beta_err,
                "a_uC_cm2": self.a_uC_cm2, "apparent": self.apparent, "first_order": self.first_order,
                "jump_from_K": self.jump_from_K, "jump_to_K": self.jump_to_K,
                "jump_pr_uC_cm2": self.jump_pr_uC_cm2,
                "tc_bracket_K": list(self.tc_bracket_K) if self.tc_bracket_K else None,
                "flags": [f.to_dict() for f in self.flags]}


def fit_pr_temperature(t_K: Sequence[float], pr_uC_cm2: Sequence[float]) -> PrTemperatureFit:
    """Fit ``Pr = A (Tc - T)^beta`` to remanent polarizations measured at several temperatures.

    Parameters
    ----------
    t_K : sequence of float
        Measurement temperatures, K (any order; heating or cooling runs are fitted separately
        by the caller).
    pr_uC_cm2 : sequence of float
        Remanent polarization of each loop, µC/cm² (zero or near zero above Tc).

    Returns
    -------
    PrTemperatureFit
        Tc (K), beta and A with standard errors from the fit's covariance matrix. Loops below
        ``SWITCHING_FRACTION`` of the largest Pr are "not switching": they bound Tc from above
        (Tc lies between the last switching and the first non-switching temperature,
        ``tc_bracket_K``) but are not fitted. Fewer than four switching loops: no fit, a flag.
        A last switching Pr of at least ``JUMP_FRACTION`` of the largest, followed by a
        non-switching loop: ``first_order`` and the fitted values are ``apparent``.

    References
    ----------
    Lines and Glass 1977, ch. 3: Landau theory of a continuous transition, Ps ∝ (Tc - T)^(1/2).
    """
    t = np.asarray(t_K, dtype=float)
    pr = np.asarray(pr_uC_cm2, dtype=float)
    keep = np.isfinite(t) & np.isfinite(pr)
    t, pr = t[keep], np.abs(pr[keep])
    order = np.argsort(t)
    t, pr = t[order], pr[order]
    flags: list[Flag] = []
    if t.size == 0 or pr.max() <= 0:
        return PrTemperatureFit(points=int(t.size), switching_points=0, flags=(Flag(
            "no_switching", "no loop of the series switches: there is no Pr(T) to fit"),))
    switching = pr > SWITCHING_FRACTION * pr.max()
    # Everything at or above the first non-switching temperature above a switching one is "above Tc".
    t_sw, pr_sw = t[switching], pr[switching]
    last_sw = t_sw.max()
    above = t[(~switching) & (t > last_sw)]
    upper = float(above.min()) if above.size else None
    bracket = (float(last_sw), upper) if upper is not None else None

    first_order = False
    jump = {}
    if upper is not None:
        pr_last = float(pr_sw[np.argmax(t_sw)])
        if pr_last >= JUMP_FRACTION * pr.max():
            first_order = True
            jump = {"jump_from_K": float(last_sw), "jump_to_K": upper, "jump_pr_uC_cm2": pr_last}
            flags.append(Flag("first_order_jump", (
                f"Pr falls from {pr_last:.3g} µC/cm² at {last_sw:.4g} K to no switching at {upper:.4g} K: "
                "a jump, the signature of a first-order transition; the power-law Tc and beta are apparent")))

    if t_sw.size < MIN_POWER_LAW_POINTS:
        flags.append(Flag("too_few_points", (
            f"{t_sw.size} switching loops; fitting Tc, beta and A needs at least {MIN_POWER_LAW_POINTS}")))
        return PrTemperatureFit(points=int(t.size), switching_points=int(t_sw.size), first_order=first_order,
                                tc_bracket_K=bracket, flags=tuple(flags), **jump)

    span = float(t_sw.max() - t_sw.min()) or 1.0
    tc_lo = float(last_sw) + 1e-6 * max(1.0, abs(float(last_sw)))
    tc_hi = upper if upper is not None else float(last_sw) + 2.0 * span
    tc0 = min(float(last_sw) + 0.1 * span, 0.5 * (tc_lo + tc_hi))
    a0 = float(pr_sw.max()) / math.sqrt(max(tc0 - float(t_sw.min()), 1e-9))
    try:
        popt, pcov = curve_fit(_power_law, t_sw, pr_sw, p0=(a0, tc0, 0.5),
                               bounds=([0.0, tc_lo, 0.01], [np.inf, tc_hi, 3.0]), maxfev=20000)
    except (RuntimeError, ValueError) as exc:
        flags.append(Flag("fit_failed", f"the power law could not be fitted: {exc}"))
        return PrTemperatureFit(points=int(t.size), switching_points=int(t_sw.size), first_order=first_order,
                                tc_bracket_K=bracket, flags=tuple(flags), **jump)
    a, tc, beta = (float(v) for v in popt)
    errs = np.sqrt(np.diag(pcov)) if np.all(np.isfinite(pcov)) else np.full(3, np.nan)
    a_err, tc_err, beta_err = (float(e) if math.isfinite(e) else None for e in errs)
    if tc_err is None or beta_err is None:
        flags.append(Flag("errors_undefined", "the fit's covariance is undefined: no standard errors are reported"))
    if math.isclose(tc, tc_hi, rel_tol=1e-6) or math.isclose(tc, tc_lo, rel_tol=1e-6):
        flags.append(Flag("tc_at_bound", (
            f"the fitted Tc sits at the edge of the range the data allow ({tc_lo:.4g}-{tc_hi:.4g} K): "
            "measure closer to the transition")))
    if upper is None:
        flags.append(Flag("tc_extrapolated", "no loop above Tc was measured: Tc is extrapolated from below"))
    return PrTemperatureFit(points=int(t.size), switching_points=int(t_sw.size), tc_K=tc, tc_err_K=tc_err,
                            beta=beta, beta_err=beta_err, a_uC_cm2=a, apparent=first_order,
                            first_order=first_order, tc_bracket_K=bracket, flags=tuple(flags), **jump)


@dataclass(frozen=True)
class EcTrend:
    """Result of :func:`fit_ec_trend`: a description of Ec against the swept variable."""

    variable: str
    points: int
    slope: Optional[float] = None
    slope_err: Optional[float] = None
    unit: str = ""
    model: str = ""
    flags: tuple[Flag, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"variable": self.variable, "model": self.model, "points": self.points, "slope": self.slope,
                "slope_err": self.slope_err, "slope_unit": self.unit, "flags": [f.to_dict() for f in self.flags]}


def fit_ec_trend(x: Sequence[float], ec_kV_cm: Sequence[float], *, variable: str) -> EcTrend:
    """Ec against temperature (line, slope in kV/cm/K) or frequency (power law, exponent alpha).

    Parameters
    ----------
    x : sequence of float
        Temperatures in K (``variable="temperature"``) or frequencies in Hz (``"frequency"``).
    ec_kV_cm : sequence of float
        Coercive fields, kV/cm (missing values are left out).
    variable : {"temperature", "frequency"}

    Returns
    -------
    EcTrend
        Slope and standard error from a least-squares line (log10 Ec against log10 f for
        frequency); fewer than three points or a single distinct x: no slope, a flag.
    """
    xs = np.asarray(x, dtype=float)
    ys = np.asarray([np.nan if v is None else v for v in ec_kV_cm], dtype=float)
    keep = np.isfinite(xs) & np.isfinite(ys) & (ys > 0)
    xs, ys = xs[keep], ys[keep]
    if variable == "frequency":
        keep = xs > 0
        xs, ys = np.log10(xs[keep]), np.log10(ys[keep])
        model, unit = "Ec = C f^alpha (empirical)", "alpha (dimensionless)"
    elif variable == "temperature":
        model, unit = "Ec = Ec0 + s T (empirical line)", "kV/cm/K"
    else:
        raise ValueError(f"Ec trends are fitted against temperature or frequency, not {variable!r}")
    if xs.size < 3 or np.unique(xs).size < 2:
        return EcTrend(variable, int(xs.size), model=model, unit=unit, flags=(Flag(
            "too_few_points", f"{xs.size} coercive fields; a trend needs at least 3 at 2 different values"),))
    coef, cov = np.polyfit(xs, ys, 1, cov=True) if xs.size > 3 else (np.polyfit(xs, ys, 1), None)
    slope = float(coef[0])
    slope_err = float(math.sqrt(cov[0, 0])) if cov is not None and math.isfinite(cov[0, 0]) else None
    flags = () if slope_err is not None else (Flag(
        "errors_undefined", "three points leave one degree of freedom: no standard error is reported"),)
    return EcTrend(variable, int(xs.size), slope=slope, slope_err=slope_err, model=model, unit=unit, flags=flags)


def combine_tc(fits: Sequence[PrTemperatureFit]) -> Optional[dict[str, Any]]:
    """A compound-level Curie temperature from several Pr(T) fits: the inverse-variance weighted
    mean of the fitted Tc values that have a standard error (Bevington and Robinson, *Data
    Reduction and Error Analysis*, 3rd ed., 2003, eq. 4.17-4.19). Apparent (first-order) fits
    make the estimate apparent. None when no fit has a Tc with an error."""
    usable = [f for f in fits if f.tc_K is not None and f.tc_err_K]
    if not usable:
        return None
    w = np.array([1.0 / f.tc_err_K ** 2 for f in usable])
    tc = np.array([f.tc_K for f in usable])
    mean = float(np.sum(w * tc) / np.sum(w))
    err = float(1.0 / math.sqrt(np.sum(w)))
    return {"tc_K": mean, "tc_err_K": err, "series": len(usable), "apparent": any(f.apparent for f in usable),
            "method": "inverse-variance weighted mean of the Pr(T) power-law fits"}
