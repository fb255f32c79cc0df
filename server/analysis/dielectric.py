"""Dielectric permittivity against temperature and frequency: peak, dispersion, Curie-Weiss, Landau.

A ferroelectric transition shows as a maximum of the real permittivity eps' against
temperature. This module takes a long-format table (one row per temperature and
frequency) and reports

* the permittivity maximum at each frequency (``t_peak_K``, ``eps_peak``), refined by the
  parabola through the largest sample and its two neighbours;
* the spread of the peak temperatures over frequency (``dispersion_K``), a relaxor hint;
* tan delta = eps''/eps' at each maximum (``tan_delta_peak``);
* for a maximum that moves with frequency, a Vogel-Fulcher fit of T_m(f) (Cross 1987);
* a Curie-Weiss fit above the peak at the least lossy frequency (``cw_frequency_Hz``),
  eps' = eps_inf + C / (T - T0), with eps_inf fitted as well; no numbers from a fit
  whose C, T0 or eps_inf cannot be physical;
* the Landau ratio of the slopes of 1/eps below and above the peak (-2 for a
  second-order transition, -4 at a tricritical point);
* an order-of-magnitude hint from C: about 1e3 K for order-disorder, about 1e5 K for
  displacive ferroelectrics.

Permittivity comes either directly (``eps_r``, optional ``eps_i``) or from a parallel-plate
capacitance (``C_F`` with ``tan_delta``): eps' = C d / (eps0 A), eps'' = eps' tan(delta).
eps0 is the CODATA 2018 value.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit

from server.analysis.results import Flag, Result
from server.analysis.constants import EPS0_F_M, R_J_MOLK
from server.errors import AnalysisError

METHOD = (
    "Parallel-plate permittivity eps' = C d/(eps0 A); peak per frequency by local parabolic "
    "refinement; Curie-Weiss fit eps' = eps_inf + C/(T - T0) above the peak at the least lossy "
    "frequency and the Landau 1/eps slope ratio (Lines and Glass, Principles and Applications of "
    "Ferroelectrics and Related Materials, OUP 1977); Vogel-Fulcher fit of a frequency-dependent "
    "maximum (Cross, Ferroelectrics 76, 241 (1987))."
)
VERSION = "dielectric/1.1"


# Fewer samples than this at one frequency cannot locate a peak and fit both sides.
MIN_POINTS = 7
# The Curie-Weiss fit has 3 parameters; ask for at least 2 degrees of freedom.
CW_MIN_POINTS = 5
# Near the maximum eps' is rounded (finite-size, defects, critical fluctuations) and
# Curie-Weiss does not hold; start the fit a margin above the peak: 5 K or three
# temperature steps, whichever is larger (common practice).
CW_MARGIN_K = 5.0
CW_MARGIN_STEPS = 3
# Linear 1/eps windows for the Landau slope ratio: this many kelvin on each side of the
# peak, beyond the same margin (Landau theory holds near Tc only; common practice).
LANDAU_WINDOW_K = 20.0
LANDAU_MIN_POINTS = 3
# A shift of the peak temperature over the measured frequencies above 2 K (or above one
# temperature step, if coarser) is read as frequency dispersion, the relaxor signature;
# conventional ferroelectrics shift by well under 1 K over several decades (common practice).
DISPERSION_THRESHOLD_K = 2.0
# Order-of-magnitude windows for the Curie constant (Lines and Glass 1977, memory):
# order-disorder about 1e3 K, displacive about 1e5 K. The gap between them is "unclear".
ORDER_DISORDER_C_K = (1.0e2, 7.0e3)
DISPLACIVE_C_K = (3.0e4, 1.0e6)
POOR_FIT_R2 = 0.98
# A Curie constant above this is no physical Curie-Weiss law for a molecular crystal (the
# largest displacive ones are of order 1e5 K; common practice): the fit is not reported.
CW_C_MAX_K = DISPLACIVE_C_K[1]
# The Vogel-Fulcher fit of T_m(f) has three parameters; ask for one degree of freedom.
VF_MIN_FREQUENCIES = 4


@dataclass(frozen=True)
class DielectricPeak(Result):
    """Permittivity maximum at one frequency; ``t_peak_K`` is None when it lies at a range edge."""

    f_Hz: float | None
    t_peak_K: float | None
    eps_peak: float
    at_edge: str | None  # None, "low" or "high"
    n_points: int
    tan_delta_peak: float | None = None  # eps''/eps' at the maximum of eps'


@dataclass(frozen=True)
class DielectricResult(Result):
    """Result of :func:`analyse_dielectric`; ``curves`` holds the plot arrays (not in ``to_dict``)."""

    JSON_OMIT = ("curves",)  # plot data

    peaks: tuple[DielectricPeak, ...]
    t_peak_K: float | None
    eps_peak: float | None
    dispersion_K: float | None
    curie_constant_K: float | None
    curie_constant_err_K: float | None
    t0_K: float | None
    t0_err_K: float | None
    eps_inf: float | None
    eps_inf_err: float | None
    fit_r2: float | None
    fit_t_min_K: float | None
    fit_t_max_K: float | None
    fit_points: int
    landau_slope_ratio: float | None
    transition_hint: str
    frequencies: tuple[float | None, ...]
    points: int
    flags: tuple[Flag, ...] = ()
    curves: dict[str, Any] | None = field(default=None, repr=False, compare=False)
    tan_delta_peak: float | None = None
    cw_frequency_Hz: float | None = None
    vf_ea_kJ_mol: float | None = None
    vf_ea_err_kJ_mol: float | None = None
    vf_t_K: float | None = None
    vf_t_err_K: float | None = None
    vf_f0_Hz: float | None = None
    vf_log10_f0_err: float | None = None
    t_min_K: float | None = None  # the temperature range the run scanned (for the phase model)
    t_max_K: float | None = None


# --------------------------------------------------------------------------- helpers


def permittivity_from_capacitance(c_F: Any, *, area_cm2: float, thickness_um: float) -> np.ndarray:
    """Real relative permittivity of a parallel-plate capacitor, eps' = C d / (eps0 A).

    Parameters
    ----------
    c_F : array_like
        Capacitance, F.
    area_cm2 : float
        Electrode area, cm^2.
    thickness_um : float
        Sample thickness (electrode separation), um.

    Returns
    -------
    numpy.ndarray
        eps' (dimensionless). Fringing fields are neglected (plate size >> thickness).

    References
    ----------
    Any electromagnetism text, e.g. J. D. Jackson, Classical Electrodynamics, 3rd ed.,
    Wiley 1999, sect. 1.13; eps0 from CODATA 2018.
    """
    area_m2 = float(area_cm2) * 1e-4
    d_m = float(thickness_um) * 1e-6
    return np.asarray(c_F, dtype=float) * d_m / (EPS0_F_M * area_m2)


def curie_weiss(t_K: Any, curie_constant_K: float, t0_K: float, eps_inf: float) -> np.ndarray:
    """Curie-Weiss law eps'(T) = eps_inf + C / (T - T0) (for T > T0)."""
    return eps_inf + curie_constant_K / (np.asarray(t_K, dtype=float) - t0_K)


