"""Small- and wide-angle X-ray scattering of mesophases: peaks, columnar-lattice indexing, stacking and chain halo.

The scattering vector is q = 4 pi sin(theta) / lambda and a spacing d = 2 pi / q. A two-dimensional lattice of
columns gives reflections hk with

    1 / d_hk^2 = A h^2 + B k^2 + C h k,

linear in the metric coefficients (A, B, C), so every trial indexing is refined by linear least squares:

* ``lamellar``: d_n = d_1 / n (ratios 1 : 1/2 : 1/3), one parameter, the layer spacing ``a_nm``;
* ``hexagonal`` (p6mm): A = B = C = 4 / (3 a^2), ratios 1 : 1/sqrt3 : 1/2 : 1/sqrt7 : 1/3 for
  (10), (11), (20), (21), (30); a = 2 d_10 / sqrt 3;
* ``rectangular`` (c2mm, the common centred rectangular columnar lattice; reflections with h + k even):
  A = 1/a^2, B = 1/b^2, C = 0;
* ``oblique`` (p2): A = 1/(a^2 sin^2 g), B = 1/(b^2 sin^2 g), C = -2 cos g / (a b sin^2 g), three parameters,
  claimed only with at least four peaks.

The lattice reported is the simplest (fewest parameters, in the order above) that indexes every small-angle
peak within :data:`INDEX_TOLERANCE` in d, with at least one peak more than it has parameters (a lattice must be
tested by a peak it was not fitted to). Otherwise the lattice is ``undetermined`` and the peaks are listed.

The wide-angle region holds the intracolumnar pi-stacking peak (``stacking_A``, 3.3-3.9 A, common practice) and
the broad halo of molten alkyl chains (``chain_halo_A``, about 4.2-5 A, common practice).

References
----------
S. Laschat et al., Angew. Chem. Int. Ed. 46, 4832 (2007) (discotic columnar phases and their X-ray indexing;
recalled from memory).
S. Kumar, *Chemistry of Discotic Liquid Crystals*, CRC Press 2011, ch. 1 (columnar lattices and their d-spacing
ratios; recalled from memory).
O. Glatter and O. Kratky (eds.), *Small Angle X-ray Scattering*, Academic Press 1982 (q and d).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any, Optional, Sequence

import numpy as np
import pandas as pd
from scipy.ndimage import median_filter, uniform_filter1d
from scipy.signal import find_peaks

from ..errors import AnalysisError
from .results import Flag, Result

METHOD = (
    "Bragg spacings d = 2 pi/q indexed against lamellar, hexagonal (1 : 1/sqrt3 : 1/2 : 1/sqrt7), centred "
    "rectangular and oblique columnar lattices by least squares on 1/d^2 (Laschat et al., Angew. Chem. 2007), "
    "with the wide-angle pi-stacking peak and alkyl-chain halo"
)
VERSION = "saxs/1.0"

#: A peak is indexed when its d lies within this fraction of the lattice's (common practice: about 1 %
#: is the precision of a laboratory SAXS peak position).
INDEX_TOLERANCE = 0.012
#: Spacings above this (nm) are lattice reflections; below it the wide-angle region begins.
SMALL_ANGLE_MIN_D_NM = 0.8
#: The pi-stacking window, A (common practice: 3.4-3.8 A, widened a little for bowls).
STACKING_WINDOW_A = (3.3, 3.9)
#: The molten-chain halo window, A (common practice: about 4.5 A).
HALO_WINDOW_A = (4.0, 5.2)
LATTICES = ("lamellar", "hexagonal", "rectangular", "oblique")
_N_PARAMS = {"lamellar": 1, "hexagonal": 1, "rectangular": 2, "oblique": 3}
MIN_POINTS = 30


def q_from_two_theta(two_theta_deg, wavelength_nm: float) -> np.ndarray:
    """q = 4 pi sin(theta) / lambda, 1/nm."""
    return 4.0 * math.pi * np.sin(np.radians(np.asarray(two_theta_deg, dtype=float)) / 2.0) / wavelength_nm


def _reflections(lattice: str, hmax: int = 4) -> list[tuple[int, int]]:
    """The hk a lattice allows, one representative per set of equal spacings (for hexagonal and
    rectangular) or every distinct pair (oblique), low orders first."""
    if lattice == "lamellar":
        return [(n, 0) for n in range(1, 8)]
    if lattice == "hexagonal":
        out, seen = [], set()
        for h in range(0, hmax + 1):
            for k in range(0, h + 1):
                m = h * h + h * k + k * k
                if m and m not in seen:
                    seen.add(m)
                    out.append((h, k))
        return sorted(out, key=lambda hk: hk[0] ** 2 + hk[0] * hk[1] + hk[1] ** 2)
    if lattice == "rectangular":
        out = [(h, k) for h in range(0, hmax + 1) for k in range(0, hmax + 1) if (h or k) and (h + k) % 2 == 0]
        return out
    out = [(h, k) for h in range(0, hmax) for k in range(-hmax + 1, hmax) if (h > 0 or k > 0)]
    return out


def _design(lattice: str, hk: Sequence[tuple[int, int]]) -> np.ndarray:
    """Rows of the linear model 1/d^2 = X p for the lattice's parameters p."""
    h = np.array([v[0] for v in hk], dtype=float)
    k = np.array([v[1] for v in hk], dtype=float)
    if lattice == "lamellar":
        return (h**2)[:, None]
    if lattice == "hexagonal":
        return (h**2 + k**2 + h * k)[:, None]
    if lattice == "rectangular":
        return np.column_stack([h**2, k**2])
    return np.column_stack([h**2, k**2, h * k])


