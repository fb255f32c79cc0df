"""P-E hysteresis loops: remanent polarization, coercive field, loss, and a shape verdict.

The numbers (Pr, Ec, Ps, imprint, loss) follow the standard definitions; the verdict
asks whether the loop looks like ferroelectric switching at all, because a lossy or
leaky linear dielectric also draws a closed loop with an apparent Pr and Ec
(Scott 2008). Numbers are always reported; the verdict and the flags say whether to
trust them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.integrate import cumulative_trapezoid
from scipy.signal import savgol_filter

from server.analysis.results import Flag, Result
from server.errors import AnalysisError
from server.ingest.units import Q_

METHOD = (
    "P-E hysteresis: Pr and Ec from the zero crossings of both branches, Ps from the high-field "
    "linear part, loss as the closed integral of E dP (IEEE Std 180-1986 definitions), with shape "
    "tests that reject lossy-dielectric ellipses (J. F. Scott, J. Phys.: Condens. Matter 20, 021001 (2008))."
)
VERSION = "hysteresis/1.2"  # 1.2: a saturated remanent loop is "switching" (was "ferroelectric")

#: ``switching``: a saturated remanent loop. A loop shows switching at most; whether the compound is
#: ferroelectric is the compound verdict's question (server/analysis/verdict.py; migration 0019 renamed
#: the stored ``ferroelectric``).
VERDICTS = ("switching", "paraelectric", "linear_dielectric", "lossy_dielectric", "inconclusive")

MIN_POINTS_PER_CYCLE = 20

# Shape-test thresholds. They are our choices (common practice in spirit, not from a
# standard): each is stated as a fraction of a scale of the loop itself.
ELLIPSE_TOL = 0.03  # excess rms residual of the linear + quadrature fit, / Pmax
LINEAR_SIN_DELTA = 0.02  # apparent Pr / Pmax below this: a plain line (tan(delta) < ~0.02)
REMANENCE_MIN = 0.05  # Pr / Pmax below this: no remanence
PINCHED_AREA = 0.05  # loop area / (4 Emax Pmax) above this without remanence: pinched loop
SATURATION_SLOPE = 0.25  # high-field slope / slope at Ec above this: not saturated
TIP_GAP = 0.10  # branch gap at 0.9 Emax / (2 Pr) above this: branches do not merge
TIP_RISE = 1.25  # slope in the top 5 % of field / slope in 80-95 %: the branch curls up
OPEN_LOOP = 0.05  # |P(end) - P(start)| / (2 Pmax) above this: the loop does not close
NOISY = 0.20  # noise / half the 5-95 % range of P above this: shapes cannot be judged


# Keys that are only apparent values (what a closed curve gives, not a switched
# polarization or a coercive field) unless the verdict is "switching".
APPARENT_KEYS = ("pr_pos_uC_cm2", "pr_neg_uC_cm2", "pr_uC_cm2", "ec_pos_kV_cm", "ec_neg_kV_cm", "ec_kV_cm")


@dataclass(frozen=True)
class LoopCycle:
    """The analysed cycle, in time order, for plotting (not part of ``to_dict``)."""

    e_kV_cm: np.ndarray
    p_uC_cm2: np.ndarray
    ascending: np.ndarray  # True on the ascending branch


@dataclass(frozen=True)
class LoopResult(Result):
    """Result of :func:`analyse_loop`; ``to_dict()`` gives the contract keys."""

    JSON_OMIT = ("cycle",)  # plot data

    pr_pos_uC_cm2: float
    pr_neg_uC_cm2: float
    pr_uC_cm2: float
    ec_pos_kV_cm: float
    ec_neg_kV_cm: float
    ec_kV_cm: float
    pmax_uC_cm2: float
    emax_kV_cm: float
    ps_uC_cm2: float | None
    imprint_kV_cm: float
    loss_mJ_cm3: float
    squareness: float | None
    p_offset_uC_cm2: float
    apparent: tuple[str, ...]
    cycles_found: int
    cycle_used: int
    points: int
    frequency_Hz: float | None
    source: str
    shape: dict[str, Any]
    verdict: str
    flags: tuple[Flag, ...]
    cycle: LoopCycle = field(repr=False, compare=False)


# ---------------------------------------------------------------- input

# Unit factors from the shared pint registry, as plain floats so arrays stay numpy:
# E = V/d in kV/cm from V and um (= 10), P = Q/A in uC/cm^2 from uC and cm^2 (= 1),
# charge in uC from A s (= 1e6).
KV_CM_PER_V_UM = float((Q_(1.0, "V") / Q_(1.0, "um")).to("kV/cm").magnitude)
UC_CM2_PER_UC_CM2 = float((Q_(1.0, "uC") / Q_(1.0, "cm^2")).to("uC/cm^2").magnitude)
UC_PER_A_S = float(Q_(1.0, "A*s").to("uC").magnitude)


def _column(frame: pd.DataFrame, name: str) -> np.ndarray:
    values = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        raise AnalysisError(
            f"{bad.size} value(s) in column '{name}' are missing or not numbers (first at row {bad[0] + 1}); "
            "remove or fix those rows",
            column=name,
        )
    return values


def _positive(value: float | None, name: str, why: str) -> float:
    if value is None:
        raise AnalysisError(f"the {name} is needed to {why}", field=name)
    value = float(value)
    if not np.isfinite(value) or value <= 0:
        raise AnalysisError(f"the {name} must be a positive number, not {value}", field=name)
    return value


def _read_loop(
    frame: pd.DataFrame, area_cm2: float | None, thickness_um: float | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, str]:
    """E (kV/cm), P (uC/cm^2) before centring, t (s) or None, and the input kind."""
    cols = set(frame.columns)
    t = _column(frame, "t_s") if "t_s" in cols else None
    if t is not None and np.any(np.diff(t) <= 0):
        i = int(np.flatnonzero(np.diff(t) <= 0)[0])
        raise AnalysisError(
            f"time must increase from row to row (row {i + 2} is not later than row {i + 1}): "
            "the loop is read in time order",
            column="t_s",
        )
    if {"E_kV_cm", "P_uC_cm2"} <= cols:
        return _column(frame, "E_kV_cm"), _column(frame, "P_uC_cm2"), t, "E/P"
    if "V_V" in cols and ("Q_uC" in cols or {"I_A", "t_s"} <= cols):
        area = _positive(area_cm2, "area", "turn charge into polarization (P = Q/A)")
        d_um = _positive(thickness_um, "thickness", "turn voltage into field (E = V/d)")
        # E = V / d (1 V/um = 10 kV/cm)
        e = KV_CM_PER_V_UM * _column(frame, "V_V") / d_um
        if "Q_uC" in cols:
            # P = Q / A (1 uC / 1 cm^2 = 1 uC/cm^2)
            return e, UC_CM2_PER_UC_CM2 * _column(frame, "Q_uC") / area, t, "V/Q"
        # Q = integral of I dt (cumulative trapezoid; 1 A s = 1e6 uC). The integration
        # constant is unknown, so the analysed cycle is centred later (mean P = 0).
        q_uC = UC_PER_A_S * cumulative_trapezoid(_column(frame, "I_A"), t, initial=0.0)
        return e, UC_CM2_PER_UC_CM2 * q_uC / area, t, "V/I/t"
    missing = "E_kV_cm + P_uC_cm2, or V_V + Q_uC, or V_V + I_A + t_s"
    raise AnalysisError(
        f"a P-E loop needs columns {missing}; this table has {', '.join(map(str, frame.columns)) or 'none'}"
    )


# ---------------------------------------------------------------- cycles


def _field_extrema(e: np.ndarray) -> np.ndarray:
    """Indices of alternating field extrema, found with a Schmitt trigger.

    A maximum is the largest field within a run of samples above mid + half/2 (and a
    minimum likewise below mid - half/2); runs that do not cross the other band are one
    run, so noise on E cannot make false turning points.
    """
    lo, hi = float(e.min()), float(e.max())
    mid, half = (hi + lo) / 2.0, (hi - lo) / 2.0
    band = (e > mid + 0.5 * half).astype(np.int8) - (e < mid - 0.5 * half).astype(np.int8)
    nz = np.flatnonzero(band)
    if nz.size == 0:
        return nz
    b = band[nz]
    starts = np.r_[0, np.flatnonzero(np.diff(b)) + 1]
    signed = e[nz] * b  # maxima of e in high runs, maxima of -e in low runs
    peak = np.maximum.reduceat(signed, starts)
    run_of = np.repeat(np.arange(starts.size), np.diff(np.r_[starts, nz.size]))
    is_peak = signed == peak[run_of]
    first = np.minimum.reduceat(np.where(is_peak, np.arange(nz.size), nz.size), starts)
    idx = nz[first]
    # An extremum on the first or last sample is a turning point only if it reaches the
    # field of the other extrema of its sign (the record may start or stop mid-ramp).
    keep = np.ones(idx.size, dtype=bool)
    for j in (0, idx.size - 1):
        if idx[j] in (0, e.size - 1):
            same = [k for k in range(idx.size) if b[starts[k]] == b[starts[j]] and k != j]
            ref = float(np.median(e[idx[same]])) if same else (hi if b[starts[j]] > 0 else lo)
            keep[j] = abs(e[idx[j]] - ref) <= 0.02 * (hi - lo)
    return idx[keep]


def _count_periods(ext: np.ndarray, n: int) -> tuple[int, bool]:
    """Complete drive periods in a record of ``n`` samples with field extrema at ``ext``.

    Between the first and last extremum lie ``len(ext) - 1`` half periods; the samples
    before the first and after the last add their share of a half period (the mean
    samples per half period between the extrema), so a sine that starts and ends at
    zero field after three periods counts three, as does one that runs tip to tip.
    Returns the count (periods rounded down, within 5 % of a period) and whether the
    record holds a whole number of periods (within 5 %).
    """
    half = (ext[-1] - ext[0]) / (ext.size - 1)
    periods = ((ext.size - 1) + (ext[0] + (n - 1 - ext[-1])) / half) / 2.0
    return int(np.floor(periods + 0.05)), bool(abs(periods - round(periods)) <= 0.05)


@dataclass(frozen=True)
class _Cycle:
    index: np.ndarray  # sample indices of the cycle in time order
    turn: int  # position (within index) of the middle extremum
    cycles_found: int
    trailing: int  # samples after the cycle that were not analysed
    wrapped: bool
    whole_periods: bool = False  # the record holds a whole number of drive periods


def _select_cycle(e: np.ndarray) -> _Cycle:
    n = e.size
    ext = _field_extrema(e)
    m = ext.size
    if m >= 3:
        a, mid, b = ext[m - 3], ext[m - 2], ext[m - 1]
        count, whole = _count_periods(ext, n)
        return _Cycle(np.arange(a, b + 1), int(mid - a), count, int(n - 1 - b), False, whole)
    span = float(e.max() - e.min())
    if m == 2 and abs(e[0] - e[-1]) <= 0.05 * span and 0 < ext[0] and ext[1] < n - 1:
        # One drive period that starts and ends between the tips (0 -> +Emax -> -Emax -> 0):
        # join end and start into one cycle that runs from the second extremum round.
        # A record that closes on its first sample repeats it: join without the repeat,
        # which would otherwise stand as a pause in the drive (and bias the smoothing).
        skip = int(abs(e[0] - e[-1]) <= 1e-9 * span)
        index = np.r_[ext[1] : n, skip : ext[1] + 1]
        return _Cycle(index, int(n - ext[1] + ext[0] - skip), 1, 0, True, True)
    raise AnalysisError(
        f"no complete field cycle: found {m} field extreme(s); the field must run from one extreme "
        "to the other and back (or one full period starting and ending at the same field)"
    )


# ---------------------------------------------------------------- geometry helpers


def _crossings(a: np.ndarray, b: np.ndarray, level: float = 0.0) -> np.ndarray:
    """Values of b where a crosses ``level``, by linear interpolation between bracketing samples."""
    d = a - level
    s = d >= 0
    i = np.flatnonzero(s[:-1] != s[1:])
    if i.size == 0:
        return i.astype(float)
    denom = d[i] - d[i + 1]
    frac = np.divide(d[i], denom, out=np.zeros(i.size), where=denom != 0)
    return b[i] + frac * (b[i + 1] - b[i])


def _line(e: np.ndarray, p: np.ndarray) -> tuple[float, float, float] | None:
    """Least-squares slope, intercept and slope standard error of P(E); None if E does not spread."""
    if e.size < 3 or np.ptp(e) == 0:
        return None
    # elementwise sums, not BLAS dot: no thread start-up on long arrays
    de = e - e.mean()
    sxx = float((de * de).sum())
    slope = float((de * (p - p.mean())).sum() / sxx)
    intercept = float(p.mean() - slope * e.mean())
    resid = p - (intercept + slope * e)
    se = float(np.sqrt((resid * resid).sum() / (e.size - 2) / sxx))
    return slope, intercept, se


def _noise(p: np.ndarray) -> float:
    """Noise on P from second differences: sigma = 1.4826 median|d2P| / sqrt(6).

    A robust estimator (median absolute deviation); smooth parts of the loop add
    almost nothing to second differences of densely sampled data.
    """
    d2 = np.diff(p, 2)
    return float(1.4826 * np.median(np.abs(d2)) / np.sqrt(6.0)) if d2.size else 0.0


SMOOTH_FRACTION = 0.02  # Savitzky-Golay window as a fraction of the cycle's points (our choice)


def _smooth_closed(p: np.ndarray) -> np.ndarray:
    """P smoothed along the (closed) cycle in time order: Savitzky-Golay, quadratic.

    The window is 2 % of the cycle's samples (odd, at least 5), so it spans the same
    part of the drive period at any point density: about +/-1 % of a period, over which
    a saturated or switching branch is well described by a parabola in time, while
    white noise drops by about half at 500 points per cycle and more at denser
    sampling. ``mode="wrap"`` treats the cycle as closed. Used for the values read at a
    point of the loop (P at E = 0, at 0.9 Emax and at the tips); straight-line fits use
    the raw samples, whose residuals give honest standard errors.

    References
    ----------
    A. Savitzky and M. J. E. Golay, Anal. Chem. 36, 1627 (1964), doi:10.1021/ac60214a047.
    """
    window = max(5, int(round(SMOOTH_FRACTION * p.size)) | 1)
    if window >= p.size:
        return p
    return savgol_filter(p, window, 2, mode="wrap")


def _excess(rms: float, noise: float) -> float:
    return float(np.sqrt(max(rms * rms - noise * noise, 0.0)))


# ---------------------------------------------------------------- analysis


def analyse_loop(
    frame: pd.DataFrame,
    *,
    area_cm2: float | None = None,
    thickness_um: float | None = None,
    frequency_Hz: float | None = None,
) -> LoopResult:
    """Analyse a P-E hysteresis loop.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical columns, rows in time order: ``E_kV_cm`` + ``P_uC_cm2``; or ``V_V`` +
        ``Q_uC`` (needs ``area_cm2`` and ``thickness_um``); or ``V_V`` + ``I_A`` + ``t_s``
        (current integrated with the cumulative trapezoid rule; needs area and thickness).
        ``t_s``, when present, must increase.
    area_cm2 : float, optional
        Electrode area (cm^2): P = Q / A.
    thickness_um : float, optional
        Sample thickness (um): E = V / d.
    frequency_Hz : float, optional
        Drive frequency, reported with the result (Pr and Ec depend on it). If absent and
        ``t_s`` is present, 1 / (duration of the analysed cycle).

    Returns
    -------
    LoopResult
        ``pr_pos_uC_cm2`` = P_desc(E=0), ``pr_neg_uC_cm2`` = P_asc(E=0),
        ``pr_uC_cm2`` = (P_desc(0) - P_asc(0))/2; ``ec_pos_kV_cm`` / ``ec_neg_kV_cm`` = E where
        the ascending / descending branch crosses P = 0, ``ec_kV_cm`` = (Ec+ - Ec-)/2,
        ``imprint_kV_cm`` = (Ec+ + Ec-)/2; ``pmax_uC_cm2`` and ``emax_kV_cm`` = half the
        peak-to-peak P and E of the cycle (P smoothed, which limits the upward bias of
        noise); ``p_offset_uC_cm2`` = the constant subtracted from P to centre the cycle;
        ``ps_uC_cm2`` = mean magnitude of the E = 0 intercepts of straight lines fitted to
        each branch's top 20 % of field, reported only for a switching, saturated loop
        (None otherwise, with ``squareness``);
        ``loss_mJ_cm3`` = closed integral of E dP (1 uC/cm^2 x 1 kV/cm = 1 mJ/cm^3; positive
        for the usual counter-clockwise loop); ``squareness`` = Pr / Ps; ``apparent`` = the
        Pr and Ec keys when the verdict is not ``switching`` (they are then only what
        the closed curve gives, not a switched polarization or a coercive field);
        ``cycles_found`` (drive periods in the record), ``cycle_used`` (1-based, always the
        last complete one), ``points``
        (samples in the analysed cycle); ``shape`` (the numbers behind the verdict);
        ``verdict`` and ``flags``; ``cycle`` (arrays for plotting).

    Raises
    ------
    AnalysisError
        Missing columns or conditions (naming the field), non-numeric values, time not
        increasing, no complete cycle, fewer than 20 points in the cycle, or a loop that
        never crosses zero in E or P.

    Notes
    -----
    *Cycles.* Field extrema are found with a Schmitt trigger at +/- half the amplitude;
    a cycle runs from one extremum over the opposite one back to the first kind
    (min -> max -> min or max -> min -> max). The last complete cycle is analysed; earlier
    ones (which may hold a virgin curve) are counted in ``cycles_found``, which counts drive
    periods (a sine from zero field over three periods is three cycles, with nothing left
    over). A single period that starts and ends between the tips (0 -> +E -> -E -> 0) is
    joined end to start.

    *Centring.* A charge integrator (or the integral of a current) starts at zero whatever
    the polarization state, so only differences of P are measured. For every input form
    P is centred on the midpoint of the analysed cycle's smoothed extremes (the tips of a
    symmetric drive sit at +/-Pmax, with or without imprint) and the constant removed is
    reported as ``p_offset_uC_cm2``. Pr = (P_desc(0) - P_asc(0))/2 does not change; Ec+,
    Ec- and the imprint do, and would be false without it.

    *Noise.* Values read at a point (P at E = 0, E at P = 0, P at 0.9 Emax, the tips) come
    from P smoothed along the cycle with a quadratic Savitzky-Golay filter over 2 % of
    the cycle's samples (a window scaled to the point density); slopes come from
    straight-line fits to the raw samples, with standard errors from their residuals.

    *Crossings.* Zero crossings are interpolated linearly between the bracketing samples
    of a smoothed branch; if noise still makes several, their median is used.

    *Shape tests* (thresholds are ours, stated as fractions of the loop's own scales):
    (1) a least-squares fit of P = a x + b s sqrt(1 - x^2) + c, x = (E - E_mid)/Emax, s = +1
    on the descending and -1 on the ascending branch: the exact form of the ellipse a
    linear lossy or leaky dielectric draws under sinusoidal drive (Scott 2008); if the rms
    residual in excess of the noise is below 3 % of Pmax, the loop is a linear response:
    ``linear_dielectric`` when b / Pmax (= sin delta) < 0.02, else ``lossy_dielectric``
    with the flag ``elliptical``. (2) Saturation: the slope of the top 20 % of field on each
    branch must be below 1/4 of the slope at Ec, the extrapolated Ps must not fall below Pr
    (a line through a still-bending top does), and the branches must merge at the tips
    (gap at 0.9 Emax below 10 % of 2 Pr). (3) Rounded tips: the arriving branch steepens in
    the top 5 % of field (slope more than 1.25 times that between 80 and 95 %,
    beyond two standard errors, and not negligible against the slope at Ec): the sign of a
    current in quadrature with P (conduction); with unmerged tips this is flagged ``leaky``.
    (4) Remanence: Pr / Pmax >= 0.05, else ``paraelectric`` (or a pinched loop if it still
    has area). Only a remanent, saturated loop with pointed tips that closes and runs
    counter-clockwise is called ``ferroelectric``; otherwise the numbers are reported with
    verdict ``inconclusive`` and flags saying why.

    References
    ----------
    IEEE Std 180-1986, IEEE Standard Definitions of Primary Ferroelectric Terms (memory).
    J. F. Scott, "Ferroelectrics go bananas", J. Phys.: Condens. Matter 20, 021001 (2008),
    doi:10.1088/0953-8984/20/02/021001.
    S. L. Miller et al., J. Appl. Phys. 68, 6463 (1990), doi:10.1063/1.346845 (the tanh loop the
    tests use; memory).
    A. Savitzky and M. J. E. Golay, Anal. Chem. 36, 1627 (1964), doi:10.1021/ac60214a047.
    """
    if len(frame) < MIN_POINTS_PER_CYCLE:
        raise AnalysisError(
            f"only {len(frame)} data rows: a loop needs at least {MIN_POINTS_PER_CYCLE} points per cycle"
        )
    e_all, p_all, t_all, source = _read_loop(frame, area_cm2, thickness_um)
    if np.ptp(e_all) == 0:
        raise AnalysisError("the field is constant: no loop was traced", column="E_kV_cm")
    if e_all.max() <= 0 or e_all.min() >= 0:
        raise AnalysisError(
            "the loop never crosses zero in E: the drive must be bipolar (positive and negative field)"
        )
    flags: list[Flag] = []
    cyc = _select_cycle(e_all)
    if cyc.index.size < MIN_POINTS_PER_CYCLE:
        raise AnalysisError(
            f"the analysed cycle has only {cyc.index.size} points; at least {MIN_POINTS_PER_CYCLE} "
            "per cycle are needed (sample faster or drive slower)"
        )
    e = e_all[cyc.index]
    p_raw = p_all[cyc.index]
    # Centre P on the midpoint of the cycle's smoothed extremes, for every input form: a
    # charge integrator starts at zero whatever the polarization state, so only
    # differences of P are measured (see Notes).
    smooth_raw = _smooth_closed(p_raw)
    p_offset = (float(smooth_raw.max()) + float(smooth_raw.min())) / 2.0
    p = p_raw - p_offset
    smooth = smooth_raw - p_offset
    if cyc.wrapped:
        flags.append(Flag("wrapped_cycle", "The record holds one period between the tips; its end and start "
                          "were joined into one cycle (valid only if the first quarter is not a virgin curve)."))
    if cyc.trailing > 0.1 * cyc.index.size and not cyc.whole_periods:
        flags.append(Flag("last_cycle_incomplete", f"The record ends with an incomplete cycle ({cyc.trailing} "
                          "points) that was not analysed; the last complete cycle was used."))

    # Branches: [0, turn] and [turn, end] of the cycle.
    first_up = e[cyc.turn] > e[0]
    asc = np.zeros(e.size, dtype=bool)
    if first_up:
        asc[: cyc.turn] = True
    else:
        asc[cyc.turn + 1 :] = True
    seg_a = slice(0, cyc.turn + 1)
    seg_b = slice(cyc.turn, e.size)
    s_asc, s_desc = (seg_a, seg_b) if first_up else (seg_b, seg_a)
    e_up, p_up = e[s_asc], p[s_asc]
    e_dn, p_dn = e[s_desc], p[s_desc]
    ps_up, ps_dn = smooth[s_asc], smooth[s_desc]  # smoothed branches, for values read at a point

    def _zero(a, b, what, branch):
        xs = _crossings(a, b)
        if xs.size == 0:
            lo, hi = float(a.min()), float(a.max())
            unit = "kV/cm" if what == "E" else "uC/cm²"
            raise AnalysisError(
                f"the loop never crosses zero in {what} on the {branch} branch ({what} runs from "
                f"{lo:.4g} to {hi:.4g} {unit}); " + (
                    "check for an uncorrected charge offset or a one-sided drive"
                    if what == "P" else "the drive must be bipolar"
                )
            )
        if xs.size > 1 and np.ptp(xs) > 0.05 * np.ptp(b):
            flags.append(Flag("noisy_crossing", f"The {branch} branch crosses {what} = 0 {xs.size} times; "
                              "the median crossing was used."))
        return float(np.median(xs))

    pr_pos = _zero(e_dn, ps_dn, "E", "descending")
    pr_neg = _zero(e_up, ps_up, "E", "ascending")
    ec_pos = _zero(ps_up, e_up, "P", "ascending")
    ec_neg = _zero(ps_dn, e_dn, "P", "descending")
    pr = (pr_pos - pr_neg) / 2.0
    ec = (ec_pos - ec_neg) / 2.0
    imprint = (ec_pos + ec_neg) / 2.0

    e_mid = (e.max() + e.min()) / 2.0
    emax = (e.max() - e.min()) / 2.0
    # Noise biases max - min upwards (by ~3 sigma); the smoothed cycle limits that.
    pmax = (smooth.max() - smooth.min()) / 2.0
    amplitude = (np.percentile(p, 95) - np.percentile(p, 5)) / 2.0  # robust scale for the noise test
    if pmax <= 0:
        raise AnalysisError("the polarization is constant over the cycle: no loop was traced")

    # Closed integral of E dP (trapezoids, closing segment included).
    e_c = np.r_[e, e[0]]
    p_c = np.r_[p, p[0]]
    loss = float(np.sum(0.5 * (e_c[1:] + e_c[:-1]) * np.diff(p_c)))

    # ---- shape tests
    noise = _noise(p)
    x = (e - e_mid) / emax
    quad = np.where(asc, -1.0, 1.0) * np.sqrt(np.clip(1.0 - x * x, 0.0, None))
    # least squares through the 3x3 normal equations (columns are O(1), well conditioned)
    cols = (x, quad, np.ones_like(x))
    gram = np.array([[float((a * b).sum()) for b in cols] for a in cols])
    coef = np.linalg.solve(gram, np.array([float((a * p).sum()) for a in cols]))
    resid = p - (coef[0] * x + coef[1] * quad + coef[2])
    ell_rms = float(np.sqrt((resid * resid).mean()))
    ell_excess = _excess(ell_rms, noise) / pmax
    sin_delta = abs(float(coef[1])) / pmax

    x_up, x_dn = (e_up - e_mid) / emax, (e_dn - e_mid) / emax

    def _near_ec(eb, pb, ecb):
        sel = (np.abs(pb) <= 0.5 * pmax) & (np.abs(eb - ecb) <= 0.25 * emax)
        fit = _line(eb[sel], pb[sel])
        if fit is None:  # steep switching: use the two samples bracketing the crossing
            i = np.flatnonzero((pb[:-1] >= 0) != (pb[1:] >= 0))
            de = eb[i + 1] - eb[i]
            ok = de != 0
            if not ok.any():
                return None
            return float(np.median((pb[i + 1] - pb[i])[ok] / de[ok]))
        return fit[0]

    slope_ec_up = _near_ec(e_up, p_up, ec_pos)
    slope_ec_dn = _near_ec(e_dn, p_dn, ec_neg)
    top_up = _line(e_up[x_up >= 0.8], p_up[x_up >= 0.8])
    top_dn = _line(e_dn[x_dn <= -0.8], p_dn[x_dn <= -0.8])
    ps = None
    if top_up is not None and top_dn is not None:
        ps = (top_up[1] - top_dn[1]) / 2.0

    def _ratio(top, s_ec):
        if top is None or s_ec is None or s_ec == 0:
            return None
        return float(top[0] / s_ec)

    sat_up, sat_dn = _ratio(top_up, slope_ec_up), _ratio(top_dn, slope_ec_dn)

    def _p_at(eb, pb, level):
        xs = _crossings(eb, pb, level)
        return float(np.median(xs)) if xs.size else None

    gaps = []
    for sign in (1.0, -1.0):
        level = e_mid + sign * 0.9 * emax
        a, b = _p_at(e_up, ps_up, level), _p_at(e_dn, ps_dn, level)
        gaps.append(None if a is None or b is None else abs(b - a))
    tip_gap = None if None in gaps or abs(pr) <= 1e-6 * pmax else max(gaps) / (2.0 * abs(pr))

    def _rise(eb, pb, xb, sign, s_ec):
        """Slope ratio top 5 % / 80-95 % of field, and whether the rise is real (beyond 2 s.e.)."""
        top = _line(eb[sign * xb >= 0.95], pb[sign * xb >= 0.95])
        band = (sign * xb >= 0.8) & (sign * xb < 0.95)
        below = _line(eb[band], pb[band])
        if top is None or below is None or below[0] == 0:
            return None, False
        excess = top[0] - TIP_RISE * below[0]
        significant = excess > 2.0 * np.hypot(top[2], TIP_RISE * below[2])
        steep = s_ec is not None and top[0] > 0.1 * abs(s_ec)
        return float(top[0] / below[0]), bool(significant and steep)

    rise_up, rounded_up = _rise(e_up, p_up, x_up, 1.0, slope_ec_up)
    rise_dn, rounded_dn = _rise(e_dn, p_dn, x_dn, -1.0, slope_ec_dn)
    rounded = rounded_up or rounded_dn

    open_gap = abs(float(p[-1] - p[0])) / (2.0 * pmax)
    area_ratio = loss / (4.0 * emax * pmax)
    remanence = abs(pr) / pmax  # magnitude: an inverted (clockwise) loop still has remanence

    shape = {
        "ellipse_residual": ell_excess,
        "sin_delta_apparent": sin_delta,
        "noise_uC_cm2": noise,
        "remanence_ratio": remanence,
        "area_ratio": area_ratio,
        "high_field_slope_ratio_pos": sat_up,
        "high_field_slope_ratio_neg": sat_dn,
        "tip_gap_ratio": tip_gap,
        "tip_slope_rise_pos": rise_up,
        "tip_slope_rise_neg": rise_dn,
        "open_gap_ratio": open_gap,
    }

    # ---- flags and verdict
    if frequency_Hz is None and t_all is not None:
        duration = float(t_all[cyc.index[-1]] - t_all[cyc.index[0]]) if not cyc.wrapped else float(
            t_all[-1] - t_all[0]
        )
        frequency_Hz = 1.0 / duration if duration > 0 else None
    if frequency_Hz is None:
        flags.append(Flag("no_frequency", "Pr and Ec depend on the drive frequency; give it so results "
                          "can be compared (IEEE Std 180-1986)."))
    # A line through the top of a branch that still bends gives Ps < Pr: not yet linear.
    saturated = (
        sat_up is not None and sat_dn is not None and sat_up < SATURATION_SLOPE and sat_dn < SATURATION_SLOPE
        and ps is not None and ps >= pr
    )
    merged = tip_gap is not None and tip_gap < TIP_GAP
    untested = sat_up is None or sat_dn is None or tip_gap is None
    is_open = open_gap > OPEN_LOOP
    clockwise = loss < 0 and pr < 0

    if is_open:
        flags.append(Flag("open_loop", f"The loop does not close: P at the end differs from the start by "
                          f"{open_gap:.0%} of 2 Pmax (drift, leakage or a changing sample)."))
    switching = False  # a remanent loop that is not the ellipse of a linear response
    if noise > NOISY * amplitude:
        flags.append(Flag("noisy", f"Noise ({noise:.3g} uC/cm²) is {noise / amplitude:.0%} of the loop's "
                          "half-height: the loop shape cannot be judged."))
        verdict = "inconclusive"
    elif ell_excess < ELLIPSE_TOL:
        if sin_delta < LINEAR_SIN_DELTA:
            verdict = "linear_dielectric"
        else:
            verdict = "lossy_dielectric"
            extra = ""
            if frequency_Hz:
                # sigma_app = omega Pr_app / E0: P in uC/cm^2 *1e-2 -> C/m^2, E in kV/cm *1e5 -> V/m
                sigma = 2 * np.pi * frequency_Hz * (abs(float(coef[1])) * 1e-2) / (emax * 1e5)
                extra = f" If it is all conduction, sigma = omega Pr / E0 = {sigma:.3g} S/m."
            flags.append(Flag("elliptical", "The loop is an ellipse (linear response plus a quadrature part): its "
                              f"apparent Pr of {abs(float(coef[1])):.4g} uC/cm² is eps0 eps'' E0 + sigma E0/omega of a "
                              "lossy or leaky dielectric, not switching (Scott 2008). Repeat at another frequency: "
                              f"a leak scales as 1/f.{extra}"))
    else:
        if rounded:
            flags.append(Flag("rounded_tips", "The branches steepen into the field tips instead of flattening: "
                              "a current in quadrature with P (conduction) rounds the tips (Scott 2008)."))
        if rounded and not merged:
            flags.append(Flag("leaky", "Rounded tips and branches that do not merge at high field: leakage current "
                              "adds apparent polarization; Pr and Ec are overestimated."))
        if remanence < REMANENCE_MIN:
            if area_ratio > PINCHED_AREA:
                verdict = "inconclusive"
                flags.append(Flag("pinched", "Hysteresis without remanence (a pinched or double loop), as from an "
                                  "antiferroelectric or a field-induced transition."))
            else:
                verdict = "paraelectric"
        else:
            switching = True
            if not saturated or (not merged and not rounded):
                flags.append(Flag("no_saturation", "The loop is not saturated (the branches are still steep at the "
                                  "highest field or do not merge at the tips): Pr and Ec are those of a minor loop; "
                                  "raise the field if the sample allows."))
            if untested:
                flags.append(Flag("shape_untested", "Too few points near the tips or Ec to run the saturation tests."))
            if clockwise:
                flags.append(Flag("clockwise", "The loop runs clockwise (negative area): the sign of the charge or "
                                  "the field is probably inverted."))
            good = saturated and merged and not rounded and not untested and not is_open and not clockwise
            verdict = "switching" if good else "inconclusive"
    if abs(imprint) > 0.05 * abs(ec) and verdict == "switching":
        flags.append(Flag("imprint", f"The loop is shifted along E by {imprint:.3g} kV/cm (imprint)."))

    # Ps (and Pr/Ps) exist only for a switching loop that saturates: extrapolating the top
    # of an ellipse, a minor loop or a paraelectric S-curve gives a number with no meaning.
    ps_defined = bool(switching and saturated and merged and not rounded and ps is not None and ps > 0)
    return LoopResult(
        pr_pos_uC_cm2=pr_pos,
        pr_neg_uC_cm2=pr_neg,
        pr_uC_cm2=pr,
        ec_pos_kV_cm=ec_pos,
        ec_neg_kV_cm=ec_neg,
        ec_kV_cm=ec,
        pmax_uC_cm2=pmax,
        emax_kV_cm=emax,
        ps_uC_cm2=ps if ps_defined else None,
        imprint_kV_cm=imprint,
        loss_mJ_cm3=loss,
        squareness=(pr / ps) if ps_defined else None,
        p_offset_uC_cm2=p_offset,
        apparent=() if verdict == "switching" else APPARENT_KEYS,
        cycles_found=cyc.cycles_found,
        cycle_used=cyc.cycles_found,
        points=int(e.size),
        frequency_Hz=frequency_Hz,
        source=source,
        shape=shape,
        verdict=verdict,
        flags=tuple(flags),
        cycle=LoopCycle(e_kV_cm=e, p_uC_cm2=p, ascending=asc),
    )
