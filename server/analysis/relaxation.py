"""Dielectric relaxation: permittivity against frequency, fitted per temperature, and tau(T).

Each isotherm eps*(f) = eps' - i eps'' is fitted with the Havriliak-Negami function

    eps*(w) = eps_inf + d_eps / (1 + (i w tau)^alpha)^beta   (+ sigma_dc / (i eps0 w))

(S. Havriliak and S. Negami, Polymer 8, 161 (1967)); ``beta = 1`` is the Cole-Cole function (K. S. Cole
and R. H. Cole, J. Chem. Phys. 9, 341 (1941)) and ``alpha = beta = 1`` the Debye relaxation
(P. Debye, *Polar Molecules*, Chemical Catalog Co., 1929). The optional dc-conductivity term adds
sigma_dc / (eps0 w) to eps'' (F. Kremer and A. Schoenhals, *Broadband Dielectric Spectroscopy*, Springer
2003, ch. 1 and 2, where the same forms and the relaxation-time map below are described).

``tau`` is the HN parameter; the time at the loss maximum differs from it when beta < 1 (Kremer and
Schoenhals 2003, eq. 1.58); both are reported (``tau_s`` and ``tau_peak_s``). The relaxation-time map
uses ``tau_peak_s``.

The relaxation times are then fitted against temperature with the Arrhenius law
``tau = tau0 exp(Ea / (R T))`` and, where the data are curved, the Vogel-Fulcher(-Tammann) law
``tau = tau0 exp(B / (T - T_VF))`` (H. Vogel, Phys. Z. 22, 645 (1921); G. S. Fulcher, J. Am. Ceram. Soc.
8, 339 (1925)). Curvature is judged by the extra-sum-of-squares F test of the nested fits at the 5 % level
(common practice; e.g. Motulsky and Christopoulos, *Fitting Models to Biological Data*, OUP 2004, ch. 22).

For a bowl whose dipole flips with the bowl, Ea is the solid-state counterpart of the solution inversion
barrier from dynamic NMR; a difference between them is a finding (packing), not an error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd
from scipy import optimize, stats

from server.analysis.constants import CAL_J, EPS0_F_M as EPSILON_0, R_J_MOLK as R
from server.analysis.dielectric import _column, permittivity_from_capacitance
from server.analysis.results import Flag, Result
from server.errors import AnalysisError

METHOD = (
    "Havriliak-Negami fit per temperature (Cole-Cole and Debye as special cases, optional dc conductivity; "
    "Havriliak and Negami 1967; Kremer and Schoenhals 2003), then Arrhenius and, where curved (F test), "
    "Vogel-Fulcher fits of the relaxation time (Vogel 1921; Fulcher 1925)"
)
VERSION = "relaxation/1.0"

MODELS = ("havriliak_negami", "cole_cole", "debye")
MIN_FREQUENCIES = 8  # points per isotherm: five or six parameters and some degrees of freedom (our rule)
MIN_TEMPERATURES_ARRHENIUS = 3
MIN_TEMPERATURES_VF = 4
#: The loss peak must lie inside the measured window (our rule: a tau fitted from a flank is an extrapolation).
F_TEST_LEVEL = 0.05
#: Rows whose temperatures differ by less than this belong to one isotherm (controller drift; our rule).
ISOTHERM_TOLERANCE_K = 0.5


def havriliak_negami(f_Hz: np.ndarray, eps_inf: float, d_eps: float, tau_s: float, alpha: float = 1.0,
                     beta: float = 1.0, sigma_S_m: float = 0.0) -> np.ndarray:
    """Complex permittivity eps' - i eps'' of the HN function with a dc-conductivity term."""
    w = 2.0 * np.pi * np.asarray(f_Hz, dtype=float)
    eps = eps_inf + d_eps / (1.0 + (1j * w * tau_s) ** alpha) ** beta
    # HN with e^{+iwt} gives eps' - i eps''; conduction adds sigma / (eps0 w) to the loss
    return eps - 1j * sigma_S_m / (EPSILON_0 * w)


