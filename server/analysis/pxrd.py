"""Powder X-ray diffraction: peaks, d-spacings, and comparison with patterns simulated from CIFs.

A reflection hkl of a crystal with interplanar spacing d appears at the Bragg angle
lambda = 2 d sin(theta). Its integrated powder intensity, for an unpolarised laboratory source
and a flat sample in Bragg-Brentano geometry, is

    I_hkl = s * m_hkl * |F_hkl|^2 * Lp(theta),    Lp = (1 + cos^2 2theta) / (sin^2 theta cos theta),

with m_hkl the multiplicity (the symmetry-equivalent reflections that fall at the same angle,
Friedel mates included) and F_hkl the structure factor, here from gemmi's X-ray form factors
(International Tables Vol. C, Table 6.1.1.4) and the CIF's isotropic displacement parameters.
Absorption, preferred orientation and the Kalpha2 line are not modelled. Each reflection is drawn as
a pseudo-Voigt peak (half Gaussian, half Lorentzian) of a full width at half maximum the user may set.

The measured pattern is compared with every simulated one after removing a background (a running
minimum, smoothed), refining a zero shift of the 2theta axis (the shift that maximises the normalised
cross-correlation) and a scale (least squares). The figures of merit are the normalised cross-correlation
``score`` of the net profiles (1 for identical shapes), the weighted profile R factor ``rwp`` with
weights 1/y (counting statistics), its expectation for counting noise alone ``rexp``, and the
``misfit`` sqrt(rwp^2 - rexp^2), the part of the misfit noise does not explain (Young, *The Rietveld
Method*, IUCr/OUP 1993, ch. 1, for Rwp and Rexp). When the intensities are not counts (not whole
numbers) rexp is undefined and the misfit is rwp. The structure of lowest misfit is the ``reference``.
Peaks found in the measured pattern are then matched one by one to simulated reflections within a
window of one peak width (at least 0.05 deg).

Verdict (our own rule; thresholds set on synthetic patterns, see the constants):

* ``matches``: ``misfit`` at most :data:`MATCH_MISFIT`, no unexplained measured peak of at least
  :data:`EXTRA_PEAK_REL` of the strongest, and no strong simulated line missing;
* ``extra_phase``: ``misfit`` at most :data:`PARTIAL_MISFIT`, the strong simulated lines all present,
  and measured peaks of at least :data:`EXTRA_PEAK_REL` the structure does not explain: a second
  phase (a solvate, a polymorph, an impurity) is present;
* ``no_match``: anything else.

References
----------
V. K. Pecharsky and P. Y. Zavalij, *Fundamentals of Powder Diffraction and Structural
Characterization of Materials*, 2nd ed., Springer 2009, ch. 2 (Bragg's law), ch. 8 (intensities,
multiplicity, Lorentz-polarisation factor, peak shapes).
G. Hoelzer, M. Fritsch, M. Deutsch, J. Haertwig and E. Foerster, Phys. Rev. A 56, 4554 (1997)
(the Kalpha1 wavelengths).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any, Optional, Sequence

import gemmi
import numpy as np
import pandas as pd
from scipy.ndimage import minimum_filter1d, uniform_filter1d
from scipy.signal import find_peaks

from ..errors import AnalysisError
from .results import Flag, Result

METHOD = (
    "Bragg's law and kinematic powder intensities m|F|^2 Lp from the CIF (gemmi structure factors), "
    "compared after a refined zero shift and scale by normalised cross-correlation and Rwp "
    "(Pecharsky and Zavalij, Fundamentals of Powder Diffraction, 2009)"
)
VERSION = "pxrd/1.0"

#: Kalpha1 wavelengths of laboratory anodes, angstrom (Hoelzer et al., Phys. Rev. A 56, 4554 (1997);
#: Cu from that paper as quoted in our docs/methods.md, the others recalled from memory of the same
#: table). "Cu Ka" is the intensity-weighted Kalpha1/Kalpha2 mean commonly used for unresolved doublets.
ANODE_LINES_A: dict[str, float] = {
    "cu ka1": 1.540593,
    "cu ka": 1.5418,
    "mo ka1": 0.709317,
    "co ka1": 1.788996,
    "cr ka1": 2.289726,
    "fe ka1": 1.936041,
}

#: Misfit (Rwp less counting noise, see :func:`compare`) at or below which a pattern matches (our rule,
#: set on synthetic patterns: the right structure leaves about 0.25-0.4 from its background and
#: peak-shape errors, a different packing of the same molecule 0.75 or more).
MATCH_MISFIT = 0.45
#: Above MATCH_MISFIT but at or below this, with unexplained peaks: the structure is there, with another phase.
PARTIAL_MISFIT = 0.60
#: A measured peak this strong (fraction of the strongest) that the structure does not explain is a
#: second phase (common practice: a few percent is the detection limit of a laboratory pattern).
EXTRA_PEAK_REL = 0.05
#: The largest zero shift searched, degrees 2theta (sample displacement and zero errors of a
#: laboratory diffractometer are a few hundredths to a few tenths of a degree; common practice).
MAX_ZERO_SHIFT_DEG = 0.5
#: Default peak width (FWHM, degrees 2theta) of the simulation: a laboratory diffractometer on
#: a molecular powder (common practice).
DEFAULT_FWHM_DEG = 0.10
#: Bounded work: at most this many reflections are summed per simulated pattern.
MAX_REFLECTIONS = 20000
MIN_POINTS = 50


def wavelength_from_text(text: str) -> float | None:
    """The wavelength (A) of a named anode line ("Cu Ka1", "Cu K-alpha1", "CuKα1"), else None."""
    key = re.sub(r"[\s\-_]+", "", text.strip().lower()).replace("α", "a").replace("alpha", "a")
    for name, value in ANODE_LINES_A.items():
        if key == name.replace(" ", ""):
            return value
    return None


def two_theta_deg(d_A, wavelength_A: float):
    """Bragg angle 2theta (degrees) of spacing ``d_A`` (A): lambda = 2 d sin(theta); NaN beyond 180 deg."""
    s = wavelength_A / (2.0 * np.asarray(d_A, dtype=float))
    with np.errstate(invalid="ignore"):
        return np.degrees(2.0 * np.arcsin(np.where(s <= 1.0, s, np.nan)))


def d_spacing_A(two_theta, wavelength_A: float):
    """Spacing d (A) of a reflection at ``two_theta`` (degrees), from Bragg's law."""
    return wavelength_A / (2.0 * np.sin(np.radians(np.asarray(two_theta, dtype=float)) / 2.0))


