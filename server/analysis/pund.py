"""PUND (positive-up-negative-down) pulse analysis: switched versus non-switched polarization.

Five pulses: a preset of one polarity, then P and U of the opposite polarity, then N and D
of the preset polarity. P and N switch the sample and carry switching plus non-switching
charge; U and D, of the same polarity as the pulse before them, carry only the
non-switching part (dielectric, leakage). Their difference is the switched polarization,
about 2 Pr; a lossy dielectric gives P* = U^ and no difference.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.integrate import cumulative_trapezoid

from server.analysis.results import Flag, Result
from server.analysis.hysteresis import KV_CM_PER_V_UM, UC_CM2_PER_UC_CM2, UC_PER_A_S
from server.errors import AnalysisError

METHOD = (
    "PUND: five-pulse sequence (preset, P, U, N, D); switched polarization dP = P* - U^ from the "
    "polarization change to each pulse's end, about 2 Pr (J. F. Scott, Ferroelectric Memories, Springer 2000)."
)
VERSION = "pund/1.0"

PULSE_NAMES = ("preset", "P", "U", "N", "D")
PULSE_HIGH = 0.5  # a pulse reaches |drive| > 0.5 max |drive| ...
PULSE_LOW = 0.2  # ... and lasts while |drive| > 0.2 max |drive| (Schmitt trigger)
PLATEAU = 0.9  # the plateau: |drive| >= 0.9 x the pulse's own peak
# Decision thresholds (common practice, our numbers): dP must exceed 5 noise standard
# deviations and 5 % of P*, for both polarities.
SIGNIFICANCE_SIGMA = 5.0
SIGNIFICANCE_FRACTION = 0.05


@dataclass(frozen=True)
class PundPulse:
    """One detected pulse (for plotting and inspection)."""

    name: str
    sign: int
    t_start_s: float
    t_end_s: float
    change_uC_cm2: float  # polarization change, level before -> pulse end, in the pulse direction
    remanent_uC_cm2: float | None  # level before -> level after, in the pulse direction


@dataclass(frozen=True)
class PundResult(Result):
    """Result of :func:`analyse_pund`; ``to_dict()`` gives the contract keys."""

    JSON_OMIT = ("pulses", "t_s", "p_uC_cm2")  # plot data

    p_switched_uC_cm2: float
    p_switched_neg_uC_cm2: float
    p_nonswitched_uC_cm2: float
    p_star_uC_cm2: float
    p_hat_uC_cm2: float
    n_star_uC_cm2: float
    d_hat_uC_cm2: float
    pr_pund_uC_cm2: float
    dpr_remanent_uC_cm2: float | None
    pulse_count: int
    pulse_width_s: float
    pulse_amplitude: float
    pulse_amplitude_unit: str
    e_pulse_kV_cm: float | None
    noise_uC_cm2: float
    source: str
    verdict: str
    flags: tuple[Flag, ...]
    pulses: tuple[PundPulse, ...] = field(repr=False, compare=False)
    t_s: np.ndarray = field(repr=False, compare=False)
    p_uC_cm2: np.ndarray = field(repr=False, compare=False)


def _column(frame: pd.DataFrame, name: str) -> np.ndarray:
    values = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        raise AnalysisError(
            f"{bad.size} value(s) in column '{name}' are missing or not numbers (first at row {bad[0] + 1})",
            column=name,
        )
    return values


def _read(frame, area_cm2, thickness_um):
    """Time (s), drive (V or kV/cm), P (uC/cm^2), drive unit, field per drive unit, source."""
    cols = set(frame.columns)
    if "t_s" not in cols:
        raise AnalysisError("a PUND record needs a time column (t_s)")
    t = _column(frame, "t_s")
    if np.any(np.diff(t) <= 0):
        i = int(np.flatnonzero(np.diff(t) <= 0)[0])
        raise AnalysisError(f"time must increase from row to row (row {i + 2} is not later than row {i + 1})",
                            column="t_s")
    if {"E_kV_cm", "P_uC_cm2"} <= cols:
        return t, _column(frame, "E_kV_cm"), _column(frame, "P_uC_cm2"), "kV/cm", 1.0, "E/P"
    if "V_V" in cols and ({"Q_uC"} & cols or {"I_A"} & cols):
        if area_cm2 is None:
            raise AnalysisError("the area is needed to turn charge into polarization (P = Q/A)", field="area")
        area = float(area_cm2)
        if not np.isfinite(area) or area <= 0:
            raise AnalysisError(f"the area must be a positive number, not {area}", field="area")
        per_volt = None
        if thickness_um is not None:
            if not np.isfinite(thickness_um) or thickness_um <= 0:
                raise AnalysisError(f"the thickness must be a positive number, not {thickness_um}", field="thickness")
            per_volt = KV_CM_PER_V_UM / float(thickness_um)  # E = V / d (1 V/um = 10 kV/cm)
        v = _column(frame, "V_V")
        if "Q_uC" in cols:
            return t, v, UC_CM2_PER_UC_CM2 * _column(frame, "Q_uC") / area, "V", per_volt, "V/Q"  # P = Q/A
        # Q = cumulative trapezoid of I over t (1 A s = 1e6 uC); the constant cancels in differences.
        q_uC = UC_PER_A_S * cumulative_trapezoid(_column(frame, "I_A"), t, initial=0.0)
        return t, v, UC_CM2_PER_UC_CM2 * q_uC / area, "V", per_volt, "V/I/t"
    raise AnalysisError(
        "a PUND record needs t_s with E_kV_cm + P_uC_cm2, or V_V + Q_uC, or V_V + I_A; this table has "
        + (", ".join(map(str, frame.columns)) or "no columns")
    )


def _pulses(drive: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Start, end (exclusive) and sign of each pulse (Schmitt trigger on |drive|)."""
    amp = float(np.max(np.abs(drive)))
    if amp == 0:
        raise AnalysisError("the drive is zero throughout: no pulses")
    label = np.sign(drive).astype(np.int8) * (np.abs(drive) > PULSE_LOW * amp)
    change = np.flatnonzero(np.diff(label)) + 1
    starts = np.r_[0, change]
    ends = np.r_[change, drive.size]
    run_sign = label[starts]
    high = (np.abs(drive) > PULSE_HIGH * amp).astype(np.int64)
    reaches = np.add.reduceat(high, starts) > 0
    keep = (run_sign != 0) & reaches
    return starts[keep], ends[keep], run_sign[keep].astype(int)


