"""Differential scanning calorimetry: transition peaks, enthalpy, onset and entropy.

For each heating or cooling segment of a DSC trace the module finds the transition
peaks, draws a linear baseline under each one, integrates the enthalpy, finds the
extrapolated onset and, with the molar mass, gives the molar enthalpy, the transition
entropy dS = dH_molar / T and the Boltzmann estimate of the number of orientational
states, N = exp(dS / R), that an order-disorder transition (bowl up / bowl down: N = 2)
releases.

Sign convention inside the module: the signal is turned so that endothermic effects are
positive ("endo up"), whatever the instrument used. Enthalpies are signed the
thermodynamic way: dH > 0 for heat taken up by the sample (endothermic), dH < 0 for heat
given off (exothermic, e.g. crystallisation on cooling).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.integrate import simpson, trapezoid
from scipy.signal import find_peaks, peak_widths, savgol_filter

from server.analysis.results import Flag, Result
from server.analysis.constants import R_J_MOLK
from server.errors import AnalysisError

METHOD = (
    "DSC peak integration over a linear baseline, dH = (1/beta) integral (Phi - baseline) dT, "
    "extrapolated onset from the tangent at the steepest leading-edge point (ISO 11357-1; "
    "ASTM E794), dS = dH_molar/T_peak and N = exp(dS/R); the uncertainty of dH combines the spread over "
    "baseline choices (linear with the limits moved by half the peak width, sigmoidal) with the "
    "heat-flow noise carried through the integral and the sampling error, trapezoid against Simpson "
    "(Hoehne, Hemminger and Flammersheim 2003; ASTM E793)."
)
VERSION = "dsc/1.1"  # 1.1: dH, dS and N carry an uncertainty (baseline choice, noise, sampling)


MIN_POINTS = 20
# A temperature turn (heating -> cooling) must be larger than this to split segments, so
# that controller jitter does not cut a run in pieces.
SEGMENT_TURN_K = 1.0
# Points within this of a segment's end temperature belong to an isothermal hold.
HOLD_TOL_K = 0.05
# Segments spanning less than this are isothermal holds and are not analysed.
MIN_SEGMENT_SPAN_K = 2.0
# Detection: a peak must stand out by this many noise standard deviations, and by 1 % of
# the largest excursion in the segment (so baseline wiggles under a big peak are not
# counted when the data are nearly noise-free). Common practice.
PROMINENCE_NOISE_FACTOR = 10.0
PROMINENCE_REL = 0.01
# The peak region ends where the signal is back within max(3 noise, 0.2 % of the peak
# height) of the detection baseline; the window is then widened by 20 % on each side
# (the signal is on the baseline there, so the linear baseline is anchored on flat data).
RETURN_NOISE_FACTOR = 3.0
RETURN_REL = 0.002
WINDOW_EXTEND = 0.5
ANCHOR_POINTS = 7
RATE_MISMATCH_REL = 0.05
# Uncertainty of dH: the integration limits are moved this fraction of the peak's FWHM either way, a
# choice of this project (ASTM E793 leaves the limits to where the operator sees the trace leave and rejoin
# the baseline; two analysts differ by about this much, common practice).
LIMIT_SHIFT_FWHM = 0.5
# Iterations of the sigmoidal baseline (Hoehne et al. 2003 note that a few suffice).
SIGMOID_ITERATIONS = 6


@dataclass(frozen=True)
class DscPeak(Result):
    """One transition peak; temperatures in K, enthalpies signed (dH > 0 endothermic)."""

    segment: int
    segment_direction: str
    direction: str  # "endo" | "exo"
    onset_K: float | None
    peak_K: float
    end_K: float
    start_K: float
    width_K: float | None
    dh_J_g: float
    dh_kJ_mol: float | None
    ds_J_molK: float | None
    n_states: float | None
    dh_err_J_g: float | None = None
    dh_err_kJ_mol: float | None = None
    ds_err_J_molK: float | None = None
    n_states_err: float | None = None


@dataclass(frozen=True)
class DscSegment(Result):
    """A monotonic heating or cooling part of the run."""

    index: int
    direction: str  # "heating" | "cooling"
    t_start_K: float
    t_end_K: float
    rate_K_min: float
    n_points: int
    integrated_over: str  # "time" | "temperature"


@dataclass(frozen=True)
class DscResult(Result):
    """Result of :func:`analyse_dsc`; ``curves`` holds plot arrays (not in ``to_dict``)."""

    JSON_OMIT = ("curves",)  # plot data

    peaks: tuple[DscPeak, ...]
    segments: tuple[DscSegment, ...]
    rate_K_min: float
    mass_mg: float | None
    endo: str
    molar_mass_g_mol: float | None
    flags: tuple[Flag, ...] = ()
    curves: dict[str, Any] | None = field(default=None, repr=False, compare=False)


# --------------------------------------------------------------------------- thermodynamics


def transition_entropy_J_molK(dh_J_mol: float, t_K: float) -> float:
    """Entropy of a transition at equilibrium, dS = dH / T (J/(mol K)).

    References
    ----------
    Any thermodynamics text, e.g. P. Atkins and J. de Paula, Physical Chemistry, OUP,
    ch. 3 (entropy of phase transition).
    """
    if not t_K > 0:
        raise AnalysisError(f"transition temperature must be above 0 K, got {t_K!r}", field="temperature")
    return float(dh_J_mol) / float(t_K)


#: Largest N reported as a count of orientational states: a bowl has only a few orientations, so a larger
#: N = exp(|dS|/R) says the entropy is too large for an orientational count (chain melting, fusion).
#: Common practice: order-disorder transitions of molecular crystals have N of 2 to about 12.
MAX_ORIENTATIONAL_STATES = 12.0


def boltzmann_states(ds_J_molK: float) -> float:
    """Number of configurations from a transition entropy, N = exp(|dS| / R).

    For an order-disorder transition between a phase with one orientation per molecule
    and one with N equally likely orientations, dS = R ln N (Boltzmann, S = kB ln W per
    molecule). The magnitude is used so an exothermic (ordering) peak gives the same N.
    """
    return math.exp(abs(float(ds_J_molK)) / R_J_MOLK)


# --------------------------------------------------------------------------- helpers


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


def _positive(value: float | None, what: str, field_name: str) -> float | None:
    if value is None:
        return None
    try:
        x = float(value)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"{what} must be a number, got {value!r}", field=field_name) from exc
    if not (math.isfinite(x) and x > 0):
        raise AnalysisError(f"{what} must be a positive number, got {value!r}", field=field_name)
    return x


def _split_segments(t_K: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [lo, hi] (inclusive) of monotonic parts, cut at turns larger than SEGMENT_TURN_K."""
    maxima, _ = find_peaks(t_K, prominence=SEGMENT_TURN_K)
    minima, _ = find_peaks(-t_K, prominence=SEGMENT_TURN_K)
    cuts = sorted(set(maxima.tolist()) | set(minima.tolist()))
    bounds = [0, *cuts, len(t_K) - 1]
    out = []
    for lo, hi in zip(bounds[:-1], bounds[1:], strict=True):
        # Trim isothermal holds at the ends: points within HOLD_TOL_K of the end values.
        t_lo, t_hi = t_K[lo], t_K[hi]
        while hi - lo > 2 and abs(t_K[lo + 1] - t_lo) < HOLD_TOL_K:
            lo += 1
        while hi - lo > 2 and abs(t_K[hi - 1] - t_hi) < HOLD_TOL_K:
            hi -= 1
        out.append((lo, hi))
    return out