def lorentz_polarisation(two_theta) -> np.ndarray:
    """Lp = (1 + cos^2 2theta) / (sin^2 theta cos theta), unpolarised beam, no monochromator."""
    tt = np.radians(np.asarray(two_theta, dtype=float))
    th = tt / 2.0
    return (1.0 + np.cos(tt) ** 2) / (np.sin(th) ** 2 * np.cos(th))


def pseudo_voigt(x, centre: float, fwhm: float, eta: float = 0.5) -> np.ndarray:
    """Unit-height pseudo-Voigt peak: eta Lorentzian + (1 - eta) Gaussian of one FWHM."""
    u = (np.asarray(x, dtype=float) - centre) / (fwhm / 2.0)
    return eta / (1.0 + u**2) + (1.0 - eta) * np.exp(-math.log(2.0) * u**2)


@dataclass(frozen=True)
class Reflection(Result):
    """One powder line: hkl (a representative of its equivalents), d, 2theta, multiplicity, |F|^2 and
    its intensity relative to the strongest line of the range (percent)."""

    hkl: tuple[int, int, int]
    d_A: float
    two_theta_deg: float
    multiplicity: int
    f_sq: float
    i_rel_pct: float


@dataclass(frozen=True)
class SimulatedPattern:
    """The lines of a structure in a 2theta range at one wavelength."""

    wavelength_A: float
    space_group: str
    reflections: tuple[Reflection, ...]

    @property
    def positions(self) -> np.ndarray:
        return np.array([r.two_theta_deg for r in self.reflections])

    @property
    def intensities(self) -> np.ndarray:
        return np.array([r.i_rel_pct for r in self.reflections])

    def profile(self, two_theta, fwhm_deg: float, zero_shift_deg: float = 0.0) -> np.ndarray:
        """The pattern on the grid ``two_theta`` (peak heights in percent of the strongest line's height)."""
        x = np.asarray(two_theta, dtype=float)
        y = np.zeros_like(x)
        for r in self.reflections:
            c = r.two_theta_deg + zero_shift_deg
            near = np.abs(x - c) < 40.0 * fwhm_deg
            y[near] += r.i_rel_pct * pseudo_voigt(x[near], c, fwhm_deg)
        return y