def loss_peak_tau_s(tau_s: float, alpha: float, beta: float) -> float:
    """Time constant at the loss maximum, 1 / (2 pi f_max), of an HN relaxation (Kremer and Schoenhals 2003,
    eq. 1.58): w_max tau = [sin(alpha pi / (2 beta + 2)) / sin(alpha beta pi / (2 beta + 2))]^(1/alpha)."""
    ratio = math.sin(alpha * math.pi / (2 * beta + 2)) / math.sin(alpha * beta * math.pi / (2 * beta + 2))
    return tau_s / ratio ** (1.0 / alpha)


@dataclass(frozen=True)
class Isotherm(Result):
    """One temperature's fit; ``None`` where undefined. Errors are one standard error. Its flags name the
    temperature and are listed with the whole result's, not in each row of the table."""

    JSON_OMIT = ("flags",)

    t_K: float
    model: str
    points: int
    tau_s: float | None
    tau_err_s: float | None
    tau_peak_s: float | None
    d_eps: float | None
    d_eps_err: float | None
    eps_inf: float | None
    eps_inf_err: float | None
    alpha: float | None
    alpha_err: float | None
    beta: float | None
    beta_err: float | None
    sigma_S_m: float | None
    sigma_err_S_m: float | None
    rms_rel: float | None
    peak_in_window: bool
    flags: tuple[Flag, ...] = ()


@dataclass(frozen=True)
class TemperatureFit(Result):
    """Arrhenius (and, where curved, Vogel-Fulcher) fit of tau_peak(T)."""

    temperatures: int
    ea_kJ_mol: float | None = None
    ea_err_kJ_mol: float | None = None
    ea_kcal_mol: float | None = None
    ea_err_kcal_mol: float | None = None
    tau0_s: float | None = None
    ln_tau0_err: float | None = None
    curved: bool = False
    vf_b_K: float | None = None
    vf_b_err_K: float | None = None
    t_vf_K: float | None = None
    t_vf_err_K: float | None = None
    vf_tau0_s: float | None = None
    vf_ln_tau0_err: float | None = None
    f_test_p: float | None = None
    flags: tuple[Flag, ...] = ()


@dataclass(frozen=True)
class RelaxationResult(Result):
    """Per-temperature fits and the relaxation-time map; the headline keys are those of the Arrhenius fit.
    ``spectra`` holds the ``(t_K, f_Hz, eps', eps'')`` isotherms for the figure (not in ``to_dict``)."""

    JSON_OMIT = ("spectra",)  # plot data

    model: str
    isotherms: tuple[Isotherm, ...]
    arrhenius: TemperatureFit
    ea_kJ_mol: float | None
    ea_kcal_mol: float | None
    tau0_s: float | None
    flags: tuple[Flag, ...] = ()
    spectra: tuple[Any, ...] | None = field(default=None, repr=False, compare=False)


# ----------------------------------------------------------------------------- one isotherm


def _start(f: np.ndarray, eps: np.ndarray) -> tuple[float, float, float]:
    loss = -eps.imag
    # the loss maximum, avoiding the low-frequency conduction rise: the largest local maximum
    i = int(np.argmax(loss))
    tau = 1.0 / (2.0 * np.pi * f[i])
    eps_inf = float(np.min(eps.real))
    d_eps = max(float(np.max(eps.real)) - eps_inf, 2.0 * float(loss[i]), 1e-6)
    return eps_inf, d_eps, tau