def _metric(lattice: str, p: np.ndarray) -> Optional[tuple[float, float, float]]:
    """(A, B, C) of the parameters, or None when they are not a metric."""
    if lattice in ("lamellar", "hexagonal"):
        s = float(p[0])
        if s <= 0:
            return None
        return (s, 0.0, 0.0) if lattice == "lamellar" else (s, s, s)
    if lattice == "rectangular":
        a, b = float(p[0]), float(p[1])
        return (a, b, 0.0) if a > 0 and b > 0 else None
    a, b, c = (float(v) for v in p)
    return (a, b, c) if a > 0 and b > 0 and 4 * a * b - c * c > 0 else None


def _d_calc(metric: tuple[float, float, float], hk: tuple[int, int]) -> float:
    a, b, c = metric
    inv = a * hk[0] ** 2 + b * hk[1] ** 2 + c * hk[0] * hk[1]
    return 1.0 / math.sqrt(inv) if inv > 0 else math.inf


@dataclass(frozen=True)
class Indexing:
    lattice: str
    metric: tuple[float, float, float]
    hk: tuple[tuple[int, int], ...]
    rms: float


def _index_all(lattice: str, metric, d_nm: np.ndarray) -> Optional[list[tuple[int, int]]]:
    """Each peak's nearest allowed reflection within tolerance (None if any peak has none)."""
    refl = _reflections(lattice)
    out = []
    for d in d_nm:
        best = min(refl, key=lambda hk: abs(_d_calc(metric, hk) - d))
        if abs(_d_calc(metric, best) - d) / d > INDEX_TOLERANCE:
            return None
        out.append(best)
    return out


def index_lattice(lattice: str, d_nm: Sequence[float]) -> Optional[Indexing]:
    """The best indexing of the spacings ``d_nm`` (nm, any order) on one lattice, or None.

    Trial assignments of the first one to three peaks (as many as the lattice has parameters) to low-order
    reflections fix the metric; every peak is then indexed to its nearest reflection and the metric refined
    by least squares on 1/d^2, twice. The trial with all peaks indexed and the lowest rms relative residual wins.
    """
    d = np.sort(np.asarray(d_nm, dtype=float))[::-1]
    n = _N_PARAMS[lattice]
    if len(d) < n:
        return None
    refl = _reflections(lattice)[:8]
    best: Optional[Indexing] = None
    best_unseen = 0
    for trial in itertools.permutations(refl, n):
        X = _design(lattice, trial)
        try:
            p = np.linalg.solve(X, 1.0 / d[:n] ** 2) if X.shape[0] == X.shape[1] else None
        except np.linalg.LinAlgError:
            continue
        if p is None:
            continue
        metric = _metric(lattice, p)
        if metric is None:
            continue
        for _ in range(2):
            hk = _index_all(lattice, metric, d)
            if hk is None:
                break
            p, *_ = np.linalg.lstsq(_design(lattice, hk), 1.0 / d**2, rcond=None)
            metric = _metric(lattice, p)
            if metric is None:
                break
        if metric is None or hk is None:
            continue
        hk = _index_all(lattice, metric, d)
        if hk is None:
            continue
        rel = np.array([(_d_calc(metric, v) - x) / x for v, x in zip(hk, d)])
        rms = float(np.sqrt(np.mean(rel**2)))
        # prefer the smallest cell: a supercell indexes the same peaks but predicts reflections not seen
        unseen = _unobserved(lattice, metric, hk, float(d.min()))
        if best is None or (unseen, rms) < (best_unseen, best.rms - 1e-12):
            best, best_unseen = Indexing(lattice, metric, tuple(hk), rms), unseen
    if best is not None and lattice == "rectangular" and best.metric[0] > best.metric[1]:
        # convention a >= b: swap the axes (and the indices)
        best = Indexing(lattice, (best.metric[1], best.metric[0], 0.0), tuple((k, h) for h, k in best.hk), best.rms)
    return best if best is None or lattice != "oblique" else _reduced(best, d)


