"""Bowl-inversion barriers: Eyring rates, NMR coalescence and variable-temperature rate fits.

The barrier of bowl-to-bowl inversion decides whether a molecular dipole can follow an
applied field. This module turns the usual measurements into activation parameters:

* :func:`eyring_rate_per_s` / :func:`dg_from_rate_kJ_mol`: transition-state theory,
  k = kappa (kB T / h) exp(-dG/RT) (Eyring, J. Chem. Phys. 3, 107 (1935),
  doi:10.1063/1.1749604);
* :func:`coalescence`: dynamic-NMR coalescence of two equally populated, uncoupled
  singlets (Gutowsky and Holm, J. Chem. Phys. 25, 1228 (1956), doi:10.1063/1.1743184);
* :func:`eyring_fit` / :func:`analyse_rate_table`: dH and dS from ln(k/T) against 1/T,
  plus the Arrhenius Ea and ln A from ln k against 1/T;
* :func:`rate_summary`: rate, half-life and whether inversion keeps up with a field
  of a given frequency;
* :func:`imported_barrier`: validation of a barrier computed elsewhere (DFT, xTB...).

Constants are the exact SI values of CODATA 2018 (kB, h, N_A; R = kB N_A) and the
thermochemical calorie, 1 cal = 4.184 J.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from server.analysis.constants import CAL_J, H_J_S, KB_J_K, NA_PER_MOL, R_J_MOLK  # noqa: F401 - kinetics.X stays importable
from server.analysis.results import Flag, Result
from server.errors import AnalysisError

METHOD = (
    "Eyring transition-state theory (Eyring 1935) with dynamic-NMR coalescence after "
    "Gutowsky and Holm, J. Chem. Phys. 25, 1228 (1956), and linear Eyring/Arrhenius fits "
    "of variable-temperature rate constants."
)
VERSION = "kinetics/1.1"


T_REF_K = 298.15

# Plausible window for a coalescence temperature (common practice): dynamic NMR in the
# usual solvents rarely goes below ~100 K (freon mixtures, CHF2Cl) or above ~600 K
# (probe limits; few solvents survive). Values outside are far more often a unit slip
# (degC typed as K) than a real experiment.
TC_MIN_K = 100.0
TC_MAX_K = 600.0

# Default uncertainties for coalescence data (common practice): Tc is read to about
# +-2 K from a series of spectra, and the low-temperature shift difference to about 2 %.
TC_ERR_K_DEFAULT = 2.0
DNU_ERR_REL_DEFAULT = 0.02

# An Eyring plot over less than ~30 K makes dS unreliable (dH and dS are strongly
# correlated in a narrow window; common practice).
NARROW_RANGE_K = 30.0
POOR_R2 = 0.95


# --------------------------------------------------------------------------- units


def kcal_to_kJ(value_kcal: float) -> float:
    """Convert kcal/mol to kJ/mol with the thermochemical calorie (1 cal = 4.184 J)."""
    return float(value_kcal) * CAL_J


def kJ_to_kcal(value_kJ: float) -> float:
    """Convert kJ/mol to kcal/mol with the thermochemical calorie (1 cal = 4.184 J)."""
    return float(value_kJ) / CAL_J


def _finite(value: float, what: str, field_name: str | None) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"{what} must be a number, got {value!r}", field=field_name) from exc
    if not math.isfinite(x):
        raise AnalysisError(f"{what} must be a finite number, got {value!r}", field=field_name)
    return x


# --------------------------------------------------------------------------- Eyring


def eyring_rate_per_s(dg_kJ_mol: float, t_K: float, kappa: float = 1.0) -> float:
    """First-order rate constant from a free energy of activation (Eyring equation).

    Parameters
    ----------
    dg_kJ_mol : float
        Gibbs energy of activation, kJ/mol.
    t_K : float
        Temperature, K (> 0).
    kappa : float, optional
        Transmission coefficient (1 by convention).

    Returns
    -------
    float
        k in 1/s: ``kappa * kB T / h * exp(-dG / (R T))``.

    References
    ----------
    H. Eyring, J. Chem. Phys. 3, 107 (1935), doi:10.1063/1.1749604.
    CODATA 2018 constants (E. Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)).
    """
    dg = _finite(dg_kJ_mol, "dG", "dg")
    t = _finite(t_K, "T", "temperature")
    if t <= 0:
        raise AnalysisError(f"T must be above 0 K, got {t:g} K", field="temperature")
    kap = _finite(kappa, "kappa", "kappa")
    if kap <= 0:
        raise AnalysisError(f"transmission coefficient kappa must be positive, got {kap:g}", field="kappa")
    return kap * KB_J_K * t / H_J_S * math.exp(-dg * 1e3 / (R_J_MOLK * t))


def dg_from_rate_kJ_mol(k_per_s: float, t_K: float, kappa: float = 1.0) -> float:
    """Gibbs energy of activation (kJ/mol) from a first-order rate constant (Eyring).

    ``dG = R T ln(kappa kB T / (h k))``; the inverse of :func:`eyring_rate_per_s`.

    References
    ----------
    H. Eyring, J. Chem. Phys. 3, 107 (1935), doi:10.1063/1.1749604.
    """
    k = _finite(k_per_s, "k", "k")
    if k <= 0:
        raise AnalysisError(f"k must be positive, got {k:g} 1/s", field="k")
    t = _finite(t_K, "T", "temperature")
    if t <= 0:
        raise AnalysisError(f"T must be above 0 K, got {t:g} K", field="temperature")
    kap = _finite(kappa, "kappa", "kappa")
    if kap <= 0:
        raise AnalysisError(f"transmission coefficient kappa must be positive, got {kap:g}", field="kappa")
    return R_J_MOLK * t * math.log(kap * KB_J_K * t / (H_J_S * k)) / 1e3


def half_life_s(k_per_s: float) -> float:
    """Half-life (s) of a first-order process with rate constant ``k``: ln 2 / k.

    Notes
    -----
    For a two-site exchange (bowl up <-> bowl down) ``k`` is the unidirectional rate
    constant of leaving one site, the k of Eyring and of Gutowsky-Holm. ``ln 2 / k`` is
    then the time after which half of the molecules that started in one bowl
    orientation have inverted at least once (the residence half-life). A population
    *difference* between two equally populated sites relaxes with k_forward + k_back
    = 2k, i.e. twice as fast; use :func:`relaxation_half_life_s` for that.
    """
    k = _finite(k_per_s, "k", "k")
    if k <= 0:
        raise AnalysisError(f"k must be positive, got {k:g} 1/s", field="k")
    return math.log(2.0) / k


def relaxation_half_life_s(k_per_s: float) -> float:
    """Half-life (s) of the population difference in a symmetric two-site exchange.

    With equal forward and backward rate constants ``k`` the deviation from equilibrium
    decays as exp(-2 k t), so the half-life is ln 2 / (2 k). See :func:`half_life_s`.
    """
    return half_life_s(k_per_s) / 2.0


# --------------------------------------------------------------------------- coalescence


def _check_tc(tc_K: float) -> float:
    tc = _finite(tc_K, "Tc", "tc")
    hint_c = f"did you mean {tc:g} degC = {tc + 273.15:.2f} K?"
    if tc <= 0:
        msg = f"Tc = {tc:g} K is not a temperature in kelvin (must be above 0 K)"
        if tc + 273.15 > 0:
            msg += f"; {hint_c}"
        raise AnalysisError(msg, field="tc")
    if tc < TC_MIN_K:
        raise AnalysisError(
            f"Tc = {tc:g} K is below {TC_MIN_K:g} K, colder than dynamic NMR in common solvents goes; {hint_c}",
            field="tc",
        )
    if tc > TC_MAX_K:
        raise AnalysisError(
            f"Tc = {tc:g} K is above {TC_MAX_K:g} K, hotter than solution NMR probes go; "
            "check the value and that it is in kelvin",
            field="tc",
        )
    return tc


def coalescence_rate_per_s(dnu_Hz: float, j_Hz: float = 0.0) -> float:
    """Exchange rate at coalescence: pi sqrt(dnu^2 + 6 J^2) / sqrt(2) (1/s).

    Kurland, Rubin and Wise (1964) for an exchanging AB pair coupled by J; at J = 0 it
    is the Gutowsky-Holm pi dnu / sqrt(2) of two uncoupled singlets.
    """
    return math.pi * math.sqrt(dnu_Hz * dnu_Hz + 6.0 * j_Hz * j_Hz) / math.sqrt(2.0)


def _dg_coalescence_J_mol(tc_K: float, dnu_Hz: float, j_Hz: float = 0.0) -> float:
    k_c = coalescence_rate_per_s(dnu_Hz, j_Hz)
    return R_J_MOLK * tc_K * math.log(KB_J_K * tc_K / (H_J_S * k_c))


@dataclass(frozen=True)
class CoalescenceResult(Result):
    """Barrier at the coalescence temperature of two equally populated singlets."""

    JSON_KEYS = ("dg_kcal_mol", "dg_kJ_mol", "dg_err_kcal_mol", "t_K", "k_s", "dnu_Hz", "j_Hz", "tc_err_K",
                 "dnu_err_Hz", "j_err_Hz", "model", "flags")  # t_K: the temperature the barrier belongs to, the coalescence temperature

    tc_K: float
    dnu_Hz: float
    k_s: float
    dg_kJ_mol: float
    dg_kcal_mol: float
    dg_err_kcal_mol: float
    tc_err_K: float
    dnu_err_Hz: float
    flags: tuple[Flag, ...] = ()
    j_Hz: float | None = None
    j_err_Hz: float | None = None
    model: str = "Gutowsky-Holm coalescence"

    @property
    def t_K(self) -> float:
        return self.tc_K


def coalescence(
    tc_K: float,
    dnu_Hz: float,
    *,
    tc_err_K: float | None = None,
    dnu_err_Hz: float | None = None,
    j_Hz: float | None = None,
    j_err_Hz: float | None = None,
) -> CoalescenceResult:
    """Free energy of activation at coalescence: two singlets, or an AB pair coupled by J.

    Parameters
    ----------
    tc_K : float
        Coalescence temperature, K. Must lie in 100-600 K (see Notes).
    dnu_Hz : float
        Separation of the two signals in the slow-exchange limit, Hz (> 0). Note it is
        in Hz, so it depends on the spectrometer field.
    tc_err_K : float, optional
        Standard uncertainty of Tc, K; default 2 K (common practice).
    dnu_err_Hz : float, optional
        Standard uncertainty of dnu, Hz; default 2 % of dnu (common practice).
    j_Hz : float, optional
        Coupling constant of an exchanging AB pair, Hz (>= 0), e.g. the geminal 2J of
        15-20 Hz of diastereotopic bridge CH2 protons. Absent: uncoupled singlets.
    j_err_Hz : float, optional
        Standard uncertainty of J, Hz; default 2 % of J (common practice).

    Returns
    -------
    CoalescenceResult
        ``k_s`` = pi dnu / sqrt(2), or pi sqrt(dnu^2 + 6 J^2) / sqrt(2) with J (1/s,
        unidirectional), ``dg_kJ_mol`` / ``dg_kcal_mol`` = R Tc ln[kB Tc / (h k_c)]
        (kappa = 1), ``dg_err_kcal_mol``, ``j_Hz``, ``model``.

    Notes
    -----
    Valid for two singlets (or one AB pair) of equal population and equal natural
    linewidth much smaller than dnu; unequal populations need full line-shape analysis.
    Neglecting J for an AB pair underestimates k_c and overestimates dG: with dnu 40 Hz
    and 2J 16 Hz, k_c is 1.4 times the Gutowsky-Holm value (computed). The uncertainty propagates the Tc and dnu errors (taken independent) by
    central finite differences of dG(Tc, dnu), summed in quadrature.

    A Tc below 100 K or above 600 K is refused: dynamic NMR in common solvents rarely
    goes below ~100 K or above ~600 K (common practice), and a Tc such as "25" is
    almost always a Celsius value typed as kelvin; the message offers the conversion.

    References
    ----------
    H. S. Gutowsky and C. H. Holm, J. Chem. Phys. 25, 1228 (1956),
    doi:10.1063/1.1743184.
    R. J. Kurland, M. B. Rubin and W. B. Wise, J. Chem. Phys. 40, 2426 (1964),
    doi:10.1063/1.1725535 (coupled AB pair).
    H. Eyring, J. Chem. Phys. 3, 107 (1935), doi:10.1063/1.1749604.
    """
    tc = _check_tc(tc_K)
    dnu = _finite(dnu_Hz, "dnu", "dnu")
    if dnu <= 0:
        raise AnalysisError(f"the signal separation dnu must be positive, got {dnu:g} Hz", field="dnu")
    if tc_err_K is None:
        s_tc = TC_ERR_K_DEFAULT
    else:
        s_tc = _finite(tc_err_K, "the Tc uncertainty", "tc_err")
        if s_tc < 0:
            raise AnalysisError(f"the Tc uncertainty cannot be negative, got {s_tc:g} K", field="tc_err")
    if dnu_err_Hz is None:
        s_dnu = DNU_ERR_REL_DEFAULT * dnu
    else:
        s_dnu = _finite(dnu_err_Hz, "the dnu uncertainty", "dnu_err")
        if s_dnu < 0:
            raise AnalysisError(f"the dnu uncertainty cannot be negative, got {s_dnu:g} Hz", field="dnu_err")

    j = 0.0
    s_j: float | None = None
    if j_Hz is not None:
        j = _finite(j_Hz, "the coupling J", "j")
        if j < 0:
            raise AnalysisError(f"the coupling J is a magnitude here, got {j:g} Hz", field="j")
        if j_err_Hz is None:
            s_j = DNU_ERR_REL_DEFAULT * j
        else:
            s_j = _finite(j_err_Hz, "the J uncertainty", "j_err")
            if s_j < 0:
                raise AnalysisError(f"the J uncertainty cannot be negative, got {s_j:g} Hz", field="j_err")

    k_c = coalescence_rate_per_s(dnu, j)
    dg_J = _dg_coalescence_J_mol(tc, dnu, j)

    # Numerical propagation: central differences with steps small against the values.
    h_tc = 1e-4 * tc
    h_dnu = 1e-4 * dnu
    d_tc = (_dg_coalescence_J_mol(tc + h_tc, dnu, j) - _dg_coalescence_J_mol(tc - h_tc, dnu, j)) / (2 * h_tc)
    d_dnu = (_dg_coalescence_J_mol(tc, dnu + h_dnu, j) - _dg_coalescence_J_mol(tc, dnu - h_dnu, j)) / (2 * h_dnu)
    err_J = math.hypot(d_tc * s_tc, d_dnu * s_dnu)
    if s_j and j > 0:
        h_j = 1e-4 * j
        d_j = (_dg_coalescence_J_mol(tc, dnu, j + h_j) - _dg_coalescence_J_mol(tc, dnu, j - h_j)) / (2 * h_j)
        err_J = math.hypot(err_J, d_j * s_j)

    flags: list[Flag] = []
    if dnu < 5.0:
        flags.append(
            Flag(
                "narrow_separation",
                f"dnu = {dnu:g} Hz is close to typical linewidths; Tc is hard to read and "
                "line-shape analysis is safer (common practice)",
            )
        )

    return CoalescenceResult(
        tc_K=tc,
        dnu_Hz=dnu,
        k_s=k_c,
        dg_kJ_mol=dg_J / 1e3,
        dg_kcal_mol=dg_J / (1e3 * CAL_J),
        dg_err_kcal_mol=err_J / (1e3 * CAL_J),
        tc_err_K=s_tc,
        dnu_err_Hz=s_dnu,
        flags=tuple(flags),
        j_Hz=j if j_Hz is not None else None,
        j_err_Hz=s_j,
        model="Kurland-Rubin-Wise coalescence (AB pair)" if j_Hz is not None else "Gutowsky-Holm coalescence",
    )


# --------------------------------------------------------------------------- Eyring fit


@dataclass(frozen=True)
class EyringFit(Result):
    """Activation parameters from a linear Eyring plot, plus the Arrhenius pair."""

    JSON_OMIT = ("t_K", "k_per_s", "slope_K", "intercept", "residuals")  # plot data

    dh_kcal_mol: float
    ds_cal_molK: float
    dh_err_kcal_mol: float
    ds_err_cal_molK: float
    dg298_kcal_mol: float
    dg298_err_kcal_mol: float
    ea_kJ_mol: float
    ea_err_kJ_mol: float
    ln_a: float
    ln_a_err: float
    r2: float
    points: int
    t_min_K: float
    t_max_K: float
    weighted: bool
    kappa: float
    # Arrays for plots, kept out of to_dict():
    t_K: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.empty(0))
    k_per_s: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.empty(0))
    slope_K: float = field(repr=False, compare=False, default=math.nan)
    intercept: float = field(repr=False, compare=False, default=math.nan)
    residuals: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.empty(0))
    flags: tuple[Flag, ...] = ()

    @property
    def dh_kJ_mol(self) -> float:
        return self.dh_kcal_mol * CAL_J

    @property
    def ds_J_molK(self) -> float:
        return self.ds_cal_molK * CAL_J

    def ln_k_over_t(self) -> np.ndarray:
        """Observed ln(k/T), ln(1/(s K)), in the order of the input points."""
        return np.log(self.k_per_s / self.t_K)

    def fitted_ln_k_over_t(self, t_K: np.ndarray) -> np.ndarray:
        """The fitted line ln(k/T) at temperatures ``t_K``."""
        return self.intercept + self.slope_K / np.asarray(t_K, dtype=float)


def _where(i: int, lines: Sequence[int] | None) -> dict:
    return {"line": lines[i]} if lines is not None else {}


def _validate_points(
    t_K: Sequence[float],
    k_per_s: Sequence[float],
    k_err_per_s: Sequence[float] | None,
    *,
    lines: Sequence[int] | None = None,
    t_column: str | None = None,
    k_column: str | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    t_list = list(t_K)
    k_list = list(k_per_s)
    if len(t_list) != len(k_list):
        raise AnalysisError(f"{len(t_list)} temperatures but {len(k_list)} rate constants; give one k per T")
    if len(t_list) < 3:
        raise AnalysisError(f"an Eyring fit needs at least three (T, k) points, got {len(t_list)}")
    t_arr = np.empty(len(t_list))
    k_arr = np.empty(len(k_list))
    for i, (t, k) in enumerate(zip(t_list, k_list)):
        label = f"point {i + 1}"
        for name, value, arr, unit, col in (("T", t, t_arr, "K", t_column), ("k", k, k_arr, "1/s", k_column)):
            try:
                x = float(value)
            except (TypeError, ValueError) as exc:
                raise AnalysisError(f"{label}: {name} must be a number, got {value!r}", column=col,
                                    **_where(i, lines)) from exc
            if not math.isfinite(x):
                raise AnalysisError(f"{label}: {name} must be a finite number, got {value!r}", column=col,
                                    **_where(i, lines))
            if x <= 0:
                what = "T must be above 0 K" if name == "T" else "k must be positive"
                raise AnalysisError(f"{label}: {what} (got {x:g} {unit})", column=col, **_where(i, lines))
            arr[i] = x
    if np.unique(t_arr).size < 2:
        raise AnalysisError(
            f"all points are at the same temperature ({t_arr[0]:g} K); an Eyring fit needs at least two "
            "different temperatures (three or more for a useful error)"
        )
    err_arr = None
    if k_err_per_s is not None:
        e_list = list(k_err_per_s)
        if len(e_list) != len(k_list):
            raise AnalysisError(f"{len(e_list)} rate uncertainties for {len(k_list)} rate constants")
        err_arr = np.empty(len(e_list))
        for i, value in enumerate(e_list):
            try:
                x = float(value)
            except (TypeError, ValueError) as exc:
                raise AnalysisError(f"point {i + 1}: the k uncertainty must be a number, got {value!r}",
                                    **_where(i, lines)) from exc
            if not math.isfinite(x) or x <= 0:
                raise AnalysisError(f"point {i + 1}: the k uncertainty must be a positive number, got {value!r}",
                                    **_where(i, lines))
            err_arr[i] = x
    return t_arr, k_arr, err_arr


def _line_fit(x: np.ndarray, y: np.ndarray, sigma: np.ndarray | None) -> tuple[float, float, np.ndarray, float]:
    """Straight line y = m x + c; returns (m, c, cov[[m, c]], r2).

    Unweighted: ordinary least squares, covariance scaled by the residual variance
    (n - 2 degrees of freedom). Weighted: weights 1/sigma, covariance from the given
    absolute sigmas (unscaled).
    """
    if sigma is None:
        if x.size > 2:
            (m, c), cov = np.polyfit(x, y, 1, cov=True)
        else:  # exactly determined: no residual degrees of freedom, no error estimate
            m, c = np.polyfit(x, y, 1)
            cov = np.full((2, 2), np.nan)
        w = np.ones_like(y)
    else:
        (m, c), cov = np.polyfit(x, y, 1, w=1.0 / sigma, cov="unscaled")
        w = 1.0 / sigma**2
    fitted = m * x + c
    ybar = np.sum(w * y) / np.sum(w)
    ss_res = float(np.sum(w * (y - fitted) ** 2))
    ss_tot = float(np.sum(w * (y - ybar) ** 2))
    r2 = 1.0 - ss_res / ss_tot if ss_tot > 0 else 1.0
    return float(m), float(c), np.asarray(cov, dtype=float), r2


def eyring_fit(
    t_K: Sequence[float],
    k_per_s: Sequence[float],
    *,
    k_err_per_s: Sequence[float] | None = None,
    kappa: float = 1.0,
) -> EyringFit:
    """dH, dS (and Ea, ln A) from first-order rate constants at several temperatures.

    Parameters
    ----------
    t_K : sequence of float
        Temperatures, K (> 0); at least three points, at least two distinct temperatures.
    k_per_s : sequence of float
        Unidirectional first-order rate constants, 1/s (> 0).
    k_err_per_s : sequence of float, optional
        Standard uncertainties of k, 1/s. When given, the fit is weighted with
        sigma[ln(k/T)] = k_err / k and the parameter errors come from these sigmas;
        otherwise ordinary (unweighted) least squares with errors from the scatter.
    kappa : float, optional
        Transmission coefficient (1 by convention).

    Returns
    -------
    EyringFit
        ``dh_kcal_mol``, ``ds_cal_molK`` and their 1-sigma errors, ``dg298_kcal_mol``
        with an error that uses the slope-intercept covariance, ``ea_kJ_mol``,
        ``ln_a`` (A in 1/s) and errors from the Arrhenius fit, ``r2`` of the Eyring
        line, ``points``, ``t_min_K``, ``t_max_K``; ``residuals`` of ln(k/T) for plots.

    Notes
    -----
    Eyring plot: ln(k/T) = ln(kappa kB/h) + dS/R - (dH/R)(1/T), so dH = -R slope and
    dS = R (intercept - ln(kappa kB/h)). Arrhenius: ln k = ln A - Ea/(R T); for a
    unimolecular reaction Ea = dH + R T_mean. With three points there is one degree of
    freedom and the errors are rough. dS from a narrow temperature window (< 30 K)
    is unreliable (common practice) and is flagged.

    References
    ----------
    H. Eyring, J. Chem. Phys. 3, 107 (1935), doi:10.1063/1.1749604.
    K. J. Laidler, Chemical Kinetics, 3rd ed., Harper & Row (1987), ch. 4 (memory).
    """
    return _eyring_fit(t_K, k_per_s, k_err_per_s, kappa)


def _eyring_fit(
    t_K: Sequence[float],
    k_per_s: Sequence[float],
    k_err_per_s: Sequence[float] | None,
    kappa: float,
    *,
    lines: Sequence[int] | None = None,
    columns: tuple[str | None, str | None] = (None, None),
) -> EyringFit:
    kap = _finite(kappa, "kappa", "kappa")
    if kap <= 0:
        raise AnalysisError(f"transmission coefficient kappa must be positive, got {kap:g}", field="kappa")
    t, k, k_err = _validate_points(t_K, k_per_s, k_err_per_s, lines=lines,
                                   t_column=columns[0], k_column=columns[1])
    x = 1.0 / t
    y = np.log(k / t)
    sigma_y = None if k_err is None else k_err / k
    m, c, cov, r2 = _line_fit(x, y, sigma_y)
    m_a, c_a, cov_a, _ = _line_fit(x, np.log(k), sigma_y)

    ln_kb_h = math.log(kap * KB_J_K / H_J_S)
    dh_J = -R_J_MOLK * m
    ds_J = R_J_MOLK * (c - ln_kb_h)
    var_m, var_c, cov_mc = cov[0, 0], cov[1, 1], cov[0, 1]
    dh_err_J = R_J_MOLK * math.sqrt(var_m) if math.isfinite(var_m) else math.nan
    ds_err_J = R_J_MOLK * math.sqrt(var_c) if math.isfinite(var_c) else math.nan
    dg298_J = dh_J - T_REF_K * ds_J
    # dG(T) = -R (m + T c) + const: var = R^2 (var_m + T^2 var_c + 2 T cov_mc)
    var_g = R_J_MOLK**2 * (var_m + T_REF_K**2 * var_c + 2 * T_REF_K * cov_mc)
    dg_err_J = math.sqrt(max(var_g, 0.0)) if math.isfinite(var_g) else math.nan

    flags: list[Flag] = []
    t_min, t_max = float(t.min()), float(t.max())
    if t_max - t_min < NARROW_RANGE_K:
        flags.append(Flag(
            "narrow_temperature_range",
            f"the points span only {t_max - t_min:.0f} K; dH and dS are strongly correlated over a "
            f"window under {NARROW_RANGE_K:.0f} K and dS is unreliable (common practice)",
        ))
    if np.unique(t).size < 3:
        flags.append(Flag("few_temperatures", "fewer than three distinct temperatures; the errors are rough"))
    if r2 < POOR_R2:
        flags.append(Flag(
            "poor_linearity",
            f"r2 = {r2:.3f} for the Eyring line; check for a change of mechanism or bad points",
        ))
    if not t_min <= T_REF_K <= t_max:
        flags.append(Flag(
            "extrapolated_298",
            f"dG at 298.15 K is extrapolated from data at {t_min:.0f}-{t_max:.0f} K",
        ))

    fitted = m * x + c
    return EyringFit(
        dh_kcal_mol=dh_J / (1e3 * CAL_J),
        ds_cal_molK=ds_J / CAL_J,
        dh_err_kcal_mol=dh_err_J / (1e3 * CAL_J),
        ds_err_cal_molK=ds_err_J / CAL_J,
        dg298_kcal_mol=dg298_J / (1e3 * CAL_J),
        dg298_err_kcal_mol=dg_err_J / (1e3 * CAL_J),
        ea_kJ_mol=-R_J_MOLK * m_a / 1e3,
        ea_err_kJ_mol=R_J_MOLK * math.sqrt(cov_a[0, 0]) / 1e3 if math.isfinite(cov_a[0, 0]) else math.nan,
        ln_a=c_a,
        ln_a_err=math.sqrt(cov_a[1, 1]) if math.isfinite(cov_a[1, 1]) else math.nan,
        r2=r2,
        points=int(t.size),
        t_min_K=t_min,
        t_max_K=t_max,
        weighted=k_err is not None,
        kappa=kap,
        t_K=t,
        k_per_s=k,
        slope_K=m,
        intercept=c,
        residuals=y - fitted,
        flags=tuple(flags),
    )


def analyse_rate_table(
    frame: pd.DataFrame,
    *,
    first_data_line: int | None = None,
    source_columns: Mapping[str, str] | None = None,
    kappa: float = 1.0,
) -> EyringFit:
    """Eyring fit of an uploaded rate table (upload kind ``nmr_rates``).

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical columns ``T_K`` and ``k_per_s`` (see the shared data contract); an
        optional ``k_err_per_s`` column turns on the weighted fit.
    first_data_line : int, optional
        File line of the first data row (``ParsedTable.first_data_line``); errors then
        name the file line of the bad row (row i is taken to be line first + i).
    source_columns : mapping, optional
        Canonical name -> original header (``ParsedTable.source_columns``), so errors
        name the column as the user wrote it.
    kappa : float, optional
        Transmission coefficient (1 by convention).

    Returns
    -------
    EyringFit
        As :func:`eyring_fit`.

    References
    ----------
    H. Eyring, J. Chem. Phys. 3, 107 (1935), doi:10.1063/1.1749604.
    """
    cols = dict(source_columns or {})
    missing = [c for c in ("T_K", "k_per_s") if c not in frame.columns]
    if missing:
        raise AnalysisError(
            "a rate table needs a temperature column (e.g. 'T (K)') and a rate-constant column "
            f"(e.g. 'k (1/s)'); missing: {', '.join(missing)}"
        )
    n = len(frame)
    lines = [first_data_line + i for i in range(n)] if first_data_line is not None else None
    k_err = frame["k_err_per_s"].tolist() if "k_err_per_s" in frame.columns else None
    return _eyring_fit(
        frame["T_K"].tolist(),
        frame["k_per_s"].tolist(),
        k_err,
        kappa,
        lines=lines,
        columns=(cols.get("T_K", "T_K"), cols.get("k_per_s", "k_per_s")),
    )


# --------------------------------------------------------------------------- summaries


@dataclass(frozen=True)
class RateSummary(Result):
    """What a barrier means at one temperature and, optionally, one field frequency."""

    dg_kcal_mol: float  # dG++ at t_K, the one the rate uses
    t_K: float
    k_s: float
    half_life_s: float
    frequency_Hz: float | None
    keeps_up: bool | None
    flags: tuple[Flag, ...] = ()
    dh_kcal_mol: float | None = None
    ds_cal_molK: float | None = None
    ds_assumed_zero: bool = True


def rate_summary(
    dg_kcal_mol: float | None,
    t_K: float,
    field_frequency_Hz: float | None = None,
    *,
    dh_kcal_mol: float | None = None,
    ds_cal_molK: float | None = None,
) -> RateSummary:
    """Inversion rate, half-life and whether the dipole can follow an AC field.

    Parameters
    ----------
    dg_kcal_mol : float or None
        Inversion barrier dG++, kcal/mol (>= 0), used at every temperature when dH++ and
        dS++ are not known (dS++ is then assumed zero, and the result says so). May be
        None when both ``dh_kcal_mol`` and ``ds_cal_molK`` are given.
    t_K : float
        Temperature, K (> 0).
    field_frequency_Hz : float, optional
        Frequency of the applied field, Hz (> 0).
    dh_kcal_mol, ds_cal_molK : float, optional
        Activation enthalpy (kcal/mol) and entropy (cal mol^-1 K^-1), e.g. from an Eyring
        fit. Given both, k = (kB T/h) exp(dS++/R) exp(-dH++/RT), i.e. dG++(T) = dH++ - T dS++.

    Returns
    -------
    RateSummary
        ``dg_kcal_mol`` = the dG++ at ``t_K`` the rate uses; ``dh_kcal_mol``,
        ``ds_cal_molK`` when known; ``ds_assumed_zero``; ``k_s`` (Eyring, kappa = 1),
        ``half_life_s`` = ln 2 / k (residence half-life, see :func:`half_life_s`),
        ``keeps_up``: None without a frequency, else k >= 2 f; flag ``ds_assumed_zero``
        when the same dG++ is used at every temperature.

    Notes
    -----
    A dG++ measured at 298 K (or at a coalescence temperature) holds at that temperature
    only: the rate from dG++(298.15 K) is off by a factor exp[-dS++ (T - 298.15)/(R T)], which
    for dS++ = -3.4 cal mol^-1 K^-1 is 0.72 at 250 K and 1.54 at 400 K (computed).

    Criterion (common practice, an order-of-magnitude rule): the bowls follow the field
    when an inversion happens within one field half-period, 1/(2 f), i.e. when the mean
    residence time 1/k is at most 1/(2 f): k >= 2 f. Switching in a crystal is
    cooperative and its barrier differs from the molecular one, so this is a screen.

    References
    ----------
    H. Eyring, J. Chem. Phys. 3, 107 (1935), doi:10.1063/1.1749604.
    """
    t = _finite(t_K, "T", "temperature")
    if t <= 0:
        raise AnalysisError(f"T must be above 0 K, got {t:g} K", field="temperature")
    flags: list[Flag] = []
    known = dh_kcal_mol is not None and ds_cal_molK is not None
    if known:
        dh = _finite(dh_kcal_mol, "dH", "dh")
        ds = _finite(ds_cal_molK, "dS", "ds")
        dg = dh - t * ds / 1000.0  # dG++(T) = dH++ - T dS++ (cal -> kcal)
        if dg < 0:
            raise AnalysisError(f"dH - T dS is negative at {t:g} K ({dg:.3g} kcal/mol): outside the fit's "
                                "meaning", field="temperature")
    else:
        if dg_kcal_mol is None:
            raise AnalysisError("give the barrier dG, or both dH and dS", field="dg")
        dg = _finite(dg_kcal_mol, "the barrier dG", "dg")
        if dg < 0:
            raise AnalysisError(f"the barrier dG cannot be negative, got {dg:g} kcal/mol", field="dg")
        flags.append(Flag("ds_assumed_zero", "The activation entropy of this barrier is not known: it is taken as "
                          "zero, so the same dG++ is used at every temperature (Eyring 1935)."))
    k = eyring_rate_per_s(kcal_to_kJ(dg), t)
    if k == 0.0:
        raise AnalysisError(
            f"a barrier of {dg:g} kcal/mol at {t:g} K gives a rate below the floating-point range", field="dg"
        )
    f: float | None = None
    keeps: bool | None = None
    if field_frequency_Hz is not None:
        f = _finite(field_frequency_Hz, "the field frequency", "frequency")
        if f <= 0:
            raise AnalysisError(f"the field frequency must be positive, got {f:g} Hz", field="frequency")
        keeps = bool(k >= 2.0 * f)
    return RateSummary(
        dg_kcal_mol=dg,
        t_K=t,
        k_s=k,
        half_life_s=half_life_s(k),
        frequency_Hz=f,
        keeps_up=keeps,
        flags=tuple(flags),
        dh_kcal_mol=float(dh_kcal_mol) if known else None,
        ds_cal_molK=float(ds_cal_molK) if known else None,
        ds_assumed_zero=not known,
    )


@dataclass(frozen=True)
class ImportedBarrier(Result):
    """A barrier computed elsewhere (DFT, xTB, literature), with its provenance."""

    dg_kcal_mol: float
    dg_kJ_mol: float
    level_of_theory: str
    notes: str | None
    flags: tuple[Flag, ...] = ()


def imported_barrier(dg_kcal_mol: float, level_of_theory: str, notes: str | None = None) -> ImportedBarrier:
    """Validate a barrier entered by hand or imported from another program.

    Parameters
    ----------
    dg_kcal_mol : float
        Barrier, kcal/mol; accepted range 0 <= dG < 100 (a larger value is almost
        surely a unit slip, e.g. kJ/mol or J/mol entered as kcal/mol).
    level_of_theory : str
        How it was obtained, e.g. "GFN2-xTB" or "r2SCAN-3c//GFN2-xTB"; required.
    notes : str, optional
        Free text.

    Returns
    -------
    ImportedBarrier
    """
    dg = _finite(dg_kcal_mol, "the barrier dG", "dg")
    if not 0.0 <= dg < 100.0:
        hint = f" (if it is in kJ/mol, that is {kJ_to_kcal(dg):.2f} kcal/mol)" if dg >= 100 else ""
        raise AnalysisError(
            f"the barrier must be between 0 and 100 kcal/mol, got {dg:g}{hint}", field="dg"
        )
    if not isinstance(level_of_theory, str) or not level_of_theory.strip():
        raise AnalysisError("say how the barrier was obtained (level of theory or method)", field="level_of_theory")
    if notes is not None and not isinstance(notes, str):
        raise AnalysisError(f"notes must be text, got {type(notes).__name__}", field="notes")
    clean_notes = notes.strip() if notes is not None and notes.strip() else None
    return ImportedBarrier(
        dg_kcal_mol=dg,
        dg_kJ_mol=kcal_to_kJ(dg),
        level_of_theory=level_of_theory.strip(),
        notes=clean_notes,
    )