def fit_isotherm(t_K: float, f_Hz: Sequence[float], eps_real: Sequence[float], eps_imag: Sequence[float], *,
                 model: str = "havriliak_negami", conductivity: bool = False) -> Isotherm:
    """Fit one isotherm. ``eps_imag`` is the loss eps'' (positive). Residuals are relative to |eps*| on the
    real and imaginary parts together (each decade weighs the same)."""
    if model not in MODELS:
        raise AnalysisError(f"model must be one of {', '.join(MODELS)}", field="model")
    f = np.asarray(f_Hz, dtype=float)
    er = np.asarray(eps_real, dtype=float)
    ei = np.asarray(eps_imag, dtype=float)
    if not (f.size == er.size == ei.size):
        raise AnalysisError(f"at {t_K:g} K: {f.size} frequencies but {er.size} eps' and {ei.size} eps'' values")
    if np.any(~np.isfinite(f)) or np.any(f <= 0):
        raise AnalysisError(f"at {t_K:g} K: frequencies must be positive numbers", field="f (Hz)")
    order = np.argsort(f)
    f, er, ei = f[order], er[order], ei[order]
    eps = er - 1j * ei
    flags: list[Flag] = []
    free_shape = {"havriliak_negami": 2, "cole_cole": 1, "debye": 0}[model]
    n_par = 3 + free_shape + (1 if conductivity else 0)
    if f.size < max(MIN_FREQUENCIES, n_par + 2):
        return Isotherm(t_K, model, int(f.size), *([None] * 14), rms_rel=None, peak_in_window=False,
                        flags=(Flag("too_few_frequencies", f"{f.size} frequencies at {t_K:g} K; at least "
                                f"{max(MIN_FREQUENCIES, n_par + 2)} are needed for the {model.replace('_', '-')} fit"),))
    eps_inf0, d_eps0, tau0 = _start(f, eps)
    scale = np.abs(eps)

    def unpack(p: np.ndarray) -> tuple[float, float, float, float, float, float]:
        eps_inf, d_eps, log_tau = p[0], p[1], p[2]
        k = 3
        alpha = beta = 1.0
        if free_shape >= 1:
            alpha = p[k]
            k += 1
        if free_shape == 2:
            beta = p[k]
            k += 1
        sigma = 10.0 ** p[k] if conductivity else 0.0
        return eps_inf, d_eps, 10.0 ** log_tau, alpha, beta, sigma

    def residuals(p: np.ndarray) -> np.ndarray:
        m = havriliak_negami(f, *unpack(p))
        d = (m - eps) / scale
        return np.concatenate([d.real, d.imag])

    p0 = [eps_inf0, d_eps0, math.log10(tau0)]
    lo = [0.0, 0.0, math.log10(tau0) - 6]
    hi = [np.inf, np.inf, math.log10(tau0) + 6]
    if free_shape >= 1:
        p0.append(0.8)
        lo.append(0.05)
        hi.append(1.0)
    if free_shape == 2:
        p0.append(0.8)
        lo.append(0.05)
        hi.append(1.0)
    if conductivity:
        w0 = 2 * np.pi * f[0]
        sig0 = max(float(ei[0]) * EPSILON_0 * w0 * 0.1, 1e-20)
        p0.append(math.log10(sig0))
        lo.append(-25.0)
        hi.append(2.0)
    sol = optimize.least_squares(residuals, np.array(p0), bounds=(np.array(lo), np.array(hi)), x_scale="jac",
                                 max_nfev=4000)
    dof = 2 * f.size - len(p0)
    s2 = float(np.sum(sol.fun ** 2)) / dof
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac) * s2
        err = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        err = np.full(len(p0), np.nan)
    eps_inf, d_eps, tau, alpha, beta, sigma = unpack(sol.x)
    k = 3
    alpha_err = beta_err = None
    if free_shape >= 1:
        alpha_err = float(err[k])
        k += 1
    if free_shape == 2:
        beta_err = float(err[k])
        k += 1
    sigma_err = float(sigma * math.log(10) * err[k]) if conductivity else None
    tau_peak = loss_peak_tau_s(tau, alpha, beta)
    f_peak = 1.0 / (2 * math.pi * tau_peak)
    in_window = bool(f[0] <= f_peak <= f[-1])
    if not in_window:
        flags.append(Flag("peak_outside_window", f"the loss peak ({f_peak:.3g} Hz) at {t_K:g} K lies outside the "
                          f"measured {f[0]:.3g}-{f[-1]:.3g} Hz: tau is extrapolated and left out of the map"))
    if not sol.success:
        flags.append(Flag("fit_not_converged", f"the fit at {t_K:g} K did not converge: {sol.message}"))
    rel_tau_err = math.log(10) * float(err[2])
    return Isotherm(
        t_K=float(t_K), model=model, points=int(f.size), tau_s=tau, tau_err_s=tau * rel_tau_err, tau_peak_s=tau_peak,
        d_eps=d_eps, d_eps_err=float(err[1]), eps_inf=eps_inf, eps_inf_err=float(err[0]),
        alpha=alpha if free_shape >= 1 else 1.0, alpha_err=alpha_err, beta=beta if free_shape == 2 else 1.0,
        beta_err=beta_err, sigma_S_m=sigma if conductivity else None, sigma_err_S_m=sigma_err,
        rms_rel=math.sqrt(float(np.mean(sol.fun ** 2))), peak_in_window=in_window, flags=tuple(flags))