def _multiplicity(hkl: Sequence[int], ops: gemmi.GroupOps) -> int:
    """Equivalent reflections at the same d: the rotations of the group applied to hkl, and -hkl."""
    seen = set()
    for op in ops.sym_ops:
        h = tuple(op.apply_to_hkl(list(hkl)))
        seen.add(h)
        seen.add(tuple(-v for v in h))
    return len(seen)


def small_structure(cif: bytes) -> gemmi.SmallStructure:
    """The first block of ``cif`` with a cell and atoms, as a gemmi SmallStructure (errors name the line)."""
    from .crystal import _pick_block, _read_document  # one CIF reader for the project

    block = _pick_block(_read_document(cif))
    st = gemmi.make_small_structure_from_block(block)
    if st.spacegroup is None:
        raise AnalysisError("the CIF names no space group gemmi knows", field="file")
    if not st.sites:
        raise AnalysisError("the CIF has no atom sites", field="file")
    st.setup_cell_images()
    return st


def simulate(cif: bytes, *, wavelength_A: float, two_theta_min_deg: float = 2.0,
             two_theta_max_deg: float = 60.0) -> SimulatedPattern:
    """The powder lines of the structure in ``cif`` between two angles.

    Parameters
    ----------
    cif : bytes
        A CIF with cell, space group and atom sites (isotropic U or B used where given).
    wavelength_A : float
        X-ray wavelength, A.
    two_theta_min_deg, two_theta_max_deg : float
        The range, degrees.

    Returns
    -------
    SimulatedPattern
        Lines with I = m |F|^2 Lp, scaled to 100 for the strongest; lines below 0.01 % dropped.

    Raises
    ------
    AnalysisError
        An unreadable CIF, or a range that would hold more than :data:`MAX_REFLECTIONS` lines.
    """
    st = small_structure(cif)
    sg = st.spacegroup
    ops = sg.operations()
    top = min(two_theta_max_deg, 179.0)
    d_min = wavelength_A / (2.0 * math.sin(math.radians(top) / 2.0))
    d_max = wavelength_A / (2.0 * math.sin(math.radians(max(two_theta_min_deg, 0.1)) / 2.0))
    est = 4.0 / 3.0 * math.pi * st.cell.volume / d_min**3 / max(len(ops.sym_ops), 1)
    if est > MAX_REFLECTIONS:
        raise AnalysisError(f"the range up to {two_theta_max_deg:g} deg holds about {est:.0f} reflections of this "
                            f"cell, more than the {MAX_REFLECTIONS} simulated per pattern; measure or upload a "
                            "narrower range", field="file")
    hkls = gemmi.make_miller_array(st.cell, sg, d_min, d_max, True)
    calc = gemmi.StructureFactorCalculatorX(st.cell)
    rows = []
    for hkl in hkls:
        h = [int(v) for v in hkl]
        if ops.is_systematically_absent(h):
            continue
        d = st.cell.calculate_d(h)
        tt = float(two_theta_deg(d, wavelength_A))
        if not (two_theta_min_deg <= tt <= two_theta_max_deg):
            continue
        f_sq = abs(calc.calculate_sf_from_small_structure(st, h)) ** 2
        m = _multiplicity(h, ops)
        rows.append((tuple(h), d, tt, m, f_sq, m * f_sq * float(lorentz_polarisation(tt))))
    if not rows:
        return SimulatedPattern(wavelength_A, sg.hm, ())
    top_i = max(r[5] for r in rows) or 1.0
    refl = tuple(Reflection(r[0], r[1], r[2], r[3], r[4], 100.0 * r[5] / top_i)
                 for r in sorted(rows, key=lambda r: r[2]) if 100.0 * r[5] / top_i >= 0.01)
    return SimulatedPattern(wavelength_A, sg.hm, refl)