def _unobserved(lattice: str, metric, hk: Sequence[tuple[int, int]], d_min: float) -> int:
    """Distinct allowed spacings at or above ``d_min`` that no peak is indexed to."""
    seen = {round(_d_calc(metric, v), 6) for v in hk}
    allowed = {round(_d_calc(metric, v), 6) for v in _reflections(lattice) if _d_calc(metric, v) >= d_min * 0.99}
    return len(allowed - seen)


def _reduced(ix: Indexing, d: np.ndarray) -> Indexing:
    """An oblique indexing on the Gauss-reduced basis (the two shortest lattice vectors, gamma >= 90 deg),
    the peaks indexed again on it (Lagrange-Gauss reduction of a two-dimensional lattice)."""
    A, B, C = ix.metric
    G_recip = np.array([[A, C / 2.0], [C / 2.0, B]])
    G = np.linalg.inv(G_recip)  # direct metric: |a1|^2, a1.a2, |a2|^2
    basis = np.eye(2)
    for _ in range(20):
        g = basis @ G @ basis.T
        if g[1, 1] < g[0, 0]:
            basis = basis[::-1].copy()
            continue
        m = round(g[0, 1] / g[0, 0])
        if m == 0:
            break
        basis[1] -= m * basis[0]
    g = basis @ G @ basis.T
    if g[0, 1] > 0:  # obtuse convention
        basis[1] = -basis[1]
        g = basis @ G @ basis.T
    Gr = np.linalg.inv(g)
    metric = (float(Gr[0, 0]), float(Gr[1, 1]), float(2 * Gr[0, 1]))
    hk = _index_all("oblique", metric, d)
    if hk is None:
        return ix
    rel = np.array([(_d_calc(metric, v) - x) / x for v, x in zip(hk, d)])
    return Indexing("oblique", metric, tuple(hk), float(np.sqrt(np.mean(rel**2))))


def lattice_parameters(ix: Indexing) -> dict[str, Optional[float]]:
    """a_nm, b_nm and gamma_deg of an indexing (None where the lattice has no such parameter)."""
    A, B, C = ix.metric
    if ix.lattice in ("lamellar",):
        return {"a_nm": 1.0 / math.sqrt(A), "b_nm": None, "gamma_deg": None}
    if ix.lattice == "hexagonal":
        return {"a_nm": math.sqrt(4.0 / (3.0 * A)), "b_nm": None, "gamma_deg": 120.0}
    if ix.lattice == "rectangular":
        return {"a_nm": 1.0 / math.sqrt(A), "b_nm": 1.0 / math.sqrt(B), "gamma_deg": 90.0}
    # invert the reciprocal metric: a*^2 = A, b*^2 = B, 2 a* b* cos(g*) = C; g = 180 - g*
    cos_gs = C / (2.0 * math.sqrt(A * B))
    sin_gs = math.sqrt(1.0 - cos_gs**2)
    return {"a_nm": 1.0 / (math.sqrt(A) * sin_gs), "b_nm": 1.0 / (math.sqrt(B) * sin_gs),
            "gamma_deg": 180.0 - math.degrees(math.acos(cos_gs))}


