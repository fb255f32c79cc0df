"""Synthetic ferroelectric records: P-E loops, lossy-dielectric ellipses, PUND trains.

The models are textbook ones (each function names its source); they feed the tests of
:mod:`server.analysis.hysteresis` and :mod:`server.analysis.pund` and the demo campaign.
Frames carry FILE header strings as columns ("E (kV/cm)", "P (uC/cm^2)", "V (V)",
"Q (uC)", "I (A)", "t (s)"); the conditions that go with them (frequency, sample interval,
area, thickness, model parameters) are in ``frame.attrs`` with units in the key names.

Unit bridges used throughout (plain SI arithmetic):

* 1 uC/cm^2 = 1e-2 C/m^2, 1 kV/cm = 1e5 V/m, so eps0 eps_r E gives
  P (uC/cm^2) = eps0 [F/m] * eps_r * E (kV/cm) * 1e5 * 1e2 = 8.8542e-5 * eps_r * E (kV/cm);
* V (V) = E (kV/cm) * 1e3 [V/cm] * d (um) * 1e-4 [cm] = 0.1 * E (kV/cm) * d (um);
* Q (uC) = P (uC/cm^2) * A (cm^2).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.integrate import cumulative_trapezoid

from server.analysis.constants import EPS0_F_M

# eps0 expressed in (uC/cm^2) per (kV/cm): 8.8541878128e-12 * 1e5 * 1e2
EPS0_UC_CM2_PER_KV_CM = EPS0_F_M * 1e7
# an ohmic current density sigma E, integrated over time: (S/m)(V/m) s = C/m^2 -> *1e2 uC/cm^2,
# with E in kV/cm (*1e5 V/m): P_leak (uC/cm^2) = 1e7 * sigma (S/m) * integral E (kV/cm) dt (s)
LEAK_UC_CM2_PER_S_M_KV_CM_S = 1e7

E_COL = "E (kV/cm)"
P_COL = "P (uC/cm^2)"


def _rng(rng: np.random.Generator | None) -> np.random.Generator:
    # Deterministic by default so the demo files are reproducible; pass a Generator for variety.
    return rng if rng is not None else np.random.default_rng(0)


def _drive_phase(cycles: int, points_per_cycle: int) -> np.ndarray:
    if cycles < 1 or points_per_cycle < 4:
        raise ValueError("cycles must be >= 1 and points_per_cycle >= 4")
    n = cycles * points_per_cycle + 1  # last point closes the last cycle
    return np.linspace(0.0, 2.0 * np.pi * cycles, n)


def _drive(theta: np.ndarray, amplitude: float, drive: str) -> tuple[np.ndarray, np.ndarray]:
    """Field and 'ascending' mask for a drive that starts at the negative tip.

    Starting at -E0 makes ``cycles`` complete min -> max -> min cycles.
    """
    phase = np.mod(theta, 2.0 * np.pi)
    if drive == "sine":
        e = -amplitude * np.cos(theta)
    elif drive == "triangle":
        e = amplitude * np.where(phase <= np.pi, -1.0 + 2.0 * phase / np.pi, 3.0 - 2.0 * phase / np.pi)
    else:
        raise ValueError(f"drive must be 'sine' or 'triangle', not {drive!r}")
    ascending = phase < np.pi
    return e, ascending


def miller_branches(e_kV_cm, ps_uC_cm2, pr_uC_cm2, ec_kV_cm, imprint_kV_cm=0.0):
    """Saturated ascending and descending branches of Miller et al. (1990).

    P_asc(E) = Ps tanh[(E - Ec)/(2 delta)], delta = Ec / ln[(1 + Pr/Ps)/(1 - Pr/Ps)],
    P_desc(E) = -P_asc(-E); an imprint shifts both along E.

    References
    ----------
    S. L. Miller, R. D. Nasby, J. R. Schwank, M. S. Rodgers, P. V. Dressendorfer,
    "Device modeling of ferroelectric capacitors", J. Appl. Phys. 68, 6463 (1990),
    doi:10.1063/1.346845 (memory).
    """
    if not 0.0 < pr_uC_cm2 < ps_uC_cm2:
        raise ValueError("the Miller model needs 0 < Pr < Ps")
    if ec_kV_cm <= 0:
        raise ValueError("the Miller model needs Ec > 0")
    delta = ec_kV_cm / np.log((1.0 + pr_uC_cm2 / ps_uC_cm2) / (1.0 - pr_uC_cm2 / ps_uC_cm2))
    x = np.asarray(e_kV_cm, dtype=float) - imprint_kV_cm
    p_asc = ps_uC_cm2 * np.tanh((x - ec_kV_cm) / (2.0 * delta))
    p_desc = ps_uC_cm2 * np.tanh((x + ec_kV_cm) / (2.0 * delta))  # = -P_asc(-x)
    return p_asc, p_desc


def miller_loop(
    ps_uC_cm2: float,
    pr_uC_cm2: float,
    ec_kV_cm: float,
    emax_kV_cm: float,
    *,
    cycles: int = 2,
    points_per_cycle: int = 500,
    imprint_kV_cm: float = 0.0,
    eps_r_background: float = 0.0,
    noise_uC_cm2: float = 0.0,
    rng: np.random.Generator | None = None,
    drive: str = "sine",
    frequency_Hz: float = 1000.0,
) -> pd.DataFrame:
    """A P-E record from the Miller tanh loop under a bipolar drive.

    Parameters
    ----------
    ps_uC_cm2, pr_uC_cm2, ec_kV_cm : float
        Saturation and remanent polarization (uC/cm^2), coercive field (kV/cm).
    emax_kV_cm : float
        Drive amplitude (kV/cm). The drive starts at -Emax, so the record holds
        ``cycles`` complete min -> max -> min cycles (plus the closing point).
    imprint_kV_cm : float
        Shift of the loop along E: Ec+ = Ec + imprint, Ec- = -Ec + imprint.
    eps_r_background : float
        Linear (non-switching) permittivity added as eps0 eps_r E.
    noise_uC_cm2 : float
        Standard deviation of Gaussian noise on P.
    drive : {"sine", "triangle"}
    frequency_Hz : float
        Drive frequency; only sets ``attrs["sample_interval_s"]`` (the model is quasi-static).

    Returns
    -------
    pandas.DataFrame
        Columns "E (kV/cm)", "P (uC/cm^2)"; ``attrs`` holds the drive and model parameters.

    Notes
    -----
    Below saturation (Emax not well above Ec) the saturated branches do not meet at the
    tips. We close them with a correction linear in E, shared half and half by the two
    branches, that makes them meet at both tips; it is ours (not Miller's minor-loop model)
    and is negligible for saturated loops (about 1e-4 uC/cm^2 for Ps 10, Pr 8, Ec 50,
    Emax 300).

    References
    ----------
    S. L. Miller et al., J. Appl. Phys. 68, 6463 (1990), doi:10.1063/1.346845 (memory).
    """
    theta = _drive_phase(cycles, points_per_cycle)
    e, ascending = _drive(theta, emax_kV_cm, drive)
    p_asc, p_desc = miller_branches(e, ps_uC_cm2, pr_uC_cm2, ec_kV_cm, imprint_kV_cm)
    tips = np.array([-emax_kV_cm, emax_kV_cm])
    tip_asc, tip_desc = miller_branches(tips, ps_uC_cm2, pr_uC_cm2, ec_kV_cm, imprint_kV_cm)
    gap_neg, gap_pos = tip_desc - tip_asc
    u = (e + emax_kV_cm) / (2.0 * emax_kV_cm)
    closure = gap_neg * (1.0 - u) + gap_pos * u
    p = np.where(ascending, p_asc + closure / 2.0, p_desc - closure / 2.0)
    p = p + EPS0_UC_CM2_PER_KV_CM * eps_r_background * e
    if noise_uC_cm2 > 0:
        p = p + _rng(rng).normal(0.0, noise_uC_cm2, p.size)
    frame = pd.DataFrame({E_COL: e, P_COL: p})
    frame.attrs.update(
        model="Miller et al., J. Appl. Phys. 68, 6463 (1990)",
        ps_uC_cm2=ps_uC_cm2,
        pr_uC_cm2=pr_uC_cm2,
        ec_kV_cm=ec_kV_cm,
        emax_kV_cm=emax_kV_cm,
        imprint_kV_cm=imprint_kV_cm,
        eps_r_background=eps_r_background,
        noise_uC_cm2=noise_uC_cm2,
        drive=drive,
        frequency_Hz=frequency_Hz,
        sample_interval_s=1.0 / (frequency_Hz * points_per_cycle),
    )
    return frame


def leaky_capacitor(
    eps_real: float,
    eps_imag: float,
    e0_kV_cm: float,
    *,
    frequency_Hz: float,
    sigma_S_m: float = 0.0,
    points_per_cycle: int = 500,
    cycles: int = 2,
    noise_uC_cm2: float = 0.0,
    rng: np.random.Generator | None = None,
) -> pd.DataFrame:
    """The ellipse a linear lossy dielectric draws under E0 sin(wt).

    P = eps0 E0 [eps' sin(th) - eps'' cos(th)] - (sigma E0 / w) cos(th), th = w t - pi/2
    (the drive starts at -E0). Apparent Pr = eps0 eps'' E0 + sigma E0 / w, apparent
    Ec = E0 sin(delta), Pmax = eps0 |eps*| E0 when sigma = 0.

    Parameters
    ----------
    eps_real, eps_imag : float
        eps' and eps'' (dimensionless) at the drive frequency.
    e0_kV_cm : float
        Field amplitude (kV/cm).
    frequency_Hz : float
        Drive frequency; the ohmic term scales as 1/f.
    sigma_S_m : float
        Ohmic conductivity (S/m).

    Returns
    -------
    pandas.DataFrame
        Columns "t (s)", "E (kV/cm)", "P (uC/cm^2)".

    References
    ----------
    J. F. Scott, "Ferroelectrics go bananas", J. Phys.: Condens. Matter 20, 021001 (2008),
    doi:10.1088/0953-8984/20/02/021001.
    """
    if frequency_Hz <= 0:
        raise ValueError("frequency_Hz must be positive")
    theta = _drive_phase(cycles, points_per_cycle)
    omega = 2.0 * np.pi * frequency_Hz
    t = theta / omega
    phase = theta - np.pi / 2.0
    e = e0_kV_cm * np.sin(phase)
    p = EPS0_UC_CM2_PER_KV_CM * e0_kV_cm * (eps_real * np.sin(phase) - eps_imag * np.cos(phase))
    p = p - LEAK_UC_CM2_PER_S_M_KV_CM_S * sigma_S_m * e0_kV_cm / omega * np.cos(phase)
    if noise_uC_cm2 > 0:
        p = p + _rng(rng).normal(0.0, noise_uC_cm2, p.size)
    frame = pd.DataFrame({"t (s)": t, E_COL: e, P_COL: p})
    frame.attrs.update(
        model="linear lossy dielectric (Scott, J. Phys.: Condens. Matter 20, 021001 (2008))",
        eps_real=eps_real,
        eps_imag=eps_imag,
        e0_kV_cm=e0_kV_cm,
        sigma_S_m=sigma_S_m,
        frequency_Hz=frequency_Hz,
        sample_interval_s=1.0 / (frequency_Hz * points_per_cycle),
    )
    return frame


def _time_axis(frame: pd.DataFrame, dt_s: float | None) -> np.ndarray:
    if "t (s)" in frame.columns:
        return frame["t (s)"].to_numpy(dtype=float)
    step = dt_s if dt_s is not None else frame.attrs.get("sample_interval_s")
    if step is None:
        raise ValueError("no 't (s)' column: give dt_s (the sample interval in s)")
    return np.arange(len(frame)) * float(step)


def raw_vq(frame: pd.DataFrame, area_cm2: float, thickness_um: float) -> pd.DataFrame:
    """Turn an E/P frame into what a charge-mode loop tracer records: V (V) and Q (uC).

    V = 0.1 E(kV/cm) d(um); Q = P(uC/cm^2) A(cm^2). A "t (s)" column is kept if present.
    """
    out = {}
    if "t (s)" in frame.columns:
        out["t (s)"] = frame["t (s)"].to_numpy(dtype=float)
    out["V (V)"] = 0.1 * frame[E_COL].to_numpy(dtype=float) * thickness_um
    out["Q (uC)"] = frame[P_COL].to_numpy(dtype=float) * area_cm2
    result = pd.DataFrame(out)
    result.attrs.update(frame.attrs, area_cm2=area_cm2, thickness_um=thickness_um)
    return result


def raw_vi(
    frame: pd.DataFrame, area_cm2: float, thickness_um: float, *, dt_s: float | None = None
) -> pd.DataFrame:
    """Turn an E/P frame into what a current-mode loop tracer records: t (s), V (V), I (A).

    I = dQ/dt with Q in C (second-order central differences, :func:`numpy.gradient`).
    Time comes from a "t (s)" column, else ``dt_s``, else ``frame.attrs["sample_interval_s"]``.
    """
    t = _time_axis(frame, dt_s)
    q_C = frame[P_COL].to_numpy(dtype=float) * area_cm2 * 1e-6
    result = pd.DataFrame(
        {
            "t (s)": t,
            "V (V)": 0.1 * frame[E_COL].to_numpy(dtype=float) * thickness_um,
            "I (A)": np.gradient(q_C, t),
        }
    )
    result.attrs.update(frame.attrs, area_cm2=area_cm2, thickness_um=thickness_um)
    return result


def pund_train(
    pr_uC_cm2: float,
    ps_uC_cm2: float,
    ec_kV_cm: float,
    e_pulse_kV_cm: float,
    *,
    eps_r_background: float = 0.0,
    pulse_width_s: float = 1e-3,
    delay_s: float = 1e-3,
    rise_s: float | None = None,
    points: int = 6000,
    leak_sigma_S_m: float = 0.0,
    noise_uC_cm2: float = 0.0,
    rng: np.random.Generator | None = None,
    switching: bool = True,
    preset_sign: int = -1,
    area_cm2: float | None = None,
    thickness_um: float | None = None,
) -> pd.DataFrame:
    """A five-pulse PUND record: preset, P, U (opposite to the preset), N, D (preset polarity).

    The sample is a quasi-static Miller hysteron (it follows the branch of its last
    switching and changes branch at a pulse plateau of opposite sign) plus a linear
    background eps0 eps_r E and an ohmic leak sigma integral(E dt). With ``switching=False``
    only the background and the leak remain (a lossy dielectric: P* = U^).

    Parameters
    ----------
    pr_uC_cm2, ps_uC_cm2, ec_kV_cm : float
        Miller loop parameters (see :func:`miller_branches`).
    e_pulse_kV_cm : float
        Pulse amplitude (kV/cm); trapezoidal pulses, rise and fall ``rise_s``
        (default pulse_width_s / 20), plateau ``pulse_width_s - rise_s``.
    delay_s : float
        Zero-field time before each pulse and after the last one.
    points : int
        Samples, uniform in time, over the whole train.
    area_cm2, thickness_um : float, optional
        If both are given, the frame holds instrument-raw "V (V)" and "Q (uC)";
        otherwise "E (kV/cm)" and "P (uC/cm^2)".

    Returns
    -------
    pandas.DataFrame
        "t (s)" and either V/Q or E/P columns.

    References
    ----------
    J. F. Scott, Ferroelectric Memories, Springer (2000) (PUND; memory);
    S. L. Miller et al., J. Appl. Phys. 68, 6463 (1990) (branches; memory).
    """
    if preset_sign not in (-1, 1):
        raise ValueError("preset_sign must be -1 or +1")
    rise = pulse_width_s / 20.0 if rise_s is None else rise_s
    period = delay_s + pulse_width_s
    total = 5 * period + delay_s
    t = np.linspace(0.0, total, points)
    signs = np.array([preset_sign, -preset_sign, -preset_sign, preset_sign, preset_sign], dtype=float)
    k = np.clip((t // period).astype(int), 0, 4)
    local = t - k * period - delay_s  # time since the start of pulse k
    shape = np.clip(np.minimum(local / rise, (pulse_width_s - local) / rise), 0.0, 1.0)
    shape = np.where((local >= 0) & (local <= pulse_width_s), shape, 0.0)
    e = e_pulse_kV_cm * signs[k] * shape

    p = EPS0_UC_CM2_PER_KV_CM * eps_r_background * e
    if switching:
        # Branch state: +1 = last switched up (follows P_desc), -1 = down (follows P_asc).
        # The state flips where the plateau (|E| = e_pulse) is reached; forward-fill it.
        at_plateau = shape >= 1.0 - 1e-9
        flips = np.where(at_plateau, signs[k], np.nan)
        flips[0] = preset_sign if np.isnan(flips[0]) else flips[0]
        state = pd.Series(flips).ffill().to_numpy(copy=True)
        # before the preset's plateau the sample sits in the state opposite to the preset
        first = np.argmax(at_plateau)
        state[:first] = -preset_sign
        p_asc, p_desc = miller_branches(e, ps_uC_cm2, pr_uC_cm2, ec_kV_cm)
        p = p + np.where(state > 0, p_desc, p_asc)
    if leak_sigma_S_m > 0:
        p = p + LEAK_UC_CM2_PER_S_M_KV_CM_S * leak_sigma_S_m * cumulative_trapezoid(e, t, initial=0.0)
    if noise_uC_cm2 > 0:
        p = p + _rng(rng).normal(0.0, noise_uC_cm2, p.size)

    attrs = dict(
        model="PUND train on a Miller hysteron with background and ohmic leak",
        pr_uC_cm2=pr_uC_cm2,
        ps_uC_cm2=ps_uC_cm2,
        ec_kV_cm=ec_kV_cm,
        e_pulse_kV_cm=e_pulse_kV_cm,
        pulse_width_s=pulse_width_s,
        delay_s=delay_s,
        switching=switching,
        leak_sigma_S_m=leak_sigma_S_m,
    )
    if area_cm2 is not None and thickness_um is not None:
        frame = pd.DataFrame({"t (s)": t, "V (V)": 0.1 * e * thickness_um, "Q (uC)": p * area_cm2})
        attrs.update(area_cm2=area_cm2, thickness_um=thickness_um)
    else:
        frame = pd.DataFrame({"t (s)": t, E_COL: e, P_COL: p})
    frame.attrs.update(attrs)
    return frame


def landau_pr_uC_cm2(t_K: float, *, tc_K: float, a_uC_cm2: float, beta: float = 0.5) -> float:
    """Remanent polarization of Landau mean-field theory near a continuous transition,
    ``Pr = A (Tc - T)^beta`` below Tc and 0 above, with beta = 1/2 (Lines and Glass 1977, ch. 3);
    ``a_uC_cm2`` is A in µC/cm² per K^beta."""
    return float(a_uC_cm2 * max(tc_K - t_K, 0.0) ** beta)