# --- the measured pattern -------------------------------------------------------------------------


def _grid(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """2theta and intensity sorted, duplicates averaged, checked."""
    for col in ("two_theta_deg", "intensity"):
        if col not in frame:
            raise AnalysisError(f"the file has no {col} column", field="file")
    df = frame[["two_theta_deg", "intensity"]].groupby("two_theta_deg", as_index=False).mean()
    x = df["two_theta_deg"].to_numpy(float)
    y = df["intensity"].to_numpy(float)
    if len(x) < MIN_POINTS:
        raise AnalysisError(f"the pattern has {len(x)} distinct angles; a powder pattern needs at least "
                            f"{MIN_POINTS}", field="file")
    if x[0] <= 0 or x[-1] >= 180:
        raise AnalysisError(f"2theta runs from {x[0]:g} to {x[-1]:g} deg; angles must lie between 0 and 180",
                            column="2theta")
    return x, y


def background(x: np.ndarray, y: np.ndarray, window_deg: float = 2.0) -> np.ndarray:
    """A running minimum over ``window_deg``, smoothed over the same window (a rolling-ball-like
    background; the window is wide against a peak and narrow against the amorphous hump)."""
    step = float(np.median(np.diff(x)))
    n = max(3, int(round(window_deg / step)) | 1)
    return uniform_filter1d(minimum_filter1d(y, n, mode="nearest"), n, mode="nearest")


@dataclass(frozen=True)
class MeasuredPeak(Result):
    two_theta_deg: float
    d_A: float
    i_rel_pct: float


def measured_peaks(x: np.ndarray, net: np.ndarray, wavelength_A: float, fwhm_deg: float) -> list[MeasuredPeak]:
    """Peaks of the background-subtracted pattern: prominence at least 5 noise standard deviations
    (noise from the median absolute point-to-point difference) and 1 % of the strongest."""
    step = float(np.median(np.diff(x)))
    noise = 1.4826 * float(np.median(np.abs(np.diff(net)))) / math.sqrt(2.0)
    top = float(net.max()) if net.size else 0.0
    if top <= 0:
        return []
    idx, _ = find_peaks(net, prominence=max(5.0 * noise, 0.01 * top), distance=max(1, int(0.5 * fwhm_deg / step)))
    peaks = []
    for i in idx:
        lo, hi = max(i - 2, 0), min(i + 3, len(x))
        if hi - lo >= 3:  # parabolic refinement of the apex over five points
            c = np.polyfit(x[lo:hi] - x[i], net[lo:hi], 2)
            xc = x[i] - c[1] / (2 * c[0]) if c[0] < 0 else x[i]
            xc = float(np.clip(xc, x[lo], x[hi - 1]))
        else:
            xc = float(x[i])
        peaks.append(MeasuredPeak(xc, float(d_spacing_A(xc, wavelength_A)), 100.0 * float(net[i]) / top))
    return peaks


@dataclass(frozen=True)
class ReferenceStructure:
    """A CIF registered for the compound: its measurement id, a label and its bytes."""

    measurement_id: int
    label: str
    cif: bytes


@dataclass(frozen=True)
class Comparison(Result):
    """The measured pattern against one simulated pattern."""

    reference: int
    reference_label: str
    space_group: str
    zero_shift_deg: float
    score: float
    rwp: float
    rexp: Optional[float]
    misfit: float
    matched_peaks: tuple[dict[str, Any], ...]
    unmatched_peaks: tuple[dict[str, Any], ...]
    missing_peaks: tuple[dict[str, Any], ...]
    verdict: str


def _ncc(a: np.ndarray, b: np.ndarray) -> float:
    na, nb = float(np.linalg.norm(a)), float(np.linalg.norm(b))
    return float(np.dot(a, b) / (na * nb)) if na > 0 and nb > 0 else 0.0


def compare(x: np.ndarray, net: np.ndarray, peaks: Sequence[MeasuredPeak], sim: SimulatedPattern, *,
            fwhm_deg: float, reference: int, label: str, weights: np.ndarray, counts: bool) -> Comparison:
    """Refine the zero shift (grid of 0.002 deg, then the best of the grid) and the scale, then match peaks."""
    shifts = np.arange(-MAX_ZERO_SHIFT_DEG, MAX_ZERO_SHIFT_DEG + 1e-9, 0.002)
    # the cross-correlation of shapes is computed on the simulated profile once, shifted by interpolation
    pad = MAX_ZERO_SHIFT_DEG + 1.0
    fine = np.arange(x[0] - pad, x[-1] + pad, min(0.002, float(np.median(np.diff(x)))))
    prof = sim.profile(fine, fwhm_deg)
    scores = [_ncc(net, np.interp(x - s, fine, prof)) for s in shifts]
    best = int(np.argmax(scores))
    shift = round(float(shifts[best]), 4)
    calc = np.interp(x - shift, fine, prof)
    scale = float(np.dot(weights * calc, net) / np.dot(weights * calc, calc)) if np.any(calc > 0) else 0.0
    resid = net - scale * calc
    denom = float(np.sum(weights * net**2))
    rwp = float(math.sqrt(np.sum(weights * resid**2) / denom)) if denom > 0 else float("nan")
    # the expected R of counting noise alone (weights 1/y: each point's variance is its count)
    rexp = float(math.sqrt(len(x) / denom)) if denom > 0 else float("nan")
    if counts:
        misfit = math.sqrt(max(rwp**2 - rexp**2, 0.0))
    else:
        rexp, misfit = None, rwp
    window = max(fwhm_deg, 0.05)
    visible = [r for r in sim.reflections if x[0] <= r.two_theta_deg + shift <= x[-1]]
    # the height each simulated line contributes at its own position (overlapping lines add up)
    matched, unmatched, used = [], [], set()
    for p in peaks:
        cands = [r for r in visible if abs(r.two_theta_deg + shift - p.two_theta_deg) <= window and r.i_rel_pct >= 0.5]
        if cands:
            r = max(cands, key=lambda r: r.i_rel_pct)
            used.update(id(c) for c in cands)
            matched.append({"two_theta_deg": p.two_theta_deg, "d_A": p.d_A, "i_rel_pct": p.i_rel_pct,
                            "hkl": "".join(f"{v} " for v in r.hkl).strip(),
                            "calc_two_theta_deg": r.two_theta_deg + shift, "calc_i_rel_pct": r.i_rel_pct})
        else:
            unmatched.append(p.to_dict())
    top_calc = max((float(np.interp(r.two_theta_deg + shift, x, calc)) for r in visible), default=0.0)
    missing = [{"hkl": " ".join(str(v) for v in r.hkl), "calc_two_theta_deg": r.two_theta_deg + shift,
                "calc_i_rel_pct": r.i_rel_pct} for r in visible
               if id(r) not in used and top_calc > 0
               and float(np.interp(r.two_theta_deg + shift, x, calc)) >= 0.2 * top_calc]
    score = float(scores[best])
    extra = [u for u in unmatched if u["i_rel_pct"] >= 100.0 * EXTRA_PEAK_REL]
    if misfit <= MATCH_MISFIT and not extra and not missing:
        verdict = "matches"
    elif misfit <= PARTIAL_MISFIT and extra and not missing:
        verdict = "extra_phase"
    else:
        verdict = "no_match"
    return Comparison(reference, label, sim.space_group, shift, score, rwp, rexp, misfit, tuple(matched), tuple(unmatched),
                      tuple(missing), verdict)


VERDICT_LABELS = {"matches": "matches the structure", "extra_phase": "extra phase present",
                  "no_match": "does not match"}


@dataclass(frozen=True)
class PxrdResult(Result):
    """Peaks of a powder pattern and its comparison with the best-matching registered structure."""

    wavelength_A: float
    temperature_K: Optional[float]
    fwhm_deg: float
    two_theta_min_deg: float
    two_theta_max_deg: float
    n_points: int
    peaks: tuple[dict[str, Any], ...]
    reference: Optional[int]
    reference_label: str
    space_group: str
    zero_shift_deg: Optional[float]
    score: Optional[float]
    rwp: Optional[float]
    rexp: Optional[float]
    misfit: Optional[float]
    matched_peaks: tuple[dict[str, Any], ...]
    unmatched_peaks: tuple[dict[str, Any], ...]
    missing_peaks: tuple[dict[str, Any], ...]
    candidates: tuple[dict[str, Any], ...]
    verdict: str
    flags: tuple[Flag, ...] = ()
    # plot arrays, not stored
    x: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]
    net: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]
    bkg: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]
    calc: Optional[np.ndarray] = field(default=None, repr=False)
    ticks: tuple[float, ...] = field(default=(), repr=False)
    JSON_OMIT = ("x", "net", "bkg", "calc", "ticks")