def _robust_line(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Straight line through the points that are not part of a peak (iterative 3-sigma clipping)."""
    mask = np.ones(len(x), dtype=bool)
    slope, intercept = np.polyfit(x, y, 1)
    for _ in range(30):
        res = y - (slope * x + intercept)
        med = np.median(res[mask])
        s = 1.4826 * np.median(np.abs(res[mask] - med))
        new = np.abs(res - med) <= max(3.0 * s, 1e-12 * max(1.0, float(np.max(np.abs(y)))))
        if new.sum() < 5 or np.array_equal(new, mask):
            break
        mask = new
        slope, intercept = np.polyfit(x[mask], y[mask], 1)
    return float(slope), float(intercept)


def _noise_sigma(y: np.ndarray) -> float:
    """White-noise standard deviation from first differences (robust MAD estimate)."""
    d = np.diff(y)
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / math.sqrt(2.0))


def _local_value(x: np.ndarray, y: np.ndarray, i: int, lo: int, hi: int) -> float:
    """Signal at index i from a straight line through ANCHOR_POINTS samples around it (within lo..hi)."""
    a = max(lo, i - ANCHOR_POINTS // 2)
    b = min(hi, a + ANCHOR_POINTS - 1)
    a = max(lo, b - ANCHOR_POINTS + 1)
    if b - a < 2:
        return float(y[i])
    s, c = np.polyfit(x[a : b + 1], y[a : b + 1], 1)
    return float(s * x[i] + c)


def _odd(n: int) -> int:
    return n if n % 2 else n + 1


# --------------------------------------------------------------------------- analysis


def analyse_dsc(
    frame: pd.DataFrame,
    *,
    mass_mg: float | None = None,
    rate_K_min: float | None = None,
    endo: str | None = "up",
    molar_mass_g_mol: float | None = None,
) -> DscResult:
    """Find and integrate the transition peaks of a DSC trace.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical columns ``T_K``, optional ``t_s``, and ``heat_flow_mW`` (needs
        ``mass_mg``) or ``heat_flow_W_g``.
    mass_mg : float, optional
        Sample mass, mg (1 mW / 1 mg = 1 W/g).
    rate_K_min : float, optional
        Scan rate, K/min; needed when there is no time column.
    endo : {"up", "down"}, optional
        Whether endothermic effects point up (positive) in the file. None is read as "up"
        (flag ``endo_assumed``).
    molar_mass_g_mol : float, optional
        Molar mass, g/mol, for dH in kJ/mol, dS and N.

    Returns
    -------
    DscResult
        ``peaks`` sorted by peak temperature, each with ``onset_K``, ``peak_K``, ``end_K``,
        ``dh_J_g``, ``dh_kJ_mol``, ``ds_J_molK``, ``n_states``, ``direction``; ``segments``,
        ``rate_K_min``, ``mass_mg``, ``flags``.

    Notes
    -----
    * Segments: the run is cut where the temperature turns by more than 1 K; each part is
      a heating or cooling segment analysed on its own (flag ``mixed_run``). Parts spanning
      under 2 K are isothermal holds and are skipped.
    * Detection: :func:`scipy.signal.find_peaks` on the signal minus a robust straight line
      (iterative 3-sigma clipping, so peaks do not pull it), with a prominence of
      max(10 noise, 1 % of the largest excursion); noise from the MAD of first differences.
      Endothermic and exothermic peaks are searched separately.
    * Baseline: linear between the start and end of the peak, found where the signal is
      back within max(3 noise, 0.2 % of the peak height) of the detection line, widened by
      20 % on each side and stopped at a neighbouring peak (flag ``overlapping_peaks``);
      the anchor values come from a straight line through 7 samples at each end. A
      sigmoidal baseline (for a heat-capacity step across the peak) enters the uncertainty only.
    * Uncertainty of dH (``dh_err_J_g``, ``dh_err_kJ_mol``; ``ds_err_J_molK`` = dh_err/T_peak, the error of
      T_peak, a tenth of a kelvin in some hundreds, being negligible; ``n_states_err`` = N dS_err / R):
      three parts added in quadrature.
      (i) Baseline choice: the peak is integrated again with the limits moved by half its FWHM
      (both out, both in, both left, both right) and over a sigmoidal baseline, which runs from the
      pre-transition line to the post-transition line in proportion to the fraction transformed, iterated
      (Hoehne et al. 2003, ch. 5); the largest departure from the reported value is taken as a standard
      uncertainty (conservative: a rectangular reading would divide by sqrt 3, JCGM 100:2008, 4.3.7).
      (ii) Noise: the white noise of the trace (MAD of first differences) carried exactly through the
      integral, which is linear in the samples (trapezoid weights less the weights of the two anchor fits).
      (iii) Sampling: the difference between the trapezoid rule and Simpson's rule over the same samples
      (a standard estimate of the quadrature error; 0.1 % for a melting peak sampled every 0.17 K).
      On generated traces (tests/analysis/test_dsc.py) it is conservative, 1.5 to 3.5 times the scatter of
      dH; on an almost noise-free trace it misses the ~0.1 % of an exponential tail left below the return
      level. Not included: the calorimetric calibration and the sample mass, which scale every peak of a run
      alike (ASTM E793 reports an interlaboratory spread of a few percent; from memory).
    * Enthalpy: dH = integral (Phi - baseline) dt with Phi in W/g when a time column exists,
      else (1/beta) integral (Phi - baseline) dT with beta in K/s. ``end_K`` and ``start_K``
      are the integration limits (signal back on the baseline), not extrapolated temperatures.
    * Onset: the extrapolated onset, where the tangent at the steepest point of the leading
      edge (in the order of the scan) crosses the pre-transition baseline, a straight line
      fitted to the data just before the peak (the linear peak baseline if too few points).
      Slopes come from a Savitzky-Golay filter (quadratic, window a third of the rise, at least 5 samples).
    * Entropy: dS = dH_molar / T_peak, as the project's specification asks. For a sharp
      first-order transition the equilibrium temperature is the onset; the two differ by
      the thermal lag (about 1 K at 10 K/min), i.e. a few tenths of a percent in dS.
      N = exp(|dS|/R) is the Boltzmann estimate for an order-disorder transition.

    References
    ----------
    ISO 11357-1:2016, Plastics - Differential scanning calorimetry (DSC) - Part 1: General
    principles (extrapolated onset, baselines).
    ASTM E794-06, Standard Test Method for Melting and Crystallization Temperatures by
    Thermal Analysis; ASTM E793, Enthalpies of Fusion and Crystallization by DSC.
    G. W. H. Hoehne, W. F. Hemminger and H.-J. Flammersheim, Differential Scanning
    Calorimetry, 2nd ed., Springer 2003 (peak integration; ch. 5 on baselines, the sigmoidal one
    included; chapter numbers from memory).
    JCGM 100:2008, Evaluation of measurement data - Guide to the expression of uncertainty in measurement.
    """
    if not isinstance(frame, pd.DataFrame):
        raise AnalysisError("DSC data must be a table")
    if "T_K" not in frame.columns:
        raise AnalysisError("the file has no temperature column, e.g. 'T (K)'", column="T")
    flags: list[Flag] = []
    if endo is None:
        endo = "up"
        flags.append(Flag("endo_assumed", "The sign convention was not given: endothermic taken as up."))
    if endo not in ("up", "down"):
        raise AnalysisError(f"endo must be 'up' or 'down', got {endo!r}", field="endo")
    mass = _positive(mass_mg, "sample mass (mg)", "mass")
    rate_given = _positive(rate_K_min, "scan rate (K/min)", "rate")
    molar_mass = _positive(molar_mass_g_mol, "molar mass (g/mol)", "molar_mass")

    t_K = _column(frame, "T_K", "temperature")
    if "heat_flow_W_g" in frame.columns:
        phi = _column(frame, "heat_flow_W_g", "heat flow")
    elif "heat_flow_mW" in frame.columns:
        if mass is None:
            raise AnalysisError(
                "heat flow in mW needs the sample mass (mg) to give W/g and J/g", field="mass"
            )
        phi = _column(frame, "heat_flow_mW", "heat flow") / mass  # mW/mg = W/g
    else:
        raise AnalysisError("the file has no heat-flow column, e.g. 'heat flow (mW)'", column="heat flow")
    time_s = _column(frame, "t_s", "time") if "t_s" in frame.columns else None
    if time_s is None and rate_given is None:
        raise AnalysisError("without a time column the scan rate (K/min) is needed to integrate", field="rate")
    if len(t_K) < MIN_POINTS:
        raise AnalysisError(f"only {len(t_K)} rows: a DSC trace needs at least {MIN_POINTS}", column="T_K")
    if time_s is not None and np.any(np.diff(time_s) <= 0):
        raise AnalysisError("the time column must increase from row to row", column="t_s")

    y_all = phi if endo == "up" else -phi  # endothermic positive from here on

    segments: list[DscSegment] = []
    peaks: list[DscPeak] = []
    seg_curves: list[dict[str, Any]] = []
    peak_curves: list[dict[str, Any]] = []
    ranges = _split_segments(t_K)
    skipped_holds = 0
    for lo, hi in ranges:
        if hi - lo + 1 < MIN_POINTS or abs(t_K[hi] - t_K[lo]) < MIN_SEGMENT_SPAN_K:
            skipped_holds += 1
            continue
        idx = len(segments)
        T = t_K[lo : hi + 1]
        y = y_all[lo : hi + 1]
        ts = time_s[lo : hi + 1] if time_s is not None else None
        direction = "heating" if T[-1] > T[0] else "cooling"
        if ts is not None:
            beta_K_s = abs(float(np.polyfit(ts, T, 1)[0]))
            if beta_K_s <= 0:
                raise AnalysisError("temperature does not change with time in a segment", column="t_s")
            if rate_given is not None and abs(beta_K_s * 60 - rate_given) > RATE_MISMATCH_REL * rate_given:
                flags.append(
                    Flag(
                        "rate_mismatch",
                        f"Segment {idx}: the time column gives {beta_K_s * 60:.3g} K/min, the stated rate is "
                        f"{rate_given:g} K/min; integrated over time.",
                    )
                )
        else:
            beta_K_s = rate_given / 60.0
        segments.append(
            DscSegment(idx, direction, float(T[0]), float(T[-1]), beta_K_s * 60.0, len(T),
                       "time" if ts is not None else "temperature")
        )
        seg_peaks, seg_peak_curves, seg_flags = _analyse_segment(T, y, ts, beta_K_s, idx, direction, molar_mass)
        peaks.extend(seg_peaks)
        peak_curves.extend(seg_peak_curves)
        flags.extend(seg_flags)
        seg_curves.append({"index": idx, "direction": direction, "t_K": T, "heat_flow_W_g": y})

    if not segments:
        raise AnalysisError(
            f"no heating or cooling segment spans {MIN_SEGMENT_SPAN_K:g} K with {MIN_POINTS} points", column="T_K"
        )
    if len(segments) > 1:
        kinds = ", ".join(f"{s.index}: {s.direction}" for s in segments)
        flags.append(Flag("mixed_run", f"The file holds several scans, analysed separately ({kinds})."))
    if skipped_holds:
        flags.append(Flag("isothermal_dropped", f"{skipped_holds} isothermal or very short part(s) not analysed."))
    if not peaks:
        flags.append(Flag("no_peaks", "No transition peak stands out of the noise."))
    elif molar_mass is None:
        flags.append(Flag("no_molar_mass", "No molar mass: dH in kJ/mol, dS and N are not given."))

    order = np.argsort([p.peak_K for p in peaks], kind="stable")
    rate_out = rate_given if rate_given is not None else float(np.mean([s.rate_K_min for s in segments]))
    return DscResult(
        peaks=tuple(peaks[i] for i in order),
        segments=tuple(segments),
        rate_K_min=rate_out,
        mass_mg=mass,
        endo=endo,
        molar_mass_g_mol=molar_mass,
        flags=tuple(flags),
        curves={"segments": seg_curves, "peaks": [peak_curves[i] for i in order]},
    )


def _trapezoid_weights(x: np.ndarray) -> np.ndarray:
    """Weights w with trapezoid(z, x) == w @ z."""
    w = np.zeros(len(x))
    dx = np.diff(x)
    w[:-1] += 0.5 * dx
    w[1:] += 0.5 * dx
    return w


def _anchor_weights(x: np.ndarray, i: int, n: int) -> tuple[int, np.ndarray]:
    """``(a, h)`` with ``_local_value(x, y, i, 0, n - 1) == h @ y[a : a + len(h)]``: the least-squares line's
    value at ``x[i]`` is linear in the samples (a row of the hat matrix)."""
    a = max(0, i - ANCHOR_POINTS // 2)
    b = min(n - 1, a + ANCHOR_POINTS - 1)
    a = max(0, b - ANCHOR_POINTS + 1)
    if b - a < 2:
        h = np.zeros(1)
        h[0] = 1.0
        return i, h
    X = np.column_stack([x[a : b + 1], np.ones(b - a + 1)])
    return a, np.array([x[i], 1.0]) @ np.linalg.pinv(X)


def _linear_area(T, y, xw, s, e):  # noqa: ANN001, ANN202 - arrays
    """Area over the linear baseline between the anchor values at ``s`` and ``e`` (``xw`` the integration
    variable over the window: time, or temperature over the scan rate)."""
    n = len(T)
    ys = _local_value(T, y, s, 0, n - 1)
    ye = _local_value(T, y, e, 0, n - 1)
    base = ys + (ye - ys) * (T[s : e + 1] - T[s]) / (T[e] - T[s])
    return float(trapezoid(y[s : e + 1] - base, xw))


def _edge_line(T, y, lo, hi):  # noqa: ANN001, ANN202 - arrays
    slope, intercept = np.polyfit(T[lo : hi + 1], y[lo : hi + 1], 1)
    return float(slope), float(intercept)


def _sigmoidal_area(T, y, xw, s, e, left_lim, right_lim):  # noqa: ANN001, ANN202 - arrays
    """Area over the sigmoidal baseline (Hoehne et al. 2003, ch. 5): the pre-transition line (fitted just
    before ``s``) and the post-transition line (just after ``e``) mixed in proportion to the fraction
    transformed, the running area, recomputed a few times. None when either side has too few points."""
    m = max(ANCHOR_POINTS, (e - s) // 4)
    pre_lo, post_hi = max(left_lim, s - m), min(right_lim, e + m)
    if s - pre_lo < 3 or post_hi - e < 3:
        pre_lo, post_hi = max(0, s - ANCHOR_POINTS // 2), min(len(T) - 1, e + ANCHOR_POINTS // 2)
        pre = _edge_line(T, y, pre_lo, min(s + ANCHOR_POINTS // 2, e))
        post = _edge_line(T, y, max(e - ANCHOR_POINTS // 2, s), post_hi)
    else:
        pre, post = _edge_line(T, y, pre_lo, s), _edge_line(T, y, e, post_hi)
    Tw, yw = T[s : e + 1], y[s : e + 1]
    l_pre, l_post = pre[0] * Tw + pre[1], post[0] * Tw + post[1]
    base = l_pre + (l_post - l_pre) * (Tw - Tw[0]) / (Tw[-1] - Tw[0])
    for _ in range(SIGMOID_ITERATIONS):
        z = yw - base
        running = np.concatenate(([0.0], np.cumsum(0.5 * (z[1:] + z[:-1]) * np.diff(xw))))
        if running[-1] == 0:
            return None
        alpha = np.clip(running / running[-1], 0.0, 1.0)
        base = (1.0 - alpha) * l_pre + alpha * l_post
    return float(trapezoid(yw - base, xw))


def _dh_uncertainty(T, y, x, s, e, pk, width_K, noise, left_lim, right_lim):  # noqa: ANN001, ANN202
    """Standard uncertainty of the peak area (J/g): the largest departure of the other baseline choices
    from the reported one, the noise carried through the integral and the sampling error, in quadrature
    (analyse_dsc)."""
    n = len(T)
    step_K = float(np.median(np.abs(np.diff(T)))) or 1.0
    fwhm_points = (width_K if width_K else 0.2 * abs(T[e] - T[s])) / step_K
    d = max(1, int(round(LIMIT_SHIFT_FWHM * fwhm_points)))
    # The choices are compared on the trace smoothed over two peak widths, so their spread measures the
    # choice and not the noise a second time (the noise enters once, below).
    win = _odd(max(5, int(round(2 * fwhm_points))))
    ys = savgol_filter(y, win, polyorder=2, mode="interp") if win < n else y
    nominal = _linear_area(T, ys, x[s : e + 1], s, e)
    areas = []
    for ds_, de in ((-d, d), (d, -d), (-d, -d), (d, d)):
        s2, e2 = min(max(left_lim, s + ds_), pk - 1), max(min(right_lim, e + de), pk + 1)
        if s2 >= 0 and e2 <= n - 1 and e2 - s2 >= 2:
            areas.append(_linear_area(T, ys, x[s2 : e2 + 1], s2, e2))
    sig = _sigmoidal_area(T, ys, x[s : e + 1], s, e, left_lim, right_lim)
    if sig is not None:
        areas.append(sig)
    u_base = max((abs(a - nominal) for a in areas), default=0.0)
    # Noise: dh = c @ y with c the trapezoid weights less the anchors' share of the baseline integral.
    xw = x[s : e + 1]
    w = _trapezoid_weights(xw)
    u = (T[s : e + 1] - T[s]) / (T[e] - T[s])
    c = np.zeros(n)
    c[s : e + 1] += w
    for i, share in ((s, float(w @ (1.0 - u))), (e, float(w @ u))):
        a, h = _anchor_weights(T, i, n)
        c[a : a + len(h)] -= share * h
    u_noise = noise * float(np.sqrt(c @ c))
    # Sampling: a sharp peak (the kink of a melting peak) is integrated only as well as it is sampled; the
    # difference between the trapezoid and Simpson's rule over the same samples estimates that error.
    z = y[s : e + 1] - (_local_value(T, y, s, 0, n - 1) * (1.0 - u) + _local_value(T, y, e, 0, n - 1) * u)
    u_quad = abs(float(simpson(z, x=xw)) - float(trapezoid(z, xw))) if len(xw) >= 3 else 0.0
    return float(math.sqrt(u_base**2 + u_noise**2 + u_quad**2))


def _analyse_segment(
    T: np.ndarray,
    y: np.ndarray,
    ts: np.ndarray | None,
    beta_K_s: float,
    seg: int,
    seg_direction: str,
    molar_mass: float | None,
) -> tuple[list[DscPeak], list[dict[str, Any]], list[Flag]]:
    n = len(T)
    flags: list[Flag] = []
    m0, c0 = _robust_line(T, y)
    corr = y - (m0 * T + c0)
    noise = _noise_sigma(y)
    excursion = float(np.max(np.abs(corr)))
    if excursion == 0.0:
        return [], [], flags
    prominence = max(PROMINENCE_NOISE_FACTOR * noise, PROMINENCE_REL * excursion)
    found: list[tuple[int, int]] = []  # (index, sign)
    for sign in (1, -1):
        idx, _ = find_peaks(sign * corr, height=prominence, prominence=prominence, width=2)
        found.extend((int(i), sign) for i in idx)
    found.sort()
    # Boundaries between neighbours: the sample closest to the detection line between them.
    cuts = [int(a + np.argmin(np.abs(corr[a : b + 1]))) for (a, _), (b, _) in zip(found[:-1], found[1:], strict=True)]
    peaks: list[DscPeak] = []
    curves: list[dict[str, Any]] = []
    for k, (p, sign) in enumerate(found):
        left_lim = cuts[k - 1] if k > 0 else 0
        right_lim = cuts[k] if k < len(cuts) else n - 1
        height = sign * corr[p]
        level = max(RETURN_NOISE_FACTOR * noise, RETURN_REL * height)
        s = p
        while s > left_lim and sign * corr[s] > level:
            s -= 1
        e = p
        while e < right_lim and sign * corr[e] > level:
            e += 1
        clipped = (s == left_lim and sign * corr[s] > level) or (e == right_lim and sign * corr[e] > level)
        s_level = s
        if e - s < 2:
            continue  # cannot happen after the height test; kept so the baseline never divides by zero
        ext = int(math.ceil(WINDOW_EXTEND * (e - s)))
        s = max(left_lim, s - ext)
        e = min(right_lim, e + ext)
        if clipped:
            code = "overlapping_peaks" if (left_lim > 0 or right_lim < n - 1) else "peak_at_segment_edge"
            flags.append(
                Flag(
                    code,
                    f"Segment {seg}: the peak near {T[p]:.1f} K does not return to the baseline before "
                    + ("its neighbour" if code == "overlapping_peaks" else "the end of the scan")
                    + "; its enthalpy is uncertain.",
                )
            )
        # Linear baseline from the anchor values at s and e.
        ys = _local_value(T, y, s, 0, n - 1)
        ye = _local_value(T, y, e, 0, n - 1)
        Tw = T[s : e + 1]
        base = ys + (ye - ys) * (Tw - T[s]) / (T[e] - T[s])
        z = y[s : e + 1] - base
        ip = int(np.argmax(sign * z))
        pk = s + ip
        # The integration variable: time, or temperature over the scan rate (in scan order).
        x = ts if ts is not None else T * (1.0 if T[-1] > T[0] else -1.0) / beta_K_s
        dh = float(trapezoid(z, x[s : e + 1]))
        # FWHM of the baseline-corrected peak.
        width_K: float | None = None
        if len(z) >= 3 and 0 < ip < len(z) - 1:
            w = peak_widths(sign * z, [ip], rel_height=0.5)
            grid = np.arange(len(Tw))
            width_K = float(abs(np.interp(w[3][0], grid, Tw) - np.interp(w[2][0], grid, Tw)))
        onset_K, onset_info = _onset(T, y, s, min(s_level, pk), pk, base, sign)
        if onset_K is None:
            flags.append(
                Flag("no_onset", f"Segment {seg}: no leading edge to draw an onset tangent near {T[pk]:.1f} K.")
            )
        dh_err = _dh_uncertainty(T, y, x, s, e, pk, width_K, noise, left_lim, right_lim)
        dh_mol = ds = nst = ds_err = nst_err = None
        if molar_mass is not None:
            dh_mol = dh * molar_mass  # J/mol
            ds = transition_entropy_J_molK(dh_mol, float(T[pk]))
            ds_err = dh_err * molar_mass / float(T[pk])
            nst = boltzmann_states(ds)
            nst_err = nst * ds_err / R_J_MOLK  # dN = N d|dS| / R
            if nst > MAX_ORIENTATIONAL_STATES:
                flags.append(Flag("entropy_too_large_for_orientations",
                                  f"Segment {seg}: |dS| = {abs(ds):.0f} J/(mol K) at {T[pk]:.1f} K is too large for an "
                                  f"orientational count (N would be {nst:.0f} > {MAX_ORIENTATIONAL_STATES:g}); N is "
                                  "not reported"))
                nst = nst_err = None
        peaks.append(
            DscPeak(
                segment=seg,
                segment_direction=seg_direction,
                direction="endo" if dh > 0 else "exo",
                onset_K=onset_K,
                peak_K=float(T[pk]),
                end_K=float(T[e]),
                start_K=float(T[s]),
                width_K=width_K,
                dh_J_g=dh,
                dh_kJ_mol=dh_mol / 1e3 if dh_mol is not None else None,
                ds_J_molK=ds,
                n_states=nst,
                dh_err_J_g=dh_err,
                dh_err_kJ_mol=dh_err * molar_mass / 1e3 if molar_mass is not None else None,
                ds_err_J_molK=ds_err,
                n_states_err=nst_err,
            )
        )
        curves.append(
            {
                "segment": seg,
                "t_K": Tw,
                "heat_flow_W_g": y[s : e + 1],
                "baseline_W_g": base,
                "peak_K": float(T[pk]),
                "peak_W_g": float(y[pk]),
                "dh_J_g": dh,
                "dh_err_J_g": dh_err,
                "onset": onset_info,
            }
        )
    return peaks, curves, flags


def _onset(
    T: np.ndarray, y: np.ndarray, s: int, s_rise: int, pk: int, base: np.ndarray, sign: int
) -> tuple[float | None, dict[str, Any] | None]:
    """Extrapolated onset: steepest-slope tangent of the leading edge meets the pre-transition baseline.

    ``s`` is the start of the integration window, ``s_rise`` the first sample of the rise
    (signal off the baseline); the smoothing window scales with the rise, not the window.
    """
    n_lead = pk - s
    n_rise = pk - s_rise
    if n_rise < 3:
        return None, None
    # Pre-transition baseline: a line through the data just before the peak region.
    pre_lo = max(0, s - max(ANCHOR_POINTS, n_lead))
    if s - pre_lo + 1 >= ANCHOR_POINTS:
        mb, cb = np.polyfit(T[pre_lo : s + 1], y[pre_lo : s + 1], 1)
    else:
        mb = (base[-1] - base[0]) / (T[s + len(base) - 1] - T[s])
        cb = base[0] - mb * T[s]
    lo = max(0, s - 2)
    seg_y = y[lo : pk + 1]
    win = _odd(max(5, n_rise // 3))
    if win > len(seg_y):
        win = _odd(len(seg_y)) if len(seg_y) % 2 else len(seg_y) - 1
    if win < 3:
        return None, None
    y_s = savgol_filter(seg_y, win, polyorder=min(2, win - 1), mode="interp")
    dy_di = savgol_filter(seg_y, win, polyorder=min(2, win - 1), deriv=1, mode="interp")
    dT_di = np.gradient(T[lo : pk + 1])
    j0 = s - lo
    rel = int(np.argmax(sign * dy_di[j0:])) + j0  # steepest rise towards the peak, in scan order
    if dT_di[rel] == 0:
        return None, None
    slope = dy_di[rel] / dT_di[rel]
    tk, yk = float(T[lo + rel]), float(y_s[rel])
    if slope == mb:
        return None, None
    onset = (cb - yk + slope * tk) / (slope - mb)
    if not math.isfinite(onset):
        return None, None
    info = {
        "t_K": float(onset),
        "heat_flow_W_g": float(mb * onset + cb),
        "tangent_point_K": tk,
        "tangent_point_W_g": yk,
        "tangent_slope_W_gK": float(slope),
        "baseline_slope_W_gK": float(mb),
        "baseline_intercept_W_g": float(cb),
    }
    return float(onset), info
