"""Predictions from the campaign's own data: Gaussian-process regression and classification on
side-chain and bridge descriptors, the scaffold mean as the baseline, leave-one-out validation, and
expected improvement to rank what to make next.

Pure: descriptor records and measured values in, frozen dataclasses out (no database, no web).

* Regression: a zero-mean GP on standardised targets with a squared-exponential (ARD) covariance and
  Gaussian noise; hyperparameters maximise the log marginal likelihood (Rasmussen & Williams 2006,
  Algorithm 2.1 and eq. 5.8); leave-one-out predictions in closed form (ibid., eqs. 5.10-5.12).
* Classification (does it switch?): GP with a logistic likelihood, Laplace approximation (ibid.,
  Algorithms 3.1 and 3.2) and the probit approximation of the predictive probability (ibid., eq. 3.25,
  after MacKay 1992); hyperparameters from a small grid by the approximate marginal likelihood (eq. 3.32).
* Baselines: the mean of the compounds on the same bridge (the scaffold mean) for values, and the
  rule of succession (k + 1) / (n + 2) per bridge for the switching probability (a Beta(1, 1) prior;
  Gelman et al., Bayesian Data Analysis, 3rd ed., 2013, sec. 2.4).
* Pr at a reference temperature (:func:`pr_at_reference`): Pr depends on temperature (it falls to zero
  at Tc, Lines & Glass 1977, ch. 3), so the modelled value is Pr at one stated temperature, never a
  maximum over temperatures. The rule: the mean Pr of the saturated switching loops within
  :data:`SAME_T_K` of the reference; failing that, linear interpolation between the nearest switching
  loops on either side, when they are at most :data:`MAX_BRACKET_K` apart and no loop between them
  fails to switch. Otherwise the compound has no Pr at that temperature and is left out of the model
  (counted, never extrapolated). The window and the span are our choices (common practice for a
  tabulated "Pr at T" is a measurement near T).
* Computed estimates as features (GFN2-xTB barrier and bowl depth, where present): a second GP with
  them is fitted on the compounds that have them and kept only when its leave-one-out error beats the
  structure-only GP and the scaffold mean on the same compounds; targets with estimates are predicted by it, the others by
  the structure-only model, and each prediction names its feature set.
* Ranking: expected improvement over the best value measured so far (Jones, Schonlau & Welch 1998,
  eq. 15), times the predicted probability of switching when the goal is a ferroelectric property.

References
----------
C. E. Rasmussen and C. K. I. Williams, *Gaussian Processes for Machine Learning*, MIT Press, 2006.
D. R. Jones, M. Schonlau and W. J. Welch, "Efficient global optimization of expensive black-box
functions", J. Global Optim. 13, 455-492 (1998).
D. J. C. MacKay, "The evidence framework applied to classification networks", Neural Comput. 4,
720-736 (1992).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping, Optional, Sequence

import numpy as np
from scipy import linalg, optimize, stats

from .results import Result

METHOD = ("Gaussian-process regression and Laplace GP classification on bridge and side-chain descriptors "
          "(Rasmussen & Williams 2006), leave-one-out validated against the scaffold mean; expected "
          "improvement ranking (Jones, Schonlau & Welch 1998)")
VERSION = "1"

#: Fewest measured compounds a model is fitted to (our choice: with fewer, LOO says nothing).
MIN_COMPOUNDS = 6
#: Fewest of each class (switches / does not) the classifier needs.
MIN_PER_CLASS = 2
CHAIN_KINDS = ("alkoxy", "alkylthio", "alkyl")
#: The computed estimates used as features where present (GFN2-xTB jobs): name -> unit.
ESTIMATE_FEATURES: dict[str, str] = {"barrier_computed_kcal_mol": "kcal/mol", "bowl_depth_computed_A": "Å"}
#: A loop within this of the reference temperature is "at" it (our choice; as the explorer's window).
SAME_T_K = 5.0
#: Interpolate Pr only between switching loops at most this far apart (our choice).
MAX_BRACKET_K = 80.0
Z95 = stats.norm.ppf(0.975)


# --- descriptors ------------------------------------------------------------------------------


@dataclass(frozen=True)
class Descriptor:
    """What the models know of a compound: its bridge and its side chains (perceived from the structure)."""

    code: str
    bridge: str
    chains: tuple[Mapping[str, Any], ...]  # {"kind", "carbons", "branched", "count"}
    estimates: Mapping[str, float] = field(default_factory=dict)  # ESTIMATE_FEATURES present for it

    @property
    def has_estimates(self) -> bool:
        return all(isinstance(self.estimates.get(k), (int, float)) and math.isfinite(self.estimates[k])
                   for k in ESTIMATE_FEATURES)


def feature_names(bridges: Sequence[str], *, estimates: bool = False) -> list[str]:
    return ([f"bridge {b}" for b in bridges] + ["mean chain carbons"]
            + [f"fraction {k}" for k in CHAIN_KINDS] + ["fraction branched"]
            + ([f"{k} (GFN2-xTB)" for k in ESTIMATE_FEATURES] if estimates else []))


def features(d: Descriptor, bridges: Sequence[str], *, estimates: bool = False) -> np.ndarray:
    """Bridge one-hot; count-weighted mean chain carbons; fraction of chains of each kind; fraction branched;
    with ``estimates``, the computed estimates (the caller passes only descriptors that have them)."""
    n = sum(int(c["count"]) for c in d.chains) or 1
    carbons = sum(int(c["count"]) * int(c["carbons"]) for c in d.chains) / n
    kinds = [sum(int(c["count"]) for c in d.chains if c["kind"] == k) / n for k in CHAIN_KINDS]
    branched = sum(int(c["count"]) for c in d.chains if c["branched"]) / n
    extra = [float(d.estimates[k]) for k in ESTIMATE_FEATURES] if estimates else []
    return np.array([1.0 if d.bridge == b else 0.0 for b in bridges] + [carbons] + kinds + [branched] + extra)


# --- Pr at a reference temperature ----------------------------------------------------------------


@dataclass(frozen=True)
class Loop:
    """One live P-E loop of a compound: its temperature, whether it was judged switching, its Pr."""

    t_K: float
    switching: bool
    pr_uC_cm2: Optional[float]


@dataclass(frozen=True)
class PrAtT:
    value_uC_cm2: Optional[float]
    how: str  # "measured", "interpolated" or "none"
    reason: str


def pr_at_reference(loops: Sequence[Loop], t_ref_K: float) -> PrAtT:
    """Pr at ``t_ref_K`` by the rule in the module docstring; ``value_uC_cm2`` None when the loops do not
    give one (the reason says why)."""
    ok = [lp for lp in loops if lp.switching and lp.pr_uC_cm2 is not None and math.isfinite(lp.pr_uC_cm2)]
    near = [lp.pr_uC_cm2 for lp in ok if abs(lp.t_K - t_ref_K) <= SAME_T_K]
    if near:
        return PrAtT(float(np.mean(near)), "measured",
                     f"mean of {len(near)} switching loop{'s' if len(near) > 1 else ''} within {SAME_T_K:g} K")
    below = [lp for lp in ok if lp.t_K < t_ref_K]
    above = [lp for lp in ok if lp.t_K > t_ref_K]
    if not below or not above:
        side = "above" if not above else "below"
        return PrAtT(None, "none", f"no switching loop within {SAME_T_K:g} K and none {side} {t_ref_K:g} K "
                                   "(Pr is not extrapolated)")
    t_lo, t_hi = max(lp.t_K for lp in below), min(lp.t_K for lp in above)
    if t_hi - t_lo > MAX_BRACKET_K:
        return PrAtT(None, "none", f"the nearest switching loops ({t_lo:g} K and {t_hi:g} K) are more than "
                                   f"{MAX_BRACKET_K:g} K apart")
    if any(not lp.switching and t_lo < lp.t_K < t_hi for lp in loops):
        return PrAtT(None, "none", f"a loop between {t_lo:g} K and {t_hi:g} K does not switch")
    p_lo = float(np.mean([lp.pr_uC_cm2 for lp in ok if abs(lp.t_K - t_lo) <= SAME_T_K]))
    p_hi = float(np.mean([lp.pr_uC_cm2 for lp in ok if abs(lp.t_K - t_hi) <= SAME_T_K]))
    value = p_lo + (p_hi - p_lo) * (t_ref_K - t_lo) / (t_hi - t_lo)
    return PrAtT(value, "interpolated", f"interpolated between switching loops at {t_lo:g} K and {t_hi:g} K")


# --- Gaussian-process regression ----------------------------------------------------------------


def _sqexp(a: np.ndarray, b: np.ndarray, ell: np.ndarray, sf2: float) -> np.ndarray:
    d = (a[:, None, :] - b[None, :, :]) / ell
    return sf2 * np.exp(-0.5 * np.sum(d * d, axis=2))


def _neg_log_ml(theta: np.ndarray, x: np.ndarray, y: np.ndarray) -> float:
    """-log p(y | X, theta), R&W eq. 5.8 via Algorithm 2.1; theta = log(ell_1..d, sf2, sn2)."""
    d = x.shape[1]
    ell, sf2, sn2 = np.exp(theta[:d]), math.exp(theta[d]), math.exp(theta[d + 1])
    k = _sqexp(x, x, ell, sf2) + (sn2 + 1e-10) * np.eye(len(y))
    try:
        c = linalg.cho_factor(k, lower=True)
    except linalg.LinAlgError:
        return 1e25
    alpha = linalg.cho_solve(c, y)
    return float(0.5 * y @ alpha + np.sum(np.log(np.diag(c[0]))) + 0.5 * len(y) * math.log(2 * math.pi))


@dataclass(frozen=True)
class GPRegressor:
    x_mean: np.ndarray
    x_scale: np.ndarray
    y_mean: float
    y_scale: float
    x: np.ndarray  # standardised training inputs
    y: np.ndarray  # standardised targets
    ell: np.ndarray
    sf2: float
    sn2: float

    def _k(self) -> np.ndarray:
        return _sqexp(self.x, self.x, self.ell, self.sf2) + (self.sn2 + 1e-10) * np.eye(len(self.y))

    def predict(self, xs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mean and standard deviation of a new *measurement* (latent variance plus noise), in data units."""
        z = (xs - self.x_mean) / self.x_scale
        c = linalg.cho_factor(self._k(), lower=True)
        ks = _sqexp(z, self.x, self.ell, self.sf2)
        mu = ks @ linalg.cho_solve(c, self.y)
        v = linalg.solve_triangular(c[0], ks.T, lower=True)
        var = np.maximum(self.sf2 - np.sum(v * v, axis=0), 0.0) + self.sn2
        return mu * self.y_scale + self.y_mean, np.sqrt(var) * self.y_scale

    def loo(self) -> tuple[np.ndarray, np.ndarray]:
        """Leave-one-out means and sds in data units, closed form (R&W eqs. 5.10-5.12), hyperparameters fixed."""
        kinv = linalg.inv(self._k())
        alpha = kinv @ self.y
        d = np.diag(kinv)
        mu = self.y - alpha / d
        return mu * self.y_scale + self.y_mean, np.sqrt(1.0 / d) * self.y_scale