def analyse_pxrd(frame: pd.DataFrame, *, wavelength_A: float | None, temperature_K: float | None = None,
                 fwhm_deg: float | None = None, references: Sequence[ReferenceStructure] = ()) -> PxrdResult:
    """Peaks of a powder pattern and, for each registered structure, the simulated pattern compared.

    Parameters
    ----------
    frame : DataFrame
        Columns ``two_theta_deg`` and ``intensity`` (counts or arbitrary units).
    wavelength_A : float
        The wavelength, A (a named anode line is resolved by the caller with :func:`wavelength_from_text`).
    temperature_K : float, optional
        The measurement temperature.
    fwhm_deg : float, optional
        Peak width of the simulation (default :data:`DEFAULT_FWHM_DEG`).
    references : sequence of ReferenceStructure
        The CIFs registered for the compound; the one of lowest misfit becomes ``reference``.

    Returns
    -------
    PxrdResult
        ``verdict`` is that of the best reference ("" when no structure is registered).

    Raises
    ------
    AnalysisError
        No wavelength, too few points, angles outside (0, 180) deg, an unreadable reference CIF.
    """
    if wavelength_A is None:
        raise AnalysisError("no wavelength: add '# wavelength: 1.5406 angstrom' or '# wavelength: Cu Ka1' "
                            "to the file", field="wavelength")
    if not (0.1 <= wavelength_A <= 5.0):
        raise AnalysisError(f"wavelength {wavelength_A:g} A is not an X-ray wavelength (0.1-5 A)", field="wavelength")
    fwhm = float(fwhm_deg) if fwhm_deg else DEFAULT_FWHM_DEG
    if not (0.005 <= fwhm <= 2.0):
        raise AnalysisError(f"peak width {fwhm:g} deg is outside 0.005-2 deg", field="peak width")
    x, y = _grid(frame)
    bkg = background(x, y)
    net = np.clip(y - bkg, 0.0, None)  # the same as net_pattern(frame)
    # counting statistics: weights 1/y (y the total counts, floored at one count)
    counts = bool(np.all(y >= 0) and np.allclose(y, np.round(y)))
    weights = 1.0 / np.clip(y, 1.0, None) if counts else np.ones_like(y)
    peaks = measured_peaks(x, net, wavelength_A, fwhm)
    flags: list[Flag] = []
    comps: list[Comparison] = []
    for ref in references:
        sim = simulate(ref.cif, wavelength_A=wavelength_A, two_theta_min_deg=max(x[0] - 1.0, 0.5),
                       two_theta_max_deg=min(x[-1] + 1.0, 179.0))
        comps.append(compare(x, net, peaks, sim, fwhm_deg=fwhm, reference=ref.measurement_id, label=ref.label,
                             weights=weights, counts=counts))
    if not references:
        flags.append(Flag("no_structure", "no crystal structure is registered for this compound, so the pattern "
                                          "is not compared with one; peaks and d-spacings only"))
    best = min(comps, key=lambda c: c.misfit, default=None)
    calc = ticks = None
    if best is not None:
        sim = simulate(next(r.cif for r in references if r.measurement_id == best.reference), wavelength_A=wavelength_A,
                       two_theta_min_deg=max(x[0] - 1.0, 0.5), two_theta_max_deg=min(x[-1] + 1.0, 179.0))
        prof = sim.profile(x, fwhm, best.zero_shift_deg)
        scale = float(np.dot(weights * prof, net) / np.dot(weights * prof, prof)) if np.any(prof > 0) else 0.0
        calc = scale * prof
        ticks = tuple(r.two_theta_deg + best.zero_shift_deg for r in sim.reflections if x[0] <= r.two_theta_deg <= x[-1]
                      and r.i_rel_pct >= 0.5)
        if abs(best.zero_shift_deg) >= MAX_ZERO_SHIFT_DEG - 0.01:
            flags.append(Flag("zero_shift_at_limit", f"the refined zero shift reached the search limit of "
                                                     f"±{MAX_ZERO_SHIFT_DEG} deg; check the wavelength and the cell"))
    cands = tuple({"reference": c.reference, "reference_label": c.reference_label, "space_group": c.space_group,
                   "score": c.score, "rwp": c.rwp, "misfit": c.misfit, "zero_shift_deg": c.zero_shift_deg,
                   "verdict": c.verdict} for c in sorted(comps, key=lambda c: c.misfit))
    return PxrdResult(
        wavelength_A=float(wavelength_A), temperature_K=temperature_K, fwhm_deg=fwhm,
        two_theta_min_deg=float(x[0]), two_theta_max_deg=float(x[-1]), n_points=len(x),
        peaks=tuple(p.to_dict() for p in peaks),
        reference=best.reference if best else None, reference_label=best.reference_label if best else "",
        space_group=best.space_group if best else "", zero_shift_deg=best.zero_shift_deg if best else None,
        score=best.score if best else None, rwp=best.rwp if best else None, rexp=best.rexp if best else None,
        misfit=best.misfit if best else None,
        matched_peaks=best.matched_peaks if best else (), unmatched_peaks=best.unmatched_peaks if best else (),
        missing_peaks=best.missing_peaks if best else (), candidates=cands, verdict=best.verdict if best else "",
        flags=tuple(flags), x=x, net=net, bkg=bkg, calc=calc, ticks=ticks or (),
    )