def choose_lattice(d_nm: Sequence[float]) -> Optional[Indexing]:
    """The simplest lattice that indexes every spacing with at least one peak beyond its parameters."""
    for lattice in LATTICES:
        if len(d_nm) < _N_PARAMS[lattice] + 1 or (lattice == "oblique" and len(d_nm) < 4):
            continue
        ix = index_lattice(lattice, d_nm)
        if ix is not None:
            return ix
    return None


@dataclass(frozen=True)
class SaxsResult(Result):
    """Lattice, its parameters and indexed peaks, and the wide-angle spacings."""

    lattice: str
    a_nm: Optional[float]
    b_nm: Optional[float]
    gamma_deg: Optional[float]
    column_area_nm2: Optional[float]
    indexed_peaks: tuple[dict[str, Any], ...]
    rms_residual_pct: Optional[float]
    stacking_A: Optional[float]
    chain_halo_A: Optional[float]
    peaks: tuple[dict[str, Any], ...]
    temperature_K: Optional[float]
    q_min_per_nm: float
    q_max_per_nm: float
    verdict: str
    flags: tuple[Flag, ...] = ()
    q: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]  # plot arrays, not stored
    y: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]
    JSON_OMIT = ("q", "y")


def _q_and_intensity(frame: pd.DataFrame, wavelength_A: Optional[float]) -> tuple[np.ndarray, np.ndarray]:
    if "intensity" not in frame:
        raise AnalysisError("the file has no intensity column", field="file")
    if "q_per_nm" in frame:
        q = frame["q_per_nm"].to_numpy(float)
    elif "two_theta_deg" in frame:
        if wavelength_A is None:
            raise AnalysisError("2theta is given but no wavelength: add '# wavelength: 1.5406 angstrom' or "
                                "'# wavelength: Cu Ka1', or give q (1/nm)", field="wavelength")
        q = q_from_two_theta(frame["two_theta_deg"].to_numpy(float), wavelength_A / 10.0)
    else:
        raise AnalysisError("the file needs q (1/nm), or 2theta (deg) with the wavelength", field="file")
    y = frame["intensity"].to_numpy(float)
    order = np.argsort(q)
    q, y = q[order], y[order]
    if len(q) < MIN_POINTS:
        raise AnalysisError(f"the curve has {len(q)} points; at least {MIN_POINTS} are needed", field="file")
    if q[0] <= 0:
        raise AnalysisError(f"q must be positive; the file starts at {q[0]:g} 1/nm", column="q")
    if np.any(y <= 0):
        # logarithmic peak finding needs positive intensities; zeros of a detector gap are dropped
        keep = y > 0
        q, y = q[keep], y[keep]
    return q, y


def _peaks_in_log(q: np.ndarray, y: np.ndarray, *, smooth: int = 5, sigmas: float = 5.0,
                  min_decades: float = 0.03) -> list[int]:
    """Peak indices of log10(I), smoothed over ``smooth`` points; prominence at least ``sigmas`` times the local
    noise of the smoothed curve (the scatter of log10 I about its smoothing, median over 151 points, reduced by
    sqrt(smooth)) and at least ``min_decades``."""
    ly = np.log10(y)
    sm = uniform_filter1d(ly, smooth, mode="nearest") if smooth > 1 else ly
    scatter = np.abs(ly - sm)
    local = 1.4826 * median_filter(scatter, size=151, mode="nearest") / math.sqrt(max(smooth, 1))
    idx, props = find_peaks(sm, prominence=min_decades)
    return [int(i) for i, p in zip(idx, props["prominences"]) if p >= sigmas * local[i]]