# ----------------------------------------------------------------------------- tau(T)


def fit_temperature(t_K: Sequence[float], tau_s: Sequence[float],
                    tau_err_s: Sequence[float] | None = None) -> TemperatureFit:
    """Arrhenius fit of ln tau against 1/T (weighted by the isotherm errors where given) and, with at least
    :data:`MIN_TEMPERATURES_VF` temperatures, a Vogel-Fulcher fit kept when the F test finds the curvature
    significant."""
    t = np.asarray(t_K, dtype=float)
    y = np.log(np.asarray(tau_s, dtype=float))
    n = t.size
    if n < MIN_TEMPERATURES_ARRHENIUS:
        return TemperatureFit(temperatures=n, flags=(Flag("too_few_temperatures", f"{n} temperature(s) with a "
                              f"relaxation time in the window; an Arrhenius fit needs {MIN_TEMPERATURES_ARRHENIUS}"),))
    if tau_err_s is not None:
        sig = np.asarray(tau_err_s, dtype=float) / np.asarray(tau_s, dtype=float)
        sig = np.where(np.isfinite(sig) & (sig > 0), sig, np.nanmedian(sig[sig > 0]) if np.any(sig > 0) else 1.0)
    else:
        sig = np.ones(n)

    def arr(tt: np.ndarray, ln_tau0: float, ea_J: float) -> np.ndarray:
        return ln_tau0 + ea_J / (R * tt)

    slope0, icpt0 = np.polyfit(1.0 / t, y, 1)
    (ln_tau0, ea_J), cov = optimize.curve_fit(arr, t, y, p0=(icpt0, slope0 * R), sigma=sig, absolute_sigma=False)
    err = np.sqrt(np.diag(cov))
    rss_a = float(np.sum(((y - arr(t, ln_tau0, ea_J)) / sig) ** 2))
    out = dict(temperatures=n, ea_kJ_mol=ea_J / 1e3, ea_err_kJ_mol=err[1] / 1e3, ea_kcal_mol=ea_J / CAL_J / 1e3,
               ea_err_kcal_mol=err[1] / CAL_J / 1e3, tau0_s=math.exp(ln_tau0), ln_tau0_err=float(err[0]))
    flags: list[Flag] = []
    if n >= MIN_TEMPERATURES_VF:
        def vf(tt: np.ndarray, ln_tau0: float, b_K: float, t_vf: float) -> np.ndarray:
            return ln_tau0 + b_K / (tt - t_vf)

        try:
            t_min = float(t.min())
            p, cv = optimize.curve_fit(vf, t, y, p0=(ln_tau0, ea_J / R * 0.5, 0.5 * t_min), sigma=sig,
                                       bounds=([-np.inf, 0.0, 0.0], [np.inf, np.inf, t_min - 1.0]), maxfev=20000)
            rss_v = float(np.sum(((y - vf(t, *p)) / sig) ** 2))
            dof_v = n - 3
            if dof_v > 0 and rss_v > 0:
                fstat = (rss_a - rss_v) / (rss_v / dof_v)
                pval = float(stats.f.sf(fstat, 1, dof_v))
            else:
                pval = 0.0 if rss_v <= 0 < rss_a else 1.0
            out["f_test_p"] = pval
            if pval < F_TEST_LEVEL:
                e = np.sqrt(np.diag(cv))
                out.update(curved=True, vf_b_K=float(p[1]), vf_b_err_K=float(e[1]), t_vf_K=float(p[2]),
                           t_vf_err_K=float(e[2]), vf_tau0_s=math.exp(p[0]), vf_ln_tau0_err=float(e[0]))
                flags.append(Flag("curved", f"ln tau against 1/T is curved (F test p = {pval:.2g}): the "
                                  "Arrhenius Ea is an apparent, mean activation energy over the range"))
        except (RuntimeError, ValueError):
            flags.append(Flag("vf_not_fitted", "the Vogel-Fulcher fit did not converge"))
    return TemperatureFit(**out, flags=tuple(flags))


