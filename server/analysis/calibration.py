"""Calibrating computed inversion barriers against measured ones.

Semi-empirical barriers (GFN2-xTB and the like) are systematically off but usually
track the measured ones; a straight line measured = a + b * computed, fitted on the
compounds that have both, turns a new computed barrier into a prediction with an
honest 95 % prediction interval.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

from server.analysis.results import Flag, Result
from server.errors import AnalysisError

METHOD = (
    "Ordinary least-squares line measured = a + b * computed with the textbook 95 % "
    "prediction interval (Montgomery, Peck and Vining, Introduction to Linear Regression "
    "Analysis, Wiley); pairs whose computed minimum is planar left out, a line per bridge type from five "
    "pairs, no calibrated value whose 95 % interval is wider than 3 kcal/mol."
)
VERSION = "calibration/1.1"  # 1.1: planar minima left out, lines per bridge type, interval limit

MIN_PAIRS = 3
FEW_PAIRS = 5  # below this the prediction band is very wide (t with <= 2 dof); common practice
CONFIDENCE = 0.95


@dataclass(frozen=True)
class Calibration(Result):
    """A fitted (or refused) calibration line of measured on computed barriers, kcal/mol."""

    JSON_KEYS = ("status", "message", "n", "a_kcal_mol", "b", "a_err_kcal_mol", "b_err", "r2", "s_kcal_mol",
                 "confidence", "t_crit", "points", "flags")

    status: str  # "ok" | "insufficient"
    message: str
    n: int
    computed_kcal_mol: tuple[float, ...]
    measured_kcal_mol: tuple[float, ...]
    labels: tuple[str, ...]
    a_kcal_mol: float | None = None
    b: float | None = None
    a_err_kcal_mol: float | None = None
    b_err: float | None = None
    r2: float | None = None
    s_kcal_mol: float | None = None
    t_crit: float | None = None
    x_mean_kcal_mol: float | None = field(default=None, repr=False)
    sxx: float | None = field(default=None, repr=False)
    flags: tuple[Flag, ...] = ()

    @property
    def ok(self) -> bool:
        return self.status == "ok"

    @property
    def residuals_kcal_mol(self) -> tuple[float, ...]:
        """measured - fitted for each pair (empty when there is no fit)."""
        if not self.ok:
            return ()
        return tuple(y - (self.a_kcal_mol + self.b * x) for x, y in zip(self.computed_kcal_mol, self.measured_kcal_mol))

    @property
    def confidence(self) -> float:
        """Confidence level of the prediction band."""
        return CONFIDENCE

    @property
    def points(self) -> list[dict[str, Any]]:
        """Each calibration pair with its label and residual (None without a fit)."""
        res = self.residuals_kcal_mol
        return [
            {"label": lab, "computed_kcal_mol": x, "measured_kcal_mol": y, "residual_kcal_mol": res[i] if res else None}
            for i, (lab, x, y) in enumerate(zip(self.labels, self.computed_kcal_mol, self.measured_kcal_mol))
        ]

    def _need_fit(self) -> None:
        if not self.ok:
            raise AnalysisError(f"no calibration line to predict from: {self.message}")

    def predict(self, computed_kcal_mol: float) -> tuple[float, float, float]:
        """Predicted measured barrier and its 95 % prediction interval, kcal/mol.

        Parameters
        ----------
        computed_kcal_mol : float
            A new computed barrier, kcal/mol.

        Returns
        -------
        (y, lower, upper) : tuple of float
            y = a + b x0; half-width t(0.975, n-2) * s * sqrt(1 + 1/n + (x0 - xbar)^2 / Sxx).

        Notes
        -----
        The interval is for one new observation (prediction interval), not for the
        mean response (confidence interval, which lacks the leading 1 under the root).
        Far outside the calibrated range the straight line itself is an assumption.

        References
        ----------
        D. C. Montgomery, E. A. Peck and G. G. Vining, Introduction to Linear Regression
        Analysis, 5th ed., Wiley (2012), section 2.5 (prediction of new observations).
        """
        self._need_fit()
        try:
            x0 = float(computed_kcal_mol)
        except (TypeError, ValueError) as exc:
            raise AnalysisError(f"the computed barrier must be a number, got {computed_kcal_mol!r}",
                                field="computed") from exc
        if not math.isfinite(x0):
            raise AnalysisError(f"the computed barrier must be finite, got {computed_kcal_mol!r}", field="computed")
        y, lo, hi = self.band(np.array([x0]))
        return float(y[0]), float(lo[0]), float(hi[0])

    def band(self, x_grid: Sequence[float] | np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Fit line and 95 % prediction band over ``x_grid`` (computed barriers, kcal/mol)."""
        self._need_fit()
        x = np.asarray(x_grid, dtype=float)
        if not np.all(np.isfinite(x)):
            raise AnalysisError("the grid of computed barriers contains a non-finite value")
        y = self.a_kcal_mol + self.b * x
        half = self.t_crit * self.s_kcal_mol * np.sqrt(1.0 + 1.0 / self.n + (x - self.x_mean_kcal_mol) ** 2 / self.sxx)
        return y, y - half, y + half