def transition_hint(curie_constant_K: float | None) -> str:
    """Order-of-magnitude reading of the Curie constant.

    Returns "order_disorder" for C in [1e2, 7e3] K, "displacive" for C in [3e4, 1e6] K,
    "unclear" otherwise (including a missing or negative C).

    Notes
    -----
    A rule of thumb only (Lines and Glass 1977, recalled from memory): order-disorder
    ferroelectrics (KH2PO4 about 3.3e3 K, triglycine sulfate about 3.2e3 K) have C of
    order 1e3 K, displacive ones (BaTiO3 about 1.5-1.7e5 K) of order 1e5 K. Molecular
    ferroelectrics with bowl inversion are expected on the order-disorder side.
    """
    if curie_constant_K is None or not math.isfinite(curie_constant_K) or curie_constant_K <= 0:
        return "unclear"
    if ORDER_DISORDER_C_K[0] <= curie_constant_K <= ORDER_DISORDER_C_K[1]:
        return "order_disorder"
    if DISPLACIVE_C_K[0] <= curie_constant_K <= DISPLACIVE_C_K[1]:
        return "displacive"
    return "unclear"


def _column(frame: pd.DataFrame, name: str, label: str) -> np.ndarray:
    values = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(values)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise AnalysisError(
            f"{int(bad.sum())} value(s) in the {label} column are missing or not numbers "
            f"(first at data row {first + 1}); fix or remove those rows",
            column=name,
        )
    return values