# --- temperature-resolved sets --------------------------------------------------------------------

#: Two consecutive patterns of a temperature run whose shapes correlate below this are different
#: phases (our rule, set on synthetic patterns: one phase 20 K apart, with counting noise and thermal
#: expansion, correlates at 0.99 or more; two packings of one bowl molecule at about 0.91, as their
#: strongest low-angle lines share the column spacing).
SAME_PHASE_SCORE = 0.97


def net_pattern(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """2theta and the background-subtracted intensity, as :func:`analyse_pxrd` reads a pattern: the input of
    :func:`pattern_changes`."""
    x, y = _grid(frame)
    return x, np.clip(y - background(x, y), 0.0, None)


@dataclass(frozen=True)
class PatternChange(Result):
    """The pattern changes between two temperatures of a run: a transition for the phase model."""

    t_below_K: float
    t_above_K: float
    t_K: float
    score: float
    scan: str
    measurement_ids: tuple[int, int]


def pattern_changes(patterns: Sequence[tuple[int, float, np.ndarray, np.ndarray]], *, scan: str = "heating",
                    max_shift_deg: float = 0.3) -> list[PatternChange]:
    """Where the pattern of a variable-temperature set changes.

    ``patterns`` are (measurement id, temperature K, 2theta, net intensity). Consecutive patterns in
    temperature order are compared by normalised cross-correlation on their common range, after
    the best shift within ``max_shift_deg`` (thermal expansion moves lines without a transition);
    a correlation below :data:`SAME_PHASE_SCORE` is a change, placed midway between the two
    temperatures (the resolution is the temperature step).
    """
    ordered = sorted(patterns, key=lambda p: p[1])
    out: list[PatternChange] = []
    for (m1, t1, x1, y1), (m2, t2, x2, y2) in zip(ordered, ordered[1:]):
        lo, hi = max(x1[0], x2[0]), min(x1[-1], x2[-1])
        if hi - lo < 5.0:
            continue
        grid = np.arange(lo, hi, 0.01)
        a = np.interp(grid, x1, y1)
        shifts = np.arange(-max_shift_deg, max_shift_deg + 1e-9, 0.01)
        s = max(_ncc(a, np.interp(grid - d, x2, y2)) for d in shifts)
        if s < SAME_PHASE_SCORE:
            out.append(PatternChange(t1, t2, 0.5 * (t1 + t2), s, scan, (m1, m2)))
    return out