def analyse(isotherm_data: Sequence[tuple[float, Sequence[float], Sequence[float], Sequence[float]]], *,
            model: str = "havriliak_negami", conductivity: bool = False) -> RelaxationResult:
    """Fit each ``(t_K, f_Hz, eps_real, eps_imag)`` isotherm, then tau_peak(T) over those whose loss peak
    lies inside the measured window."""
    if not isotherm_data:
        raise AnalysisError("no isotherms: the file needs T (K), f (Hz) and the permittivity columns")
    fits = tuple(fit_isotherm(t, f, er, ei, model=model, conductivity=conductivity)
                 for t, f, er, ei in sorted(isotherm_data, key=lambda x: x[0]))
    usable = [i for i in fits if i.tau_peak_s is not None and i.peak_in_window]
    tf = fit_temperature([i.t_K for i in usable], [i.tau_peak_s for i in usable],
                         [i.tau_err_s / i.tau_s * i.tau_peak_s for i in usable])
    flags = tuple(f for i in fits for f in i.flags) + tf.flags
    return RelaxationResult(model=model, isotherms=fits, arrhenius=tf,
                            ea_kJ_mol=tf.ea_kJ_mol, ea_kcal_mol=tf.ea_kcal_mol, tau0_s=tf.tau0_s, flags=flags,
                            spectra=tuple(sorted(isotherm_data, key=lambda x: x[0])))


# ----------------------------------------------------------------------------- a spectrum file


def isotherms_from_frame(frame: pd.DataFrame, *, area_cm2: float | None = None, thickness_um: float | None = None
                         ) -> list[tuple[float, np.ndarray, np.ndarray, np.ndarray]]:
    """A long table (``T_K``, ``f_Hz`` and ``eps_r``/``eps_i``, or ``C_F``/``tan_delta`` with the geometry) as
    ``(t_K, f_Hz, eps', eps'')`` isotherms. Temperatures within :data:`ISOTHERM_TOLERANCE_K` of their neighbour
    form one isotherm, at their mean. Capacitance is turned into permittivity with eps' = C d / (eps0 A) and
    eps'' = eps' tan(delta) (:func:`server.analysis.dielectric.permittivity_from_capacitance`)."""
    for col in ("T_K", "f_Hz"):
        if col not in frame.columns:
            raise AnalysisError(f"the file has no {col} column", column=col)
    t = _column(frame, "T_K", "T")
    f = _column(frame, "f_Hz", "f")
    if "eps_r" in frame.columns and "eps_i" in frame.columns:
        er, ei = _column(frame, "eps_r", "eps'"), _column(frame, "eps_i", "eps''")
    elif "C_F" in frame.columns and "tan_delta" in frame.columns:
        if area_cm2 is None or thickness_um is None:
            raise AnalysisError("capacitance needs the electrode area and the sample thickness", field="area")
        er = permittivity_from_capacitance(_column(frame, "C_F", "capacitance"), area_cm2=area_cm2, thickness_um=thickness_um)
        ei = er * _column(frame, "tan_delta", "loss tangent")
    else:
        raise AnalysisError("the file needs eps_r and eps_i, or C and D (tan delta), beside T and f")
    order = np.argsort(t, kind="stable")
    breaks = np.flatnonzero(np.diff(t[order]) >= ISOTHERM_TOLERANCE_K) + 1
    out = []
    for idx in np.split(order, breaks):
        out.append((float(np.mean(t[idx])), f[idx], er[idx], ei[idx]))
    return out


def analyse_spectrum(frame: pd.DataFrame, *, area_cm2: float | None = None, thickness_um: float | None = None,
                     model: str = "havriliak_negami", conductivity: bool = False) -> RelaxationResult:
    """:func:`analyse` of a spectrum file read by :func:`isotherms_from_frame`."""
    return analyse(isotherms_from_frame(frame, area_cm2=area_cm2, thickness_um=thickness_um), model=model,
                   conductivity=conductivity)