def _standardise(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    mean = x.mean(axis=0)
    scale = x.std(axis=0)
    scale[scale == 0] = 1.0
    return mean, scale


def fit_gp_regression(x: np.ndarray, y: np.ndarray) -> GPRegressor:
    """Fit by maximising the log marginal likelihood from a few fixed starts (deterministic), bounded
    length scales 0.1-100 (standardised units), signal variance 0.01-100, noise variance 1e-4-10."""
    x_mean, x_scale = _standardise(x)
    y_mean, y_scale = float(np.mean(y)), float(np.std(y)) or 1.0
    xz, yz = (x - x_mean) / x_scale, (y - y_mean) / y_scale
    d = x.shape[1]
    bounds = [(math.log(0.1), math.log(100.0))] * d + [(math.log(0.01), math.log(100.0)), (math.log(1e-4), math.log(10.0))]
    best = None
    for ell0, sn0 in ((1.0, 0.1), (3.0, 0.01), (0.5, 0.3)):
        start = np.array([math.log(ell0)] * d + [0.0, math.log(sn0)])
        res = optimize.minimize(_neg_log_ml, start, args=(xz, yz), method="L-BFGS-B", bounds=bounds,
                                options={"maxiter": 200})
        if best is None or res.fun < best.fun:
            best = res
    t = best.x
    return GPRegressor(x_mean, x_scale, y_mean, y_scale, xz, yz, np.exp(t[:d]), math.exp(t[d]), math.exp(t[d + 1]))


# --- the scaffold mean (baseline) ----------------------------------------------------------------


@dataclass(frozen=True)
class ScaffoldMean:
    """Mean per bridge; a bridge without data takes the mean of all. Interval from the pooled within-bridge
    standard deviation with Student's t (dof n - groups)."""

    means: dict[str, float]
    counts: dict[str, int]
    overall: float
    pooled_sd: float
    dof: int

    def predict(self, bridges: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
        mu = np.array([self.means.get(b, self.overall) for b in bridges])
        n = np.array([self.counts.get(b, sum(self.counts.values())) for b in bridges], dtype=float)
        sd = self.pooled_sd * np.sqrt(1.0 + 1.0 / n)
        return mu, sd


def fit_scaffold_mean(bridges: Sequence[str], y: np.ndarray) -> ScaffoldMean:
    groups: dict[str, list[float]] = {}
    for b, v in zip(bridges, y):
        groups.setdefault(b, []).append(float(v))
    means = {b: float(np.mean(v)) for b, v in groups.items()}
    ss = sum(float(np.sum((np.array(v) - means[b]) ** 2)) for b, v in groups.items())
    dof = len(y) - len(groups)
    pooled = math.sqrt(ss / dof) if dof > 0 else float(np.std(y))
    return ScaffoldMean(means, {b: len(v) for b, v in groups.items()}, float(np.mean(y)), pooled, max(dof, 1))


def scaffold_mean_loo(bridges: Sequence[str], y: np.ndarray) -> np.ndarray:
    """Leave-one-out predictions of the scaffold mean (a bridge left with no other compound: the mean of all others)."""
    out = np.empty(len(y))
    for i in range(len(y)):
        keep = [j for j in range(len(y)) if j != i]
        out[i] = fit_scaffold_mean([bridges[j] for j in keep], y[keep]).predict([bridges[i]])[0][0]
    return out


# --- GP classification (Laplace) ------------------------------------------------------------------


def _laplace(k: np.ndarray, t: np.ndarray, iters: int = 50) -> tuple[np.ndarray, float]:
    """Posterior mode f^ and approximate log marginal likelihood (R&W Algorithm 3.1, logistic likelihood);
    t in {0, 1}."""
    n = len(t)
    f = np.zeros(n)
    for _ in range(iters):
        pi = 1.0 / (1.0 + np.exp(-f))
        w = pi * (1.0 - pi)
        sw = np.sqrt(w)
        b_mat = np.eye(n) + sw[:, None] * k * sw[None, :]
        l_mat = linalg.cholesky(b_mat, lower=True)
        b = w * f + (t - pi)
        a = b - sw * linalg.cho_solve((l_mat, True), sw * (k @ b))
        f_new = k @ a
        if np.max(np.abs(f_new - f)) < 1e-8:
            f = f_new
            break
        f = f_new
    log_lik = float(np.sum(t * f - np.logaddexp(0.0, f)))
    log_q = -0.5 * float(a @ f) + log_lik - float(np.sum(np.log(np.diag(l_mat))))
    return f, log_q


@dataclass(frozen=True)
class GPClassifier:
    x_mean: np.ndarray
    x_scale: np.ndarray
    x: np.ndarray
    t: np.ndarray
    ell: float
    sf2: float

    def predict(self, xs: np.ndarray) -> np.ndarray:
        """Probability of class 1 (switches): R&W Algorithm 3.2 with the probit approximation (eq. 3.25)."""
        z = (xs - self.x_mean) / self.x_scale
        ell = np.full(self.x.shape[1], self.ell)
        k = _sqexp(self.x, self.x, ell, self.sf2)
        f, _ = _laplace(k, self.t)
        pi = 1.0 / (1.0 + np.exp(-f))
        w = pi * (1.0 - pi)
        sw = np.sqrt(w)
        l_mat = linalg.cholesky(np.eye(len(self.t)) + sw[:, None] * k * sw[None, :], lower=True)
        ks = _sqexp(z, self.x, ell, self.sf2)
        mean = ks @ (self.t - pi)
        v = linalg.solve_triangular(l_mat, (sw[:, None] * ks.T), lower=True)
        var = np.maximum(self.sf2 - np.sum(v * v, axis=0), 0.0)
        return 1.0 / (1.0 + np.exp(-mean / np.sqrt(1.0 + math.pi * var / 8.0)))


#: The grid of (length scale, signal variance) the classifier chooses from (standardised inputs).
CLASSIFIER_GRID = tuple((ell, sf2) for ell in (0.5, 1.0, 2.0, 4.0) for sf2 in (1.0, 4.0, 16.0))


def fit_gp_classifier(x: np.ndarray, t: np.ndarray) -> GPClassifier:
    x_mean, x_scale = _standardise(x)
    xz = (x - x_mean) / x_scale
    best = max(CLASSIFIER_GRID, key=lambda p: _laplace(_sqexp(xz, xz, np.full(x.shape[1], p[0]), p[1]), t)[1])
    return GPClassifier(x_mean, x_scale, xz, t.astype(float), best[0], best[1])


def succession_rate(bridges: Sequence[str], t: np.ndarray, query: Sequence[str]) -> np.ndarray:
    """(k + 1) / (n + 2) per bridge: the baseline switching probability."""
    out = []
    for q in query:
        sel = [v for b, v in zip(bridges, t) if b == q]
        out.append((sum(sel) + 1.0) / (len(sel) + 2.0))
    return np.array(out)


# --- results ------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Prediction:
    code: str
    mean: float
    sd: float
    low: float  # 95 % interval of a new measurement
    high: float
    with_estimates: bool = False  # predicted by the model that also uses the computed estimates


@dataclass(frozen=True)
class RegressionResult(Result):
    """A fitted model of one property; ``model`` is "gp" or "scaffold_mean" (the lower LOO error wins)."""

    property: str = ""
    unit: str = ""
    n: int = 0
    enough_data: bool = False
    message: str = ""
    model: str = ""
    features: tuple[str, ...] = ()
    loo_rmse_gp: Optional[float] = None
    loo_rmse_scaffold_mean: Optional[float] = None
    loo_coverage_gp: Optional[float] = None  # fraction of left-out values inside their 95 % interval
    best_measured: Optional[float] = None
    best_code: str = ""
    predictions: tuple[Prediction, ...] = ()
    flags: tuple[str, ...] = ()
    # The computed estimates as extra features: on how many measured compounds they are present, the
    # LOO RMSE with and without them on those compounds, whether the model with them is used.
    n_with_estimates: int = 0
    loo_rmse_with_estimates: Optional[float] = None
    loo_rmse_without_estimates: Optional[float] = None
    estimates_used: bool = False
    estimates_message: str = ""


@dataclass(frozen=True)
class ClassificationResult(Result):
    n: int = 0
    n_switching: int = 0
    enough_data: bool = False
    message: str = ""
    model: str = ""
    loo_brier_gp: Optional[float] = None
    loo_brier_rate: Optional[float] = None
    probabilities: dict[str, float] = field(default_factory=dict)
    flags: tuple[str, ...] = ()


def _rmse(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.sqrt(np.mean((a - b) ** 2)))


def predict_property(train: Sequence[tuple[Descriptor, float]], targets: Sequence[Descriptor], *, prop: str,
                     unit: str) -> RegressionResult:
    """Fit the GP and the scaffold mean to ``train`` (measured compounds), validate both by leave-one-out,
    and predict ``targets`` with the one of lower LOO error. Fewer than :data:`MIN_COMPOUNDS`: no prediction.
    Where the computed estimates are present, a GP with them competes as the module docstring says."""
    n = len(train)
    if n < MIN_COMPOUNDS:
        return RegressionResult(property=prop, unit=unit, n=n, enough_data=False,
                                message=f"{n} measured compound{'s' if n != 1 else ''}; a prediction needs at least "
                                        f"{MIN_COMPOUNDS}", flags=("too_few_data",))
    bridges = sorted({d.bridge for d, _ in train} | {d.bridge for d in targets})
    x = np.array([features(d, bridges) for d, _ in train])
    y = np.array([v for _, v in train], dtype=float)
    tb = [d.bridge for d, _ in train]
    gp = fit_gp_regression(x, y)
    loo_mu, loo_sd = gp.loo()
    rmse_gp = _rmse(loo_mu, y)
    coverage = float(np.mean(np.abs(loo_mu - y) <= Z95 * loo_sd))
    rmse_sm = _rmse(scaffold_mean_loo(tb, y), y)
    use_gp = rmse_gp < rmse_sm
    est = _estimates_model(train, bridges)
    preds: dict[str, Prediction] = {}
    rest = list(targets)
    if est["used"]:
        with_e = [d for d in targets if d.has_estimates]
        rest = [d for d in targets if not d.has_estimates]
        if with_e:
            mu, sd = est["gp"].predict(np.array([features(d, bridges, estimates=True) for d in with_e]))
            preds.update({d.code: Prediction(d.code, float(m), float(s), float(m - Z95 * s), float(m + Z95 * s), True)
                          for d, m, s in zip(with_e, mu, sd)})
    if rest:
        if use_gp:
            mu, sd = gp.predict(np.array([features(d, bridges) for d in rest]))
            q = Z95
        else:
            sm = fit_scaffold_mean(tb, y)
            mu, sd = sm.predict([d.bridge for d in rest])
            q = float(stats.t.ppf(0.975, sm.dof))
        preds.update({d.code: Prediction(d.code, float(m), float(s), float(m - q * s), float(m + q * s))
                      for d, m, s in zip(rest, mu, sd)})
    best = int(np.argmax(y))
    return RegressionResult(property=prop, unit=unit, n=n, enough_data=True, model="gp" if use_gp else "scaffold_mean",
                            features=tuple(feature_names(bridges, estimates=est["used"])), loo_rmse_gp=rmse_gp,
                            loo_rmse_scaffold_mean=rmse_sm, loo_coverage_gp=coverage, best_measured=float(y[best]),
                            best_code=train[best][0].code, predictions=tuple(preds[d.code] for d in targets),
                            n_with_estimates=est["n"], loo_rmse_with_estimates=est["rmse_with"],
                            loo_rmse_without_estimates=est["rmse_without"], estimates_used=est["used"],
                            estimates_message=est["message"])


def _estimates_model(train: Sequence[tuple[Descriptor, float]], bridges: Sequence[str]) -> dict[str, Any]:
    """The GP with the computed estimates, fitted on the measured compounds that have them, and whether its
    LOO RMSE beats the structure-only GP and the scaffold mean on the same compounds (then it is used)."""
    sub = [(d, v) for d, v in train if d.has_estimates]
    out: dict[str, Any] = {"n": len(sub), "used": False, "gp": None, "rmse_with": None, "rmse_without": None}
    if len(sub) < MIN_COMPOUNDS:
        out["message"] = (f"computed estimates on {len(sub)} measured compound{'s' if len(sub) != 1 else ''}; "
                          f"using them needs at least {MIN_COMPOUNDS}")
        return out
    y = np.array([v for _, v in sub], dtype=float)
    gp_with = fit_gp_regression(np.array([features(d, bridges, estimates=True) for d, _ in sub]), y)
    gp_without = fit_gp_regression(np.array([features(d, bridges) for d, _ in sub]), y)
    out["rmse_with"] = _rmse(gp_with.loo()[0], y)
    # Without them: the better of the structure-only GP and the scaffold mean, on the same compounds.
    out["rmse_without"] = min(_rmse(gp_without.loo()[0], y), _rmse(scaffold_mean_loo([d.bridge for d, _ in sub], y), y))
    out["used"] = out["rmse_with"] < out["rmse_without"]
    out["gp"] = gp_with
    out["message"] = (f"computed estimates on {len(sub)} measured compounds: leave-one-out RMSE "
                      f"{out['rmse_with']:.3g} with them, {out['rmse_without']:.3g} without; "
                      + ("used for targets that have them" if out["used"] else "not used (they do not help)"))
    return out


def predict_switching(train: Sequence[tuple[Descriptor, bool]], targets: Sequence[Descriptor]) -> ClassificationResult:
    """Probability that a target switches, from compounds with a switching verdict either way."""
    n = len(train)
    k = sum(1 for _, s in train if s)
    if n < MIN_COMPOUNDS or min(k, n - k) < MIN_PER_CLASS:
        return ClassificationResult(n=n, n_switching=k, enough_data=False,
                                    message=f"{n} compounds with a switching verdict ({k} switch); a prediction needs "
                                            f"{MIN_COMPOUNDS}, with at least {MIN_PER_CLASS} of each outcome",
                                    flags=("too_few_data",))
    bridges = sorted({d.bridge for d, _ in train} | {d.bridge for d in targets})
    x = np.array([features(d, bridges) for d, _ in train])
    t = np.array([1.0 if s else 0.0 for _, s in train])
    tb = [d.bridge for d, _ in train]
    p_gp, p_rate = np.empty(n), np.empty(n)
    for i in range(n):  # brute-force LOO: refit the mode, keep the full-data hyperparameters' grid choice
        keep = np.array([j != i for j in range(n)])
        p_gp[i] = fit_gp_classifier(x[keep], t[keep]).predict(x[i:i + 1])[0]
        p_rate[i] = succession_rate([b for b, m in zip(tb, keep) if m], t[keep], [tb[i]])[0]
    brier_gp = float(np.mean((p_gp - t) ** 2))
    brier_rate = float(np.mean((p_rate - t) ** 2))
    use_gp = brier_gp < brier_rate
    probs: dict[str, float] = {}
    if targets:
        if use_gp:
            p = fit_gp_classifier(x, t).predict(np.array([features(d, bridges) for d in targets]))
        else:
            p = succession_rate(tb, t, [d.bridge for d in targets])
        probs = {d.code: float(v) for d, v in zip(targets, p)}
    return ClassificationResult(n=n, n_switching=k, enough_data=True, model="gp" if use_gp else "bridge_rate",
                                loo_brier_gp=brier_gp, loo_brier_rate=brier_rate, probabilities=probs)


def expected_improvement(mean: float, sd: float, best: float) -> float:
    """EI for a maximisation: (mu - f*) Phi(z) + sigma phi(z), z = (mu - f*) / sigma (Jones et al. 1998, eq. 15)."""
    if sd <= 0:
        return max(mean - best, 0.0)
    z = (mean - best) / sd
    return float((mean - best) * stats.norm.cdf(z) + sd * stats.norm.pdf(z))