def _as_floats(values: Sequence[float], what: str, field_name: str) -> tuple[float, ...]:
    out = []
    for i, v in enumerate(values):
        try:
            x = float(v)
        except (TypeError, ValueError) as exc:
            raise AnalysisError(f"pair {i + 1}: the {what} barrier must be a number, got {v!r}",
                                field=field_name) from exc
        if not math.isfinite(x):
            raise AnalysisError(f"pair {i + 1}: the {what} barrier must be finite, got {v!r}", field=field_name)
        out.append(x)
    return tuple(out)


def calibrate(
    measured_kcal_mol: Sequence[float],
    computed_kcal_mol: Sequence[float],
    labels: Sequence[str] | None = None,
) -> Calibration:
    """Fit measured = a + b * computed by ordinary least squares.

    Parameters
    ----------
    measured_kcal_mol : sequence of float
        Measured barriers (e.g. from coalescence or Eyring fits), kcal/mol.
    computed_kcal_mol : sequence of float
        Computed barriers of the same compounds, same order, kcal/mol.
    labels : sequence of str, optional
        Compound codes for the points; default "1", "2", ...

    Returns
    -------
    Calibration
        ``status`` "ok" with ``a_kcal_mol``, ``b``, their standard errors, ``r2``,
        residual standard deviation ``s_kcal_mol`` (n - 2 dof) and ``n``; or
        ``status`` "insufficient" with a ``message`` and no fit when there are fewer
        than three pairs or the computed values do not vary.

    References
    ----------
    D. C. Montgomery, E. A. Peck and G. G. Vining, Introduction to Linear Regression
    Analysis, 5th ed., Wiley (2012), ch. 2 (simple linear regression).
    """
    y = _as_floats(measured_kcal_mol, "measured", "measured")
    x = _as_floats(computed_kcal_mol, "computed", "computed")
    if len(x) != len(y):
        raise AnalysisError(f"{len(y)} measured but {len(x)} computed barriers; give them in pairs")
    if labels is None:
        labs = tuple(str(i + 1) for i in range(len(x)))
    else:
        labs = tuple(str(lab) for lab in labels)
        if len(labs) != len(x):
            raise AnalysisError(f"{len(labs)} labels for {len(x)} pairs", field="labels")
    n = len(x)
    base = dict(n=n, computed_kcal_mol=x, measured_kcal_mol=y, labels=labs)
    if n < MIN_PAIRS:
        return Calibration(
            status="insufficient",
            message=f"a calibration line needs at least {MIN_PAIRS} compounds with both a measured and a "
            f"computed barrier; {n} so far",
            **base,
        )
    xa = np.asarray(x)
    ya = np.asarray(y)
    sxx = float(np.sum((xa - xa.mean()) ** 2))
    if sxx <= 0.0:
        return Calibration(
            status="insufficient",
            message=f"all {n} computed barriers are equal ({x[0]:g} kcal/mol); the slope cannot be fitted",
            **base,
        )
    fit = stats.linregress(xa, ya)
    dof = n - 2
    resid = ya - (fit.intercept + fit.slope * xa)
    s = math.sqrt(float(np.sum(resid**2)) / dof)
    t_crit = float(stats.t.ppf(0.5 + CONFIDENCE / 2.0, dof))
    flags: list[Flag] = []
    if n < FEW_PAIRS:
        flags.append(Flag(
            "few_pairs",
            f"only {n} pairs: the prediction band rests on {dof} degree(s) of freedom and is wide "
            "(common practice: five or more)",
        ))
    if fit.slope <= 0:
        flags.append(Flag(
            "non_positive_slope",
            "measured barriers do not rise with computed ones; the computed values are not informative here",
        ))
    return Calibration(
        status="ok",
        message=f"measured = {fit.intercept:.3g} + {fit.slope:.3g} x computed (n = {n})",
        a_kcal_mol=float(fit.intercept),
        b=float(fit.slope),
        a_err_kcal_mol=float(fit.intercept_stderr),
        b_err=float(fit.stderr),
        r2=float(fit.rvalue**2),
        s_kcal_mol=s,
        t_crit=t_crit,
        x_mean_kcal_mol=float(xa.mean()),
        sxx=sxx,
        flags=tuple(flags),
        **base,
    )


# ----------------------------------------------------------------------------- which pairs, which line

#: A computed barrier at or below this (kcal/mol) means the optimised minimum collapsed to planar: the
#: "barrier" is then no barrier of the bowl and must not set a calibration line (our rule; the xtb estimate
#: also says so in its ``planar`` field).
PLANAR_BARRIER_KCAL = 0.1
#: A bridge type gets a line of its own from this many pairs (the same five pairs as :data:`FEW_PAIRS`:
#: with fewer the band rests on two or fewer degrees of freedom; common practice, see above).
MIN_PAIRS_PER_BRIDGE = FEW_PAIRS
#: No calibrated value is shown whose 95 % prediction interval is wider than this, end to end (kcal/mol).
#: Our limit: at 298 K, 3 kcal/mol is a factor of about 160 in an Eyring rate (exp(3 / 0.593)), so a wider
#: interval no longer says whether a bowl inverts on the time scale of a measurement.
INTERVAL_LIMIT_KCAL = 3.0