def _noise(p: np.ndarray) -> float:
    """Robust noise from first differences of a flat level: 1.4826 median|dP| / sqrt(2)."""
    d = np.diff(p)
    return float(1.4826 * np.median(np.abs(d)) / np.sqrt(2.0)) if d.size else 0.0


def analyse_pund(
    frame: pd.DataFrame,
    *,
    area_cm2: float | None = None,
    thickness_um: float | None = None,
) -> PundResult:
    """Analyse a five-pulse PUND record.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical columns: ``t_s`` with ``E_kV_cm`` + ``P_uC_cm2``, or ``V_V`` + ``Q_uC``, or
        ``V_V`` + ``I_A`` (integrated with the cumulative trapezoid rule).
    area_cm2 : float, optional
        Electrode area (cm^2), needed for charge or current input (P = Q/A).
    thickness_um : float, optional
        Thickness (um); only used to report the pulse field (E = V/d).

    Returns
    -------
    PundResult
        ``p_star_uC_cm2`` (P*), ``p_hat_uC_cm2`` (U^, also ``p_nonswitched_uC_cm2``),
        ``n_star_uC_cm2`` (N*), ``d_hat_uC_cm2`` (D^): polarization change from the level
        before each pulse to the end of its plateau, in the pulse direction;
        ``p_switched_uC_cm2`` = P* - U^, ``p_switched_neg_uC_cm2`` = N* - D^;
        ``pr_pund_uC_cm2`` = mean of the two / 2 (dP is about 2 Pr);
        ``dpr_remanent_uC_cm2``: the same difference taken to the levels after the pulses
        (the switched polarization that stays); ``pulse_count``, ``pulse_width_s`` (median
        width at half the pulse's peak), ``pulse_amplitude`` (+ unit), ``e_pulse_kV_cm``;
        ``noise_uC_cm2``; ``verdict`` ("switching" | "no_switching") and ``flags``.

    Raises
    ------
    AnalysisError
        Missing columns or area, time not increasing, not exactly five pulses (the
        message says how many were found), wrong polarity order, or no zero-field
        interval between pulses.

    Notes
    -----
    Pulses are runs where |drive| exceeds 20 % of its maximum and that reach 50 % of it.
    Levels are medians of P over the second half of each zero-field interval; the value
    at the pulse is the median over the last fifth of its plateau (|drive| >= 90 % of the
    pulse's peak). Noise is a robust standard deviation from first differences of P in the
    zero-field intervals. "switching" needs dP > 5 sigma and dP > 5 % of P* for both
    polarities: our thresholds, in the spirit of common practice. Flags: ``leaky`` (U or D
    leaves a lasting change: charge passed through the sample), ``relaxation`` (less than
    80 % of dP remains after the pulses), ``asymmetric`` (the two polarities differ by more
    than 25 %).

    References
    ----------
    J. F. Scott, Ferroelectric Memories, Springer, Berlin (2000), doi:10.1007/978-3-662-04307-3
    (PUND; memory).
    """
    t, drive, p, unit, e_per_unit, source = _read(frame, area_cm2, thickness_um)
    starts, ends, signs = _pulses(drive)
    if starts.size != 5:
        raise AnalysisError(
            f"found {starts.size} pulse(s) (|drive| above half its maximum); a PUND record needs exactly five: "
            "preset, P, U, N, D"
        )
    expected = signs[0] * np.array([1, -1, -1, 1, 1])
    if not np.array_equal(signs, expected):
        found = " ".join("+" if s > 0 else "-" for s in signs)
        raise AnalysisError(
            f"pulse polarities are {found}; PUND needs preset, then P and U opposite to it, then N and D like it "
            "(e.g. - + + - -)"
        )
    gap_bounds = [(0 if k == 0 else int(ends[k - 1]), int(starts[k])) for k in range(5)]
    gap_bounds.append((int(ends[4]), p.size))
    for k in range(1, 5):
        lo, hi = gap_bounds[k]
        if hi - lo < 2:
            raise AnalysisError(
                f"no zero-field interval between pulses {PULSE_NAMES[k - 1]} and {PULSE_NAMES[k]}: "
                "the level before each pulse cannot be read"
            )

    def level(k):
        lo, hi = gap_bounds[k]
        if hi - lo < 2:
            return None
        return float(np.median(p[lo + (hi - lo) // 2 : hi]))

    levels = [level(k) for k in range(6)]
    gap_p = np.concatenate([p[lo:hi] for lo, hi in gap_bounds[1:5]])
    noise = _noise(gap_p)

    pulses = []
    tops = []
    widths = []
    peaks = []
    for k in range(5):
        s, e_, sign = int(starts[k]), int(ends[k]), int(signs[k])
        mag = np.abs(drive[s:e_])
        peak = float(mag.max())
        peaks.append(peak)
        plateau = np.flatnonzero(mag >= PLATEAU * peak) + s
        last = plateau[-max(1, plateau.size // 5) :]
        top = float(np.median(p[last]))
        tops.append(top)
        half = np.flatnonzero(mag >= 0.5 * peak) + s
        widths.append(float(t[half[-1]] - t[half[0]]))
        before, after = levels[k], levels[k + 1]
        change = sign * (top - before) if before is not None else float("nan")
        remanent = sign * (after - before) if before is not None and after is not None else None
        pulses.append(PundPulse(PULSE_NAMES[k], sign, float(t[s]), float(t[e_ - 1]), change, remanent))

    p_star, u_hat, n_star, d_hat = (pulses[k].change_uC_cm2 for k in range(1, 5))
    dp_pos = p_star - u_hat
    dp_neg = n_star - d_hat
    dp_mean = (dp_pos + dp_neg) / 2.0
    rem = [pulses[k].remanent_uC_cm2 for k in range(1, 5)]
    dpr = None
    if None not in rem:
        dpr = ((rem[0] - rem[1]) + (rem[2] - rem[3])) / 2.0

    flags: list[Flag] = []
    threshold = max(SIGNIFICANCE_SIGMA * noise, 0.0)
    significant = [dp > threshold and dp > SIGNIFICANCE_FRACTION * abs(star)
                   for dp, star in ((dp_pos, p_star), (dp_neg, n_star))]
    verdict = "switching" if all(significant) else "no_switching"
    if verdict == "no_switching" and any(significant):
        flags.append(Flag("one_polarity", "Only one polarity shows a significant switched polarization."))
    if verdict == "switching" and abs(dp_pos - dp_neg) > 0.25 * dp_mean:
        flags.append(Flag("asymmetric", f"Switched polarization differs between polarities ({dp_pos:.3g} vs "
                          f"{dp_neg:.3g} uC/cm²): imprint or a wake-up/fatigue effect."))
    leak_u = [r for r in (rem[1], rem[3]) if r is not None]
    if leak_u and max(abs(r) for r in leak_u) > max(SIGNIFICANCE_SIGMA * noise, 0.1 * max(abs(u_hat), abs(d_hat))):
        flags.append(Flag("leaky", "The non-switching pulses (U, D) leave a lasting polarization change: charge "
                          "leaks through the sample; PUND subtracts it only if it is the same for P and U."))
    if verdict == "switching" and dpr is not None and dpr < 0.8 * dp_mean:
        flags.append(Flag("relaxation", f"Only {dpr / dp_mean:.0%} of the switched polarization remains after the "
                          "pulses (back-switching or poor retention)."))

    pulse_amp = float(np.median(peaks))
    e_pulse = pulse_amp * e_per_unit if e_per_unit is not None else None
    return PundResult(
        p_switched_uC_cm2=dp_pos,
        p_switched_neg_uC_cm2=dp_neg,
        p_nonswitched_uC_cm2=u_hat,
        p_star_uC_cm2=p_star,
        p_hat_uC_cm2=u_hat,
        n_star_uC_cm2=n_star,
        d_hat_uC_cm2=d_hat,
        pr_pund_uC_cm2=dp_mean / 2.0,
        dpr_remanent_uC_cm2=dpr,
        pulse_count=5,
        pulse_width_s=float(np.median(widths)),
        pulse_amplitude=pulse_amp,
        pulse_amplitude_unit=unit,
        e_pulse_kV_cm=e_pulse,
        noise_uC_cm2=noise,
        source=source,
        verdict=verdict,
        flags=tuple(flags),
        pulses=tuple(pulses),
        t_s=t,
        p_uC_cm2=p,
    )