def _refine_peak(t: np.ndarray, y: np.ndarray, i: int) -> tuple[float, float]:
    """Vertex of the parabola through the largest sample ``i`` and its two neighbours.

    Three-point interpolation (not a least-squares fit over more points) keeps the vertex
    value at or above the largest sample, which matters for a sharp, cusp-like maximum.
    """
    x = t[i - 1 : i + 2] - t[i]
    a, b, c = np.polyfit(x, y[i - 1 : i + 2], 2)
    if a >= 0:  # flat top (equal neighbours): keep the sample
        return float(t[i]), float(y[i])
    xv = float(np.clip(-b / (2 * a), x[0], x[2]))
    return float(t[i] + xv), float(a * xv * xv + b * xv + c)


def _line_fit(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    slope, intercept = np.polyfit(x, y, 1)
    return float(slope), float(intercept)


def _group_frequencies(f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies rounded to 6 significant digits (instrument set points), and group labels."""
    if np.any(f <= 0):
        raise AnalysisError("frequencies must be positive (Hz)", column="f_Hz")
    rounded = np.array([float(f"{v:.6g}") for v in f])
    levels, labels = np.unique(rounded, return_inverse=True)
    return levels, labels


# --------------------------------------------------------------------------- analysis


def analyse_dielectric(
    frame: pd.DataFrame,
    *,
    area_cm2: float | None = None,
    thickness_um: float | None = None,
    frequency_Hz: float | None = None,
) -> DielectricResult:
    """Analyse permittivity against temperature (and frequency) of a ferroelectric candidate.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical long-format table: ``T_K`` and either ``C_F`` (F; optional ``tan_delta``)
        or ``eps_r`` (optional ``eps_i``, or ``tan_delta``); ``f_Hz`` when several
        frequencies were measured.
    area_cm2, thickness_um : float, optional
        Electrode area (cm^2) and sample thickness (um); required with ``C_F``.
    frequency_Hz : float, optional
        The measuring frequency of a single-frequency file without an ``f_Hz`` column.

    Returns
    -------
    DielectricResult
        Contract keys: ``peaks`` (per frequency: ``f_Hz``, ``t_peak_K``, ``eps_peak``),
        ``t_peak_K`` and ``eps_peak`` at the lowest frequency, ``dispersion_K``,
        ``curie_constant_K``, ``t0_K``, ``eps_inf``, ``fit_r2``, ``fit_t_min_K``,
        ``fit_t_max_K``, ``landau_slope_ratio``, ``transition_hint``, ``frequencies``,
        ``points``, ``flags``; ``tan_delta_peak`` (at the lowest frequency's maximum; each
        peak has its own), ``cw_frequency_Hz`` (where Curie-Weiss and Landau were read),
        ``vf_ea_kJ_mol``, ``vf_t_K``, ``vf_f0_Hz`` and their errors (``vf_ea_err_kJ_mol``,
        ``vf_t_err_K``, ``vf_log10_f0_err``) for a dispersed maximum.

    Notes
    -----
    * Peak: the largest eps' sample, refined by the vertex of the parabola through it
      and its two neighbours (three-point interpolation). A maximum on the first or last temperature is not a peak
      (flag ``peak_at_edge``; its ``t_peak_K`` is None).
    * Dispersion: max - min of the peak temperatures over frequencies with a peak;
      flag ``frequency_dispersion`` above ``max(2 K, one temperature step)`` (common practice).
    * Frequency for Curie-Weiss and Landau: the one with the smallest median tan delta
      above its peak (flag ``curie_weiss_frequency`` when that is not the lowest); conduction
      and space charge at low frequency add to eps' and bend the 1/eps line. Without loss
      data, the lowest frequency.
    * Vogel-Fulcher: with ``frequency_dispersion`` and peaks at four or more frequencies,
      ln f = ln f0 - Ea / (kB (T_m - T_VF)) by least squares (:func:`vogel_fulcher_fit`).
    * Curie-Weiss numbers are withheld (flag ``curie_weiss_withheld``) when C <= 0,
      C > 1e6 K, eps_inf < 0 or T0 sits at its bound: such a fit describes nothing.
    * Curie-Weiss: fitted with :func:`scipy.optimize.curve_fit` from
      ``t_peak + max(5 K, 3 steps)`` to the top of the data, with relative weights (an LCR
      meter's error is proportional to the reading); T0 is bounded below the fit range so
      the pole stays outside the data; eps_inf is fitted, as a fit without it biases C and T0.
      If the lowest-frequency maximum is at the low-T edge (the whole range is above the
      transition), the fit uses all points and T0 is an extrapolation (flag
      ``no_peak_in_range``); at the high-T edge (all below) there is no fit.
    * Landau ratio: slopes of straight lines through 1/(eps' - eps_inf) over 20 K on each
      side of the peak beyond the same margin; the background eps_inf from the fit is
      subtracted so the ratio refers to the susceptibility that Landau theory describes.
      Landau-Devonshire theory gives -2 for a second-order transition and -4 at a
      tricritical point (Lines and Glass 1977, ch. 3; derived, see docs/methods.md).
    * Transition hint: see :func:`transition_hint` (order-of-magnitude rule); "unclear"
      when the peak shows frequency dispersion, since a relaxor does not follow
      Curie-Weiss near its maximum and C then means little.

    References
    ----------
    M. E. Lines and A. M. Glass, Principles and Applications of Ferroelectrics and Related
    Materials, Oxford University Press 1977 (Curie-Weiss law, Landau theory, Curie
    constants of order-disorder and displacive ferroelectrics).
    L. E. Cross, Ferroelectrics 76, 241 (1987), doi:10.1080/00150198708016945 (relaxors:
    frequency dispersion of the permittivity maximum).
    """
    if not isinstance(frame, pd.DataFrame):
        raise AnalysisError("dielectric data must be a table")
    if "T_K" not in frame.columns:
        raise AnalysisError("the file has no temperature column, e.g. 'T (K)'", column="T")
    flags: list[Flag] = []

    t_all = _column(frame, "T_K", "temperature")
    if np.any(t_all <= 0):
        raise AnalysisError("temperatures must be above 0 K (is the unit degC?)", column="T_K")

    # Permittivity: given directly, or from capacitance.
    eps_i_all: np.ndarray | None = None
    if "eps_r" in frame.columns:
        eps_all = _column(frame, "eps_r", "eps_r")
        if "eps_i" in frame.columns:
            eps_i_all = _column(frame, "eps_i", "eps_i")
        elif "tan_delta" in frame.columns:
            eps_i_all = eps_all * _column(frame, "tan_delta", "loss tangent")
    elif "C_F" in frame.columns:
        if area_cm2 is None:
            raise AnalysisError(
                "capacitance data need the electrode area (cm^2) to give the permittivity", field="area"
            )
        if thickness_um is None:
            raise AnalysisError(
                "capacitance data need the sample thickness (um) to give the permittivity", field="thickness"
            )
        if not (math.isfinite(area_cm2) and area_cm2 > 0):
            raise AnalysisError(f"electrode area must be a positive number of cm^2, got {area_cm2!r}", field="area")
        if not (math.isfinite(thickness_um) and thickness_um > 0):
            raise AnalysisError(
                f"sample thickness must be a positive number of um, got {thickness_um!r}", field="thickness"
            )
        eps_all = permittivity_from_capacitance(
            _column(frame, "C_F", "capacitance"), area_cm2=area_cm2, thickness_um=thickness_um
        )
        if "tan_delta" in frame.columns:
            eps_i_all = eps_all * _column(frame, "tan_delta", "loss tangent")
    else:
        raise AnalysisError(
            "the file has neither a capacitance column ('C (pF)') nor a permittivity column ('eps_r ()')",
            column="C",
        )
    if np.any(eps_all <= 0):
        raise AnalysisError(
            "permittivity is zero or negative in some rows: check the open/short correction of the bridge",
            column="C_F" if "eps_r" not in frame.columns else "eps_r",
        )

    # Frequencies.
    if "f_Hz" in frame.columns:
        f_levels, f_labels = _group_frequencies(_column(frame, "f_Hz", "frequency"))
        freqs: list[float | None] = [float(v) for v in f_levels]
    else:
        if frequency_Hz is not None and not (math.isfinite(frequency_Hz) and frequency_Hz > 0):
            raise AnalysisError(f"frequency must be a positive number of Hz, got {frequency_Hz!r}", field="frequency")
        freqs = [float(frequency_Hz) if frequency_Hz is not None else None]
        f_labels = np.zeros(len(t_all), dtype=int)
        if frequency_Hz is None:
            flags.append(
                Flag("frequency_unknown", "No frequency column or value: the curve is treated as one frequency.")
            )

    curves_per_f: list[dict[str, Any]] = []
    peaks: list[DielectricPeak] = []
    skipped: list[str] = []
    steps: list[float] = []
    repeated = False
    for k, f in enumerate(freqs):
        sel = f_labels == k
        # One value per temperature: repeated temperatures (heating and cooling sweeps,
        # repeated readings) are averaged.
        t, inverse, counts = np.unique(t_all[sel], return_inverse=True, return_counts=True)
        repeated = repeated or bool(np.any(counts > 1))
        y = np.bincount(inverse, weights=eps_all[sel]) / counts
        yi = np.bincount(inverse, weights=eps_i_all[sel]) / counts if eps_i_all is not None else None
        if len(t) < MIN_POINTS:
            skipped.append(f"{f:g} Hz" if f is not None else "the curve")
            continue
        steps.append(float(np.median(np.diff(t))))
        i = int(np.argmax(y))
        edge = "low" if i == 0 else ("high" if i == len(t) - 1 else None)
        tan = yi / y if yi is not None else None
        if edge is None:
            tp, ep = _refine_peak(t, y, i)
            tan_p = float(np.interp(tp, t, tan)) if tan is not None else None
            peak = DielectricPeak(f, tp, ep, None, len(t), tan_p)
        else:
            peak = DielectricPeak(f, None, float(y[i]), edge, len(t), float(tan[i]) if tan is not None else None)
        peaks.append(peak)
        curves_per_f.append({"f_Hz": f, "t_K": t, "eps_r": y, "eps_i": yi, "tan_delta": tan, "peak": peak})

    if not peaks:
        raise AnalysisError(
            f"too few temperatures: each frequency needs at least {MIN_POINTS} distinct temperatures",
            column="T_K",
        )
    if skipped:
        flags.append(
            Flag(
                "too_few_points_at_frequency",
                f"Skipped {', '.join(skipped)}: fewer than {MIN_POINTS} temperatures.",
            )
        )
    if repeated:
        flags.append(
            Flag(
                "repeated_temperatures",
                "Some temperatures occur more than once at a frequency; their readings were averaged "
                "(separate heating and cooling sweeps into two files to see thermal hysteresis).",
            )
        )
    edges = [p for p in peaks if p.at_edge is not None]
    if edges:
        names = ", ".join(f"{p.f_Hz:g} Hz" if p.f_Hz is not None else "the curve" for p in edges)
        flags.append(
            Flag(
                "peak_at_edge",
                f"The permittivity maximum lies at the edge of the temperature range ({names}): "
                "no peak inside the range.",
            )
        )
    step_K = float(np.median(steps))

    # Dispersion over frequencies with an interior peak.
    inner = [p for p in peaks if p.t_peak_K is not None]
    dispersion_K: float | None = None
    if len(inner) >= 2:
        tps = [p.t_peak_K for p in inner]
        dispersion_K = float(max(tps) - min(tps))
        threshold = max(DISPERSION_THRESHOLD_K, step_K)
        if dispersion_K > threshold:
            flags.append(
                Flag(
                    "frequency_dispersion",
                    f"The peak temperature moves by {dispersion_K:.1f} K over frequency (more than "
                    f"{threshold:.1f} K): relaxor-like; Curie-Weiss and Landau readings are doubtful.",
                )
            )

    vf = _vogel_fulcher_if_dispersed(inner, flags)

    # Curie-Weiss and Landau at the least lossy frequency (median tan delta above the
    # peak); the lowest frequency without loss data. Loss at low frequency (conduction,
    # electrode and space charge) adds to eps' and bends the Curie-Weiss line.
    margin_K = max(CW_MARGIN_K, CW_MARGIN_STEPS * step_K)
    low = _least_lossy(curves_per_f, margin_K)
    if low is not curves_per_f[0]:
        flags.append(Flag("curie_weiss_frequency", f"Curie-Weiss and Landau readings use {low['f_Hz']:g} Hz, the "
                          "frequency with the least loss above the peak, not the lowest one."))
    lp: DielectricPeak = low["peak"]
    t, y = low["t_K"], low["eps_r"]
    cw: dict[str, Any] = {}
    fit_mask: np.ndarray | None = None
    if lp.at_edge == "high":
        flags.append(
            Flag(
                "no_peak_in_range",
                "eps' still rises at the top of the range: all data are below the transition, no Curie-Weiss fit.",
            )
        )
    elif lp.at_edge == "low":
        fit_mask = np.ones(len(t), dtype=bool)
        flags.append(
            Flag(
                "no_peak_in_range",
                "eps' falls over the whole range: all data taken as above the transition; Curie-Weiss "
                "fitted over all points, T0 is an extrapolation below the data.",
            )
        )
    else:
        fit_mask = t >= lp.t_peak_K + margin_K

    if fit_mask is not None:
        if int(fit_mask.sum()) < CW_MIN_POINTS:
            flags.append(
                Flag(
                    "too_few_points_above_peak",
                    f"Only {int(fit_mask.sum())} points lie more than {margin_K:g} K above the peak; "
                    f"a Curie-Weiss fit needs {CW_MIN_POINTS}.",
                )
            )
        else:
            cw = _fit_curie_weiss(t[fit_mask], y[fit_mask], flags)
            cw = _withhold_meaningless(cw, flags)

    landau_ratio: float | None = None
    landau: dict[str, Any] | None = None
    if lp.t_peak_K is not None:
        bg = cw.get("eps_inf", 0.0) if cw else 0.0
        above = (t >= lp.t_peak_K + margin_K) & (t <= lp.t_peak_K + margin_K + LANDAU_WINDOW_K)
        below = (t <= lp.t_peak_K - margin_K) & (t >= lp.t_peak_K - margin_K - LANDAU_WINDOW_K)
        chi = y - bg
        if above.sum() >= LANDAU_MIN_POINTS and below.sum() >= LANDAU_MIN_POINTS and np.all(chi[above | below] > 0):
            s_above, b_above = _line_fit(t[above], 1.0 / chi[above])
            s_below, b_below = _line_fit(t[below], 1.0 / chi[below])
            if s_above != 0:
                landau_ratio = s_below / s_above
                landau = {
                    "above": (t[above], s_above * t[above] + b_above),
                    "below": (t[below], s_below * t[below] + b_below),
                    "background": bg,
                }
        if landau_ratio is None:
            flags.append(
                Flag(
                    "landau_ratio_unavailable",
                    f"Need {LANDAU_MIN_POINTS} points within {LANDAU_WINDOW_K:g} K on each side of the peak "
                    f"(beyond {margin_K:g} K) for the 1/eps slopes.",
                )
            )

    c_K = cw.get("curie_constant_K")
    hint = transition_hint(c_K) if "frequency_dispersion" not in {fl.code for fl in flags} else "unclear"
    if c_K is not None and c_K > 0 and hint == "unclear" and "frequency_dispersion" not in {fl.code for fl in flags}:
        flags.append(
            Flag(
                "curie_constant_between_classes",
                f"C = {c_K:.3g} K is neither near 1e3 K (order-disorder) nor near 1e5 K (displacive).",
            )
        )

    curves: dict[str, Any] = {"frequencies": curves_per_f, "curie_weiss": None, "landau": landau}
    if cw:
        t_line = np.linspace(float(t[fit_mask].min()), float(t[fit_mask].max()), 200)
        t_ext_lo = max(float(t.min()), cw["t0_K"] + 0.05 * (float(t.max()) - cw["t0_K"]))
        t_ext = np.linspace(t_ext_lo, float(t[fit_mask].min()), 60)
        curves["curie_weiss"] = {
            "t_K": t_line,
            "eps_r": curie_weiss(t_line, cw["curie_constant_K"], cw["t0_K"], cw["eps_inf"]),
            "t_ext_K": t_ext,
            "eps_r_ext": curie_weiss(t_ext, cw["curie_constant_K"], cw["t0_K"], cw["eps_inf"]),
        }

    first: DielectricPeak = curves_per_f[0]["peak"]
    return DielectricResult(
        peaks=tuple(peaks),
        t_peak_K=first.t_peak_K,
        eps_peak=first.eps_peak if first.t_peak_K is not None else None,
        dispersion_K=dispersion_K,
        curie_constant_K=c_K,
        curie_constant_err_K=cw.get("curie_constant_err_K"),
        t0_K=cw.get("t0_K"),
        t0_err_K=cw.get("t0_err_K"),
        eps_inf=cw.get("eps_inf"),
        eps_inf_err=cw.get("eps_inf_err"),
        fit_r2=cw.get("fit_r2"),
        fit_t_min_K=float(t[fit_mask].min()) if cw else None,
        fit_t_max_K=float(t[fit_mask].max()) if cw else None,
        fit_points=int(fit_mask.sum()) if cw else 0,
        landau_slope_ratio=landau_ratio,
        transition_hint=hint,
        frequencies=tuple(p.f_Hz for p in peaks),
        points=int(sum(p.n_points for p in peaks)),
        flags=tuple(flags),
        curves=curves,
        tan_delta_peak=first.tan_delta_peak if first.t_peak_K is not None else None,
        cw_frequency_Hz=low["f_Hz"] if cw else None,
        **vf,
        t_min_K=float(np.min(t_all)),
        t_max_K=float(np.max(t_all)),
    )


def _least_lossy(curves: list[dict[str, Any]], margin_K: float) -> dict[str, Any]:
    """The curve with the smallest median tan delta above its peak (the lowest frequency on ties
    or without loss data)."""
    best, best_loss = curves[0], math.inf
    for c in curves:
        if c["tan_delta"] is None or c["peak"].at_edge == "high":
            continue
        start = c["peak"].t_peak_K + margin_K if c["peak"].t_peak_K is not None else -math.inf
        above = c["t_K"] >= start
        if above.sum() < CW_MIN_POINTS:
            continue
        loss = float(np.median(c["tan_delta"][above]))
        if loss < best_loss * (1 - 1e-9):
            best, best_loss = c, loss
    return best


def _withhold_meaningless(cw: dict[str, float], flags: list[Flag]) -> dict[str, float]:
    """No Curie-Weiss numbers from a fit whose C, T0 or eps_inf has no physical meaning."""
    if not cw:
        return cw
    codes = {f.code for f in flags}
    why = []
    if cw["curie_constant_K"] <= 0:
        why.append("C is not positive")
    if cw["curie_constant_K"] > CW_C_MAX_K:
        why.append(f"C = {cw['curie_constant_K']:.2g} K is beyond any Curie constant ({CW_C_MAX_K:.0e} K)")
    if cw["eps_inf"] < 0:
        why.append("eps_inf is negative")
    if "t0_at_bound" in codes:
        why.append("T0 sits at the bound")
    if not why:
        return cw
    flags.append(Flag("curie_weiss_withheld", "The Curie-Weiss fit is not reported: " + "; ".join(why)
                      + ". eps' above the peak does not follow eps_inf + C/(T - T0) here."))
    return {}


def vogel_fulcher_fit(f_Hz: Any, t_m_K: Any) -> dict[str, float]:
    """Vogel-Fulcher fit of the permittivity maximum against frequency.

    f = f0 exp[-Ea / (kB (T_m - T_VF))], fitted as ln f against T_m by least squares.

    Parameters
    ----------
    f_Hz, t_m_K : array_like
        Measuring frequencies (Hz) and the temperatures of the eps' maximum (K); at least
        four pairs.

    Returns
    -------
    dict
        ``vf_ea_kJ_mol`` (Ea per mole, = Ea N_A), ``vf_t_K`` (T_VF), ``vf_f0_Hz`` and their
        standard errors (``vf_ea_err_kJ_mol``, ``vf_t_err_K``, ``vf_log10_f0_err``), or
        an empty dict when the fit does not converge or T_VF would not lie below the data.

    References
    ----------
    L. E. Cross, Ferroelectrics 76, 241 (1987), doi:10.1080/00150198708016945;
    D. Viehland, S. J. Jang, L. E. Cross and M. Wuttig, J. Appl. Phys. 68, 2916 (1990),
    doi:10.1063/1.346425 (Vogel-Fulcher freezing in relaxors; memory).
    """
    f = np.asarray(f_Hz, dtype=float)
    tm = np.asarray(t_m_K, dtype=float)
    ln_f = np.log(f)

    def model(t, ln_f0, ea_K, t_vf):
        return ln_f0 - ea_K / (t - t_vf)

    span = float(tm.max() - tm.min())
    t_hi = float(tm.min()) - 1e-3 * max(span, 1.0)
    try:
        popt, pcov = curve_fit(model, tm, ln_f, p0=(ln_f.max() + 10.0, 10.0 * max(span, 1.0), float(tm.min()) - 3 * max(span, 1.0)),
                               bounds=([-np.inf, 0.0, 0.0], [np.inf, np.inf, t_hi]), max_nfev=2000)
    except (RuntimeError, ValueError):
        return {}
    if not np.all(np.isfinite(pcov)) or abs(popt[2] - t_hi) < 1e-6 * t_hi:
        return {}
    err = np.sqrt(np.diag(pcov))
    kj = R_J_MOLK / 1000.0  # Ea/kB in K -> kJ/mol
    return {
        "vf_ea_kJ_mol": float(popt[1] * kj),
        "vf_ea_err_kJ_mol": float(err[1] * kj),
        "vf_t_K": float(popt[2]),
        "vf_t_err_K": float(err[2]),
        "vf_f0_Hz": float(math.exp(popt[0])),
        "vf_log10_f0_err": float(err[0] / math.log(10.0)),
    }


def _vogel_fulcher_if_dispersed(inner: list[DielectricPeak], flags: list[Flag]) -> dict[str, float]:
    if "frequency_dispersion" not in {f.code for f in flags}:
        return {}
    known = [p for p in inner if p.f_Hz is not None]
    if len(known) < VF_MIN_FREQUENCIES:
        flags.append(Flag("vogel_fulcher_unavailable", f"A Vogel-Fulcher fit of the moving maximum needs peaks at "
                          f"{VF_MIN_FREQUENCIES} or more frequencies; {len(known)} found."))
        return {}
    vf = vogel_fulcher_fit([p.f_Hz for p in known], [p.t_peak_K for p in known])
    if not vf:
        flags.append(Flag("vogel_fulcher_failed", "The peak temperatures do not follow a Vogel-Fulcher law "
                          "(no convergence, or T_VF not below the data)."))
    return vf


def _fit_curie_weiss(t: np.ndarray, y: np.ndarray, flags: list[Flag]) -> dict[str, float]:
    """Weighted 3-parameter Curie-Weiss fit; start values from a line through 1/eps."""
    s, b = _line_fit(t, 1.0 / y)
    if s <= 0:
        # eps' does not fall with T: Curie-Weiss would need C < 0 and T0 -> -inf; no fit.
        flags.append(
            Flag(
                "negative_curie_constant",
                "eps' does not fall with temperature above the peak (Curie-Weiss would need C < 0); no fit.",
            )
        )
        return {}
    t_lo = float(t.min())
    span = float(t.max() - t.min())
    c0 = 1.0 / s
    t00 = -b / s
    t0_max = t_lo - 1e-3 * max(span, 1.0)
    if not t00 < t0_max:
        t00 = t_lo - max(span, 1.0)
    try:
        popt, pcov = curve_fit(
            curie_weiss,
            t,
            y,
            p0=(c0, t00, 0.0),
            sigma=y,
            bounds=([-np.inf, -np.inf, -np.inf], [np.inf, t0_max, np.inf]),
            x_scale="jac",
            max_nfev=2000,  # bounded work per upload; a fit that needs more does not describe the data
        )
    except RuntimeError as exc:  # no convergence: report it as a flag, keep the rest
        flags.append(Flag("curie_weiss_fit_failed", f"The Curie-Weiss fit did not converge ({exc})."))
        return {}
    c_K, t0_K, eps_inf = (float(v) for v in popt)
    err = np.sqrt(np.clip(np.diag(pcov), 0, np.inf)) if np.all(np.isfinite(pcov)) else np.full(3, np.nan)
    resid = y - curie_weiss(t, *popt)
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(np.sum(resid**2)) / ss_tot if ss_tot > 0 else float("nan")
    if c_K < 0:
        flags.append(
            Flag(
                "negative_curie_constant",
                "The Curie-Weiss fit gives C < 0: eps' does not fall as 1/(T - T0) above the peak.",
            )
        )
    if eps_inf < 0:
        flags.append(
            Flag("negative_eps_inf", "The fitted background eps_inf is negative: start the fit farther above the peak.")
        )
    if math.isfinite(r2) and r2 < POOR_FIT_R2:
        flags.append(Flag("poor_curie_weiss_fit", f"Curie-Weiss fit R^2 = {r2:.3f} (below {POOR_FIT_R2})."))
    if abs(t0_K - t0_max) < 1e-6 * max(abs(t0_max), 1.0):
        flags.append(
            Flag("t0_at_bound", "The fitted T0 sits at the start of the fit range: the data do not follow Curie-Weiss.")
        )
    return {
        "curie_constant_K": c_K,
        "t0_K": t0_K,
        "eps_inf": eps_inf,
        "curie_constant_err_K": float(err[0]) if math.isfinite(err[0]) else None,
        "t0_err_K": float(err[1]) if math.isfinite(err[1]) else None,
        "eps_inf_err": float(err[2]) if math.isfinite(err[2]) else None,
        "fit_r2": r2 if math.isfinite(r2) else None,
    }