@dataclass(frozen=True)
class CalibrationPair:
    """One compound with a measured and a computed barrier (kcal/mol), its bridge type and whether the
    computed minimum was planar."""

    label: str
    measured_kcal_mol: float
    computed_kcal_mol: float
    bridge: str | None = None
    planar: bool = False

    @property
    def collapsed(self) -> bool:
        """The computed minimum is planar (flagged by the estimate, or a barrier of at most
        :data:`PLANAR_BARRIER_KCAL`): not a barrier of the bowl."""
        return self.planar or self.computed_kcal_mol <= PLANAR_BARRIER_KCAL


@dataclass(frozen=True)
class CalibrationSet:
    """The pooled line over the usable pairs and one line per bridge type with enough pairs."""

    pooled: Calibration
    by_bridge: dict[str, Calibration]
    excluded: tuple[CalibrationPair, ...]
    used: tuple[CalibrationPair, ...]

    def line_for(self, bridge: str | None) -> tuple[Calibration, str]:
        """The line for a compound of this bridge type, and which one it is (``"bridge CH2"`` or ``"pooled"``)."""
        if bridge and bridge in self.by_bridge and self.by_bridge[bridge].ok:
            return self.by_bridge[bridge], f"bridge {bridge}"
        return self.pooled, "pooled"

    def predict(self, computed_kcal_mol: float, bridge: str | None = None, *,
                planar: bool = False) -> dict[str, Any]:
        """A calibrated barrier for a new computed one: ``{"calibrated", "lower", "upper", "line", "shown",
        "reason"}`` (kcal/mol). ``shown`` is False, with no numbers, when the computed minimum is planar,
        there is no line, or the 95 % prediction interval is wider than :data:`INTERVAL_LIMIT_KCAL`."""
        out: dict[str, Any] = {"calibrated": None, "lower": None, "upper": None, "line": None, "shown": False,
                               "reason": ""}
        if CalibrationPair("", 0.0, float(computed_kcal_mol), planar=planar).collapsed:
            out["reason"] = "the computed minimum is planar: no barrier to calibrate"
            return out
        cal, which = self.line_for(bridge)
        out["line"] = which
        if not cal.ok:
            out["reason"] = cal.message
            return out
        y, lo, hi = cal.predict(computed_kcal_mol)
        if hi - lo > INTERVAL_LIMIT_KCAL:
            out["reason"] = (f"the 95 % prediction interval ({hi - lo:.1f} kcal/mol wide) is wider than the "
                             f"{INTERVAL_LIMIT_KCAL:g} kcal/mol limit")
            return out
        out.update(calibrated=y, lower=lo, upper=hi, shown=True)
        return out


def calibrate_pairs(pairs: Sequence[CalibrationPair]) -> CalibrationSet:
    """Calibration lines from compound pairs, with the rules a referee would ask for.

    1. Pairs whose computed minimum collapsed to planar are left out (:attr:`CalibrationPair.collapsed`):
       a planar-constrained energy difference of about zero measures a failed optimisation, not the
       bowl's barrier, and two such points at the origin would set the slope of the line.
    2. A bridge type with at least :data:`MIN_PAIRS_PER_BRIDGE` usable pairs gets its own line (the
       barrier of a bowl depends strongly on its bridge atoms, so one line for all can hide two trends);
       others use the pooled line over all usable pairs.
    3. Predictions (:meth:`CalibrationSet.predict`) show no value whose 95 % interval is wider than
       :data:`INTERVAL_LIMIT_KCAL`.

    Each line is the ordinary least-squares fit of :func:`calibrate` (Montgomery, Peck and Vining 2012).
    """
    used = tuple(p for p in pairs if not p.collapsed)
    excluded = tuple(p for p in pairs if p.collapsed)

    def line(ps: Sequence[CalibrationPair]) -> Calibration:
        return calibrate([p.measured_kcal_mol for p in ps], [p.computed_kcal_mol for p in ps],
                         labels=[p.label for p in ps])

    pooled = line(used)
    if excluded:
        pooled = dataclasses.replace(pooled, flags=pooled.flags + (Flag(
            "planar_excluded",
            f"{len(excluded)} pair(s) left out because the computed minimum is planar: "
            f"{', '.join(p.label for p in excluded)}"),))
    bridges: dict[str, list[CalibrationPair]] = {}
    for p in used:
        if p.bridge:
            bridges.setdefault(p.bridge, []).append(p)
    by_bridge = {b: line(ps) for b, ps in sorted(bridges.items()) if len(ps) >= MIN_PAIRS_PER_BRIDGE}
    return CalibrationSet(pooled=pooled, by_bridge=by_bridge, excluded=excluded, used=used)