def analyse_saxs(frame: pd.DataFrame, *, wavelength_A: Optional[float] = None,
                 temperature_K: Optional[float] = None) -> SaxsResult:
    """Index the small-angle peaks of a mesophase and read its wide-angle spacings.

    Parameters
    ----------
    frame : DataFrame
        ``q_per_nm`` (or ``two_theta_deg``) and ``intensity``.
    wavelength_A : float, optional
        Needed when the file gives 2theta.
    temperature_K : float, optional
        The measurement temperature.

    Returns
    -------
    SaxsResult
        ``verdict`` is ``"<lattice> columnar"`` for hexagonal, rectangular and oblique lattices, ``"lamellar"``,
        or ``""`` when the lattice is undetermined. ``column_area_nm2`` is the area per column (hexagonal:
        sqrt3/2 a^2; rectangular c2mm, two columns per cell: a b / 2; oblique: a b sin g).
    """
    q, y = _q_and_intensity(frame, wavelength_A)
    flags: list[Flag] = []
    small = q < 2 * math.pi / SMALL_ANGLE_MIN_D_NM
    idx_small = [i for i in _peaks_in_log(q, y, sigmas=10.0, min_decades=0.1) if small[i]]
    peaks = []
    for i in idx_small:
        lo, hi = max(i - 2, 0), min(i + 3, len(q))
        c = np.polyfit(q[lo:hi] - q[i], np.log10(y[lo:hi]), 2) if hi - lo >= 3 else [0, 0, 0]
        qc = q[i] - c[1] / (2 * c[0]) if c[0] < 0 else q[i]
        qc = float(np.clip(qc, q[lo], q[hi - 1]))
        peaks.append({"q_per_nm": qc, "d_nm": 2 * math.pi / qc, "intensity": float(y[i])})
    d = np.array([p["d_nm"] for p in peaks])
    ix = choose_lattice(d) if len(d) else None
    params: dict[str, Optional[float]] = {"a_nm": None, "b_nm": None, "gamma_deg": None}
    indexed: list[dict[str, Any]] = []
    area = rms = None
    lattice = "undetermined"
    if ix is not None:
        lattice = ix.lattice
        params = lattice_parameters(ix)
        order = np.argsort(-d)
        for j, hk in zip(order, ix.hk):
            dc = _d_calc(ix.metric, hk)
            indexed.append({**peaks[j], "hk": f"{hk[0]}{hk[1]}" if lattice != "oblique" else f"{hk[0]} {hk[1]}",
                            "d_calc_nm": dc, "residual_pct": 100.0 * (peaks[j]["d_nm"] - dc) / dc})
        rms = 100.0 * ix.rms
        a, b, g = params["a_nm"], params["b_nm"], params["gamma_deg"]
        if lattice == "hexagonal":
            area = math.sqrt(3.0) / 2.0 * a * a
        elif lattice == "rectangular":
            area = a * b / 2.0
        elif lattice == "oblique":
            area = a * b * math.sin(math.radians(g))
    elif len(d):
        flags.append(Flag("lattice_undetermined", f"{len(d)} small-angle peak(s) that no lattice indexes with a "
                                                  "peak to spare; the spacings are listed, the lattice is not named"))
    else:
        flags.append(Flag("no_small_angle_peaks", "no small-angle peak above the noise"))
    # wide angles: a sharp-ish stacking peak and a broad chain halo
    stacking = halo = None
    wide_idx = _peaks_in_log(q, y, smooth=9, min_decades=0.01)
    for i in wide_idx:
        dA = 10.0 * 2 * math.pi / q[i]
        if STACKING_WINDOW_A[0] <= dA <= STACKING_WINDOW_A[1] and stacking is None:
            stacking = dA
    halo_idx = _peaks_in_log(q, y, smooth=max(5, int(1.0 / max(float(np.median(np.diff(q))), 1e-6))),
                             min_decades=0.01, sigmas=3.0)
    for i in halo_idx:
        dA = 10.0 * 2 * math.pi / q[i]
        if HALO_WINDOW_A[0] <= dA <= HALO_WINDOW_A[1]:
            halo = dA
            break
    verdict = {"hexagonal": "hexagonal columnar", "rectangular": "rectangular columnar",
               "oblique": "oblique columnar", "lamellar": "lamellar"}.get(lattice, "")
    return SaxsResult(lattice=lattice, a_nm=params["a_nm"], b_nm=params["b_nm"], gamma_deg=params["gamma_deg"],
                      column_area_nm2=area, indexed_peaks=tuple(indexed), rms_residual_pct=rms,
                      stacking_A=stacking, chain_halo_A=halo, peaks=tuple(peaks),
                      temperature_K=temperature_K, q_min_per_nm=float(q[0]), q_max_per_nm=float(q[-1]),
                      verdict=verdict, flags=tuple(flags), q=q, y=y)
