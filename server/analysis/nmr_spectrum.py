"""1D NMR spectra: the chemical-shift axis, a peak list, signals with relative integrals, and the number of
chemically distinct environments the registered structure predicts, shown beside the number found.

The spectrum comes from a JCAMP-DX file (:mod:`server.ingest.jcamp`; the NMR labels are those of
A. N. Davies and P. Lampen, Appl. Spectrosc. 47, 1093-1099 (1993)). Lines are picked as local maxima of
the real spectrum standing out of the noise; lines closer than a coupling constant are one signal (a
multiplet), integrated over its own region as chemists do by hand (H. Friebolin, *Basic One- and
Two-Dimensional NMR Spectroscopy*, 5th ed., Wiley-VCH 2010, ch. 1). The residual solvent signal, its
water and TMS are named and left out of the integrals (shifts from H. E. Gottlieb, V. Kotlyar and
A. Nudelman, J. Org. Chem. 62, 7512-7515 (1997), recalled from memory).

The expected count is that of topologically symmetry-equivalent atoms of the observed element
(RDKit ``CanonicalRankAtoms(breakTies=False)``): it is a check, not proof. It counts diastereotopic
protons (the exo and endo H of a bowl's CH2 bridge, whose signals stay apart while inversion is slow) as
one environment and cannot know of accidental overlap, so "found" and "expected" may differ for a
correct structure; the result says so in a flag.

Multiplicity (:func:`multiplet`) follows the first-order rules: n equivalent neighbours split a signal into
n + 1 lines spaced by J with the binomial (Pascal's triangle) intensities, and two different couplings
to n1 and n2 protons make a tree of (n1 + 1)(n2 + 1) lines whose intensities are the convolution of the two
Pascal rows (a doublet of doublets, dt, td, tt, dq, qd, ...; Friebolin 2010, ch. 4, "first-order spectra";
T. D. W. Claridge, *High-Resolution NMR Techniques in Organic Chemistry*, 3rd ed., Elsevier 2016, ch. 2 and
4; named largest J first as in E. Pretsch et al., *Structure Determination of Organic Compounds*, 4th ed.,
Springer 2009; recalled from memory). Three different couplings make the next level of the same tree
(ddd, ddt, dtd, tdd, dtt, tdt, ttd, ttt), read by the same rules: T. R. Hoye, P. R. Hanson and J. R. Vos,
"A Practical Guide to First-Order Multiplet Analysis in 1H NMR Spectroscopy", J. Org. Chem. 59, 4096-4103
(1994), recalled from memory.
A pattern is called only when the lines are resolved, equally spaced within the digital resolution and
their intensities match the pattern; anything else is "m" with the reason, never a guess. J is the line
spacing in Hz (ppm times the observe frequency). Its standard uncertainty (per signal, ``j_err_Hz``) combines
in quadrature (GUM, JCGM 100:2008, 5.1.2) that of the line positions from the Lorentzian fit's covariance
(:func:`_fit_lines`, propagated linearly to each J) with the digital resolution's: the difference of two
positions each known to one data point (a rectangular distribution of one point's width, GUM 4.3.7:
u = Δ/√6; the spectrum's ``j_err_Hz``, which alone stands for a J a person enters).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from math import comb, sqrt
from typing import Optional

import numpy as np
from scipy.optimize import least_squares
from scipy.signal import find_peaks, peak_widths

from server.analysis.results import Flag, Result
from server.errors import AnalysisError

METHOD = ("Peak picking above 5 noise standard deviations, lines within 20 Hz grouped into signals and integrated "
          "over their regions (Friebolin 2010); multiplicity and J by the first-order rules (n + 1 lines, Pascal "
          "intensities; two-coupling trees dd, dt, td, tt, dq, qd, ... and three-coupling trees ddd, ddt, dtd, ...; Friebolin 2010, "
          "Claridge 2016, Hoye et al. 1994), otherwise m; J uncertainty from the Lorentzian line fit's covariance "
          "combined with the digital resolution; residual solvent shifts "
          "from Gottlieb et al. (1997); expected environments from RDKit topological symmetry classes")
VERSION = "nmr_spectrum/1.3"

#: A line must stand this many noise standard deviations above the baseline (common practice: a limit of
#: detection of 3 sigma, raised to 5 because a spectrum has thousands of points and 3 sigma noise spikes).
SNR_MIN = 5.0
#: Lines closer than this are one multiplet: proton-proton couplings rarely exceed 20 Hz (geminal 2J in
#: CH2 groups reach about 20 Hz; common practice, Friebolin ch. 3).
GROUP_HZ = 20.0
#: A signal's integration region reaches this many line half-widths beyond its outer lines (a Lorentzian
#: holds 94 % of its area within +-10 half-widths), clipped halfway to the neighbouring signal.
REGION_WIDTHS = 10.0
MAX_LINES = 400  # bounded work per upload: a spectrum with more picked lines is noise, not lines
#: Residual 1H signals of the usual deuterated solvents (ppm) and of water in them: Gottlieb, Kotlyar and
#: Nudelman, J. Org. Chem. 62, 7512 (1997), table 1 (values recalled from memory).
#: Solvent -> (residual signals, water signal or None).
SOLVENT_1H_PPM: dict[str, tuple[tuple[float, ...], Optional[float]]] = {
    "CDCl3": ((7.26,), 1.56), "CD2Cl2": ((5.32,), 1.52), "C6D6": ((7.16,), 0.40), "DMSO-d6": ((2.50,), 3.33),
    "acetone-d6": ((2.05,), 2.84), "CD3OD": ((3.31,), 4.87), "CD3CN": ((1.94,), 2.13), "D2O": ((4.79,), None),
    "toluene-d8": ((2.08, 6.97, 7.01, 7.09), 0.43), "THF-d8": ((1.72, 3.58), 2.46),
}
SOLVENT_TOLERANCE_PPM = 0.03
#: First-order patterns of n equivalent neighbours (n + 1 lines), named as journals print them.
BINOMIAL_NAMES = {1: "d", 2: "t", 3: "q", 4: "quint", 5: "sext", 6: "sept"}
#: Every multiplicity the analysis (and a person's edit) may give a signal: the first-order names, the
#: two-coupling trees, s and m (a multiplet: not first-order, or not resolved well enough for a call).
#: Two distinct couplings, each to 1-3 equivalent protons: a coupling tree of (n1 + 1) x (n2 + 1) lines named
#: by its splittings in order of falling J ("dt": a doublet of the larger J, each line a triplet of the
#: smaller), as journals print them (Friebolin 2010 ch. 4; Pretsch et al., *Structure Determination of
#: Organic Compounds*, 4th ed. 2009, ch. 5; recalled from memory). (name, n_large, n_small).
TREES = tuple((BINOMIAL_NAMES[a] + BINOMIAL_NAMES[b], a, b) for a in (1, 2, 3) for b in (1, 2, 3))
#: Three distinct couplings, each to one or two equivalent protons (ddd, ddt, dtd, tdd, dtt, tdt, ttd, ttt):
#: the same tree one level deeper, named largest J first ("ddt": doublets of the two larger J, triplets of the
#: smallest; T. R. Hoye, P. R. Hanson and J. R. Vos, "A Practical Guide to First-Order Multiplet Analysis in 1H
#: NMR Spectroscopy", J. Org. Chem. 59, 4096-4103 (1994); Friebolin 2010 ch. 4; recalled from memory).
#: (name, n_1, n_2, n_3) in order of falling J.
TREES3 = tuple((BINOMIAL_NAMES[a] + BINOMIAL_NAMES[b] + BINOMIAL_NAMES[c], a, b, c)
               for a in (1, 2) for b in (1, 2) for c in (1, 2))
MULTIPLICITIES = (("s", "d", "t", "q", "quint", "sext", "sept") + tuple(t[0] for t in TREES)
                  + tuple(t[0] for t in TREES3) + ("m",))
#: Lines closer than this many line widths (FWHM) are not resolved well enough for a call (two equal
#: Lorentzians show a dip from 0.58 FWHM apart; a whole width is asked for, common practice).
RESOLVED_FWHM = 1.0
#: A single line broader than this many times the spectrum's median line width may hide an unresolved
#: multiplet, so it is "m", not "s" (common practice: an unresolved multiplet and a broad singlet look alike).
BROAD_FACTOR = 2.0
#: Line intensities may differ from the pattern's by this fraction of its value: noise of a few per cent
#: and the roof effect of a weakly coupled pair (inner/outer about 1.2 at Δν/J = 10, the usual first-order
#: limit; Friebolin 2010 ch. 4) stay inside; a stronger roof or a different pattern does not (common practice).
INTENSITY_TOL = 0.25
#: Spacings are equal when they agree within this many data points (positions are interpolated to a
#: fraction of a point; two points leave room for noise and the pull of overlapping lines) or 3 % of J.
SPACING_POINTS = 2.0
SPACING_REL = 0.03
TMS_PPM = 0.0


@dataclass(frozen=True)
class NmrSignal(Result):
    """One signal: its centre (intensity-weighted mean of its lines), its region and its integral."""

    shift_ppm: float
    from_ppm: float
    to_ppm: float
    lines: int
    integral_rel: Optional[float]  # fraction of the sample's total (solvent and TMS left out); None for those
    n_H: Optional[float]  # integral scaled so the signals sum to the formula's count of the observed element
    assigned: str = ""  # "solvent residual", "water", "TMS" or "" (the sample)
    multiplicity: str = "m"  # one of MULTIPLICITIES
    j_Hz: tuple[float, ...] = ()  # coupling constants from the line spacings, largest first (none for s and m)
    #: each J's standard uncertainty: that of the line fit (:func:`_fit_lines`) and the digital resolution's
    #: (resolution / sqrt 6) combined in quadrature (GUM 5.1.2); empty without J
    j_err_Hz: tuple[float, ...] = ()
    pattern: str = ""  # why the pattern was called "m" (empty when a first-order pattern was found)
    #: the signal's extent: its outermost lines, downfield and upfield (a single line: its half-height
    #: points); a multiplet (m) is printed as this range, high to low (ACS guidelines, common practice)
    high_ppm: Optional[float] = None
    low_ppm: Optional[float] = None


@dataclass(frozen=True)
class Multiplet:
    """The first-order reading of one signal's lines."""

    multiplicity: str
    j_Hz: tuple[float, ...] = ()
    reason: str = ""
    #: standard uncertainty of each J from the line positions' covariance (empty when none was given)
    j_err_Hz: tuple[float, ...] = ()


def _matches(intensities: np.ndarray, expected: np.ndarray) -> bool:
    got = intensities / intensities.sum()
    want = expected / expected.sum()
    return bool(np.all(np.abs(got - want) <= INTENSITY_TOL * want))


def coupling_tree(couplings, *, merge_Hz: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The first-order coupling tree of one proton coupled to ``n_i`` equivalent protons by ``J_i`` for each
    ``(n_i, J_i)`` of ``couplings``: each coupling splits every line into n + 1 lines of the binomial
    intensities, so the tree is the convolution of the Pascal rows (Friebolin 2010, ch. 4, coupling trees;
    Hoye, Hanson and Vos, J. Org. Chem. 59, 4096 (1994)). Lines closer than ``merge_Hz`` stand as one (their
    intensities added, the position their weighted mean), as an unresolved coincidence appears in a spectrum.

    Returns (positions about the centre in Hz, intensities, and each line's coefficients of the J in its
    position, one column per coupling), sorted by position.
    """
    ns = [int(n) for n, _ in couplings]
    js = np.array([float(j) for _, j in couplings])
    grids = np.meshgrid(*[np.arange(n + 1) for n in ns], indexing="ij")
    coef = np.column_stack([(g - n / 2.0).ravel() for g, n in zip(grids, ns)])
    w = np.ones(coef.shape[0])
    for g, n in zip(grids, ns):
        w = w * np.array([comb(n, int(i)) for i in g.ravel()], dtype=float)
    pos = coef @ js
    order = np.argsort(pos, kind="stable")
    pos, w, coef = pos[order], w[order], coef[order]
    groups: list[list[int]] = []
    for i in range(pos.size):
        if groups and pos[i] - pos[groups[-1][-1]] < merge_Hz:
            groups[-1].append(i)
        else:
            groups.append([i])
    return (np.array([np.average(pos[g], weights=w[g]) for g in groups]), np.array([w[g].sum() for g in groups]),
            np.array([np.average(coef[g], axis=0, weights=w[g]) for g in groups]))


def tree_lines(n_large: int, j_large_Hz: float, n_small: int, j_small_Hz: float, *,
               merge_Hz: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The two-coupling tree of :func:`coupling_tree`: (positions about the centre in Hz, intensities, and each
    line's coefficients of J_large and of J_small in its position), sorted by position."""
    pos, w, coef = coupling_tree(((n_large, j_large_Hz), (n_small, j_small_Hz)), merge_Hz=merge_Hz)
    return pos, w, coef[:, 0], coef[:, 1]


def _j_errors(projection: np.ndarray, cov_Hz2: Optional[np.ndarray]) -> tuple[float, ...]:
    """Standard uncertainties of J = projection @ positions from the positions' covariance (linear propagation,
    GUM 5.2 with correlations); empty without a covariance."""
    if cov_Hz2 is None:
        return ()
    var = np.einsum("ij,jk,ik->i", projection, cov_Hz2, projection)
    return tuple(float(np.sqrt(max(v, 0.0))) for v in var)


def _trees(x: np.ndarray, h: np.ndarray, *, merge_Hz: float, tol_Hz: float,
           cov_Hz2: Optional[np.ndarray] = None) -> list[Multiplet]:
    """Every two- and three-coupling tree (:data:`TREES`, :data:`TREES3`) that the lines ``x`` (Hz, sorted) with
    heights ``h`` fit.

    The outermost line's nearest neighbour lies one J_smallest away and other lines one of each larger J
    away, so the smallest J starts from the first spacing and each larger J from a distance to the first
    line (every ordered choice of them). For each start the tree's lines are laid over the observed ones in
    order; the centre and the J are then refined by linear least squares (each position is centre + Σ c_i
    J_i), and the tree fits when it has as many lines as observed, every position agrees within ``tol_Hz``,
    each J exceeds the next smaller by more than that (otherwise the lines are a simpler pattern) and the
    intensities match the convolved Pascal rows within :data:`INTENSITY_TOL` (Hoye, Hanson and Vos 1994:
    a first-order multiplet is called from its line positions and intensities, never from a count alone).
    """
    from itertools import combinations

    n = x.size
    found: dict[str, Multiplet] = {}
    j_small0 = float(x[1] - x[0])
    shapes = [(t[0], t[1:]) for t in TREES] + [(t[0], t[1:]) for t in TREES3]
    for name, ns in shapes:
        if int(np.prod([k + 1 for k in ns])) < n or name in found:
            continue
        for ks in combinations(range(1, n), len(ns) - 1):
            starts = [float(x[k] - x[0]) for k in reversed(ks)] + [j_small0]
            if any(a <= b + tol_Hz for a, b in zip(starts, starts[1:])):
                continue
            pos, _, coef = coupling_tree(tuple(zip(ns, starts)), merge_Hz=merge_Hz)
            if pos.size != n:
                continue
            design = np.column_stack([np.ones(n), coef])
            if np.linalg.matrix_rank(design) < design.shape[1]:
                continue
            projection = np.linalg.pinv(design)
            sol = projection @ x
            js = sol[1:]
            if js[-1] <= 0 or any(a <= b + tol_Hz for a, b in zip(js, js[1:])):
                continue
            pos, w, _ = coupling_tree(tuple(zip(ns, js)), merge_Hz=merge_Hz)
            if pos.size != n or np.max(np.abs(x - sol[0] - pos)) > tol_Hz or not _matches(h, w):
                continue
            found[name] = Multiplet(name, tuple(float(j) for j in js), j_err_Hz=_j_errors(projection[1:], cov_Hz2))
            break
    return list(found.values())


def multiplet(lines_Hz, heights, fwhm_Hz: float, *, resolution_Hz: float,
              reference_fwhm_Hz: Optional[float] = None, cov_Hz2=None) -> Multiplet:
    """The first-order multiplicity of one signal from its lines, or "m" with the reason.

    Parameters
    ----------
    lines_Hz, heights : sequences
        Line positions (Hz, any origin) and heights (overlap removed) of the signal's resolved lines.
    fwhm_Hz : float
        The lines' full width at half height (Hz).
    resolution_Hz : float
        Digital resolution: the spacing of the data points (Hz per point).
    reference_fwhm_Hz : float, optional
        The typical width of the spectrum's other lines: a single line much broader than it is "m", not "s".
    cov_Hz2 : array, optional
        Covariance matrix (Hz²) of ``lines_Hz`` (from the least-squares fit of the lines): each J's standard
        uncertainty follows by linear propagation (``j_err_Hz``); without it ``j_err_Hz`` is empty.

    Returns
    -------
    Multiplet
        ``s``; ``d``, ``t``, ``q``, ``quint``, ``sext``, ``sept`` (n + 1 equally spaced lines with the binomial
        intensities of n equivalent neighbours, J = span / n); a two-coupling tree of :data:`TREES`
        (``dd``, ``dt``, ``td``, ``tt``, ``dq``, ``qd``, ...: the convolution of two Pascal rows, lines that
        coincide merged, :func:`tree_lines`) or a three-coupling tree of :data:`TREES3` (``ddd``, ``ddt``,
        ``dtd``, ...), J largest first; ``m`` when no pattern or more than one fits.

    References
    ----------
    H. Friebolin, *Basic One- and Two-Dimensional NMR Spectroscopy*, 5th ed., Wiley-VCH 2010, ch. 4
    (first-order spectra, the n + 1 rule, Pascal's triangle); T. D. W. Claridge, *High-Resolution NMR
    Techniques in Organic Chemistry*, 3rd ed., Elsevier 2016, ch. 4 (coupling trees, the doublet of doublets);
    E. Pretsch, P. Bühlmann and M. Badertscher, *Structure Determination of Organic Compounds*, 4th ed.,
    Springer 2009, ch. 5 (first-order multiplets named by their splittings, largest J first); T. R. Hoye,
    P. R. Hanson and J. R. Vos, J. Org. Chem. 59, 4096-4103 (1994) (first-order multiplet analysis of
    three-coupling patterns such as ddd and ddt). Recalled from memory.
    """
    x = np.asarray(lines_Hz, dtype=float)
    order = np.argsort(x)
    x, h = x[order], np.asarray(heights, dtype=float)[order]
    cov = None if cov_Hz2 is None else np.asarray(cov_Hz2, dtype=float)[np.ix_(order, order)]
    n = x.size
    if n == 1:
        if reference_fwhm_Hz and fwhm_Hz > BROAD_FACTOR * reference_fwhm_Hz:
            return Multiplet("m", reason=f"one line {fwhm_Hz:.1f} Hz wide, over {BROAD_FACTOR:g} times the "
                                         "spectrum's lines: an unresolved multiplet cannot be told from a broad singlet")
        return Multiplet("s")
    if np.any(h <= 0):
        return Multiplet("m", reason="overlapping lines: their heights cannot be separated")
    gaps = np.diff(x)
    if gaps.min() < RESOLVED_FWHM * fwhm_Hz:
        return Multiplet("m", reason=f"lines {gaps.min():.1f} Hz apart, closer than their width ({fwhm_Hz:.1f} Hz): "
                                     "not resolved for a call")

    def equal(a, b) -> bool:
        return abs(a - b) <= max(SPACING_POINTS * resolution_Hz, SPACING_REL * max(a, b))

    if n - 1 in BINOMIAL_NAMES and all(equal(g, gaps.mean()) for g in gaps):
        if _matches(h, np.array([comb(n - 1, k) for k in range(n)], dtype=float)):
            span = np.zeros((1, n))
            span[0, 0], span[0, -1] = -1.0 / (n - 1), 1.0 / (n - 1)
            return Multiplet(BINOMIAL_NAMES[n - 1], (float((x[-1] - x[0]) / (n - 1)),), j_err_Hz=_j_errors(span, cov))
    trees = _trees(x, h, merge_Hz=RESOLVED_FWHM * fwhm_Hz,
                   tol_Hz=max(SPACING_POINTS * resolution_Hz, SPACING_REL * float(gaps[0])), cov_Hz2=cov)
    if len({t.multiplicity for t in trees}) == 1:
        return trees[0]
    if trees:
        return Multiplet("m", reason=f"{n} lines fit both {' and '.join(sorted({t.multiplicity for t in trees}))}: "
                                     "the pattern cannot be called")
    return Multiplet("m", reason=f"{n} lines in no first-order pattern (spacings "
                                 f"{', '.join(f'{g:.1f}' for g in gaps)} Hz, intensities "
                                 f"{':'.join(f'{v:.2f}' for v in h / h.max())})")


@dataclass(frozen=True)
class NmrSpectrumResult(Result):
    nucleus: Optional[str]
    solvent: Optional[str]
    spectrometer_MHz: Optional[float]
    t_K: Optional[float]
    ppm_min: float
    ppm_max: float
    points: int
    noise_rel: float  # noise standard deviation over the tallest line
    resolution_Hz: Optional[float]  # digital resolution (Hz per point); None without a frequency
    j_err_Hz: Optional[float]  # standard uncertainty of a J from two line positions (resolution / sqrt 6)
    peaks_ppm: tuple[float, ...]
    signals: tuple[NmrSignal, ...]
    signals_found: int  # signals of the sample (solvent, water and TMS not counted)
    environments_expected: Optional[int]
    element_count: Optional[int]  # atoms of the observed element in the structure (H count for 1H)
    flags: tuple[Flag, ...] = ()

    JSON_KEYS = ("nucleus", "solvent", "spectrometer_MHz", "t_K", "ppm_min", "ppm_max", "points", "noise_rel",
                 "resolution_Hz", "j_err_Hz", "peaks_ppm", "signals", "signals_found", "environments_expected", "element_count",
                 "environments_check", "flags")

    @property
    def environments_check(self) -> Optional[str]:
        """``"as expected"``, ``"fewer than expected"`` or ``"more than expected"`` (None without a structure)."""
        if self.environments_expected is None:
            return None
        n, e = self.signals_found, self.environments_expected
        return "as expected" if n == e else "fewer than expected" if n < e else "more than expected"


def element_of(nucleus: Optional[str]) -> str:
    """``^1H``, ``1H``, ``H1`` -> ``H``; ``13C`` -> ``C``. The standard writes the mass number as ``^1H``."""
    text = re.sub(r"[\^\s]", "", nucleus or "1H")
    m = re.fullmatch(r"(\d*)([A-Z][a-z]?)(\d*)", text)
    if not m:
        raise AnalysisError(f"nucleus {nucleus!r} is not a nucleus such as 1H or 13C", field="nucleus")
    return m.group(2)


def expected_environments(smiles: str, element: str = "H") -> tuple[int, int]:
    """(distinct environments, atoms) of ``element`` in the structure: atoms of one topological symmetry
    class (RDKit canonical ranks with ties kept) count once.

    Notes
    -----
    Topological symmetry is the textbook first count of NMR environments (e.g. ethanol 3, toluene 4,
    p-xylene 2 for 1H). It ignores diastereotopicity, conformational exchange and accidental overlap.
    """
    from rdkit import Chem

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise AnalysisError(f"the registered structure {smiles!r} cannot be read", field="smiles")
    mol = Chem.AddHs(mol)
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    atoms = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == element]
    return len({ranks[i] for i in atoms}), len(atoms)


def to_ppm(x: np.ndarray, x_units: str, spectrometer_MHz: Optional[float]) -> np.ndarray:
    """The abscissa in ppm: as written for ``PPM``; Hz from the reference over the observe frequency (MHz)."""
    units = (x_units or "").strip().upper()
    if units == "PPM":
        return np.asarray(x, dtype=float)
    if units == "HZ":
        if not spectrometer_MHz:
            raise AnalysisError("the spectrum's X axis is in Hz and no spectrometer frequency is known: the file "
                                "needs ##.OBSERVE FREQUENCY= or the form a 'spectrometer' value", field="spectrometer")
        return np.asarray(x, dtype=float) / spectrometer_MHz
    raise AnalysisError(f"##XUNITS= {x_units!r}: an NMR spectrum's axis must be in PPM or HZ", field="XUNITS")


def noise_sd(y: np.ndarray) -> float:
    """Noise standard deviation from the point-to-point differences (robust: 1.4826 MAD / sqrt 2), which
    lines of many points barely affect (the median absolute deviation, Hampel 1974)."""
    d = np.diff(y)
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / np.sqrt(2.0))


def _baseline(y: np.ndarray, sd: float) -> float:
    """The median of the points within 3 sd of the overall median (signal-free points)."""
    med = float(np.median(y))
    quiet = y[np.abs(y - med) < 3 * sd]
    return float(np.median(quiet)) if quiet.size else med


def _assigned(shift: float, solvent: Optional[str], nucleus_element: str) -> str:
    if nucleus_element != "H":
        return ""
    if abs(shift - TMS_PPM) <= SOLVENT_TOLERANCE_PPM:
        return "TMS"
    known = SOLVENT_1H_PPM.get(_solvent_key(solvent))
    if known:
        residual, water = known
        if any(abs(shift - s) <= SOLVENT_TOLERANCE_PPM for s in residual):
            return "solvent residual"
        if water is not None and abs(shift - water) <= SOLVENT_TOLERANCE_PPM:
            return "water"
    return ""


def _solvent_key(solvent: Optional[str]) -> str:
    norm = re.sub(r"[\s_]", "", (solvent or "")).lower()
    for key in SOLVENT_1H_PPM:
        if key.lower() == norm or key.lower().replace("-", "") == norm.replace("-", ""):
            return key
    aliases = {"chloroform-d": "CDCl3", "dmso": "DMSO-d6", "methanol-d4": "CD3OD", "benzene-d6": "C6D6"}
    return aliases.get(norm, "")


def _interpolated(ppm: np.ndarray, y: np.ndarray, idx: np.ndarray, half_points: np.ndarray) -> np.ndarray:
    """Line positions between the data points: the vertex of the parabola fitted by least squares to each
    maximum and the points within a quarter of its width on either side (at least one; the three-point
    interpolation of peak pickers, widened so a finely sampled line's noise averages out; common practice)."""
    out = ppm[idx].astype(float)
    step = float(np.diff(ppm).mean()) if ppm.size > 1 else 0.0
    for n, (i, hp) in enumerate(zip(idx, half_points)):
        k = max(1, int(hp / 4))
        lo, hi = max(0, i - k), min(y.size, i + k + 1)
        if hi - lo < 3:
            continue
        t = np.arange(lo, hi) - i
        c2, c1, _ = np.polyfit(t, y[lo:hi], 2)
        if c2 < 0:
            out[n] = ppm[i] + float(np.clip(-c1 / (2 * c2), -k, k)) * step
    return out


def _lorentzians(x_Hz: np.ndarray, centres_Hz: np.ndarray, fwhm_Hz: float) -> np.ndarray:
    return 1.0 / (1.0 + ((x_Hz[:, None] - centres_Hz[None, :]) / (fwhm_Hz / 2.0)) ** 2)


def _fit_lines(hz: np.ndarray, yb: np.ndarray, lines_Hz: np.ndarray,
               fwhm_Hz: float) -> tuple[np.ndarray, np.ndarray, float, Optional[np.ndarray]]:
    """(positions, heights, common FWHM, covariance of the positions in Hz²) of one signal's lines by least
    squares of a sum of Lorentzians of one width over every point within three widths of the lines (started
    from the picked lines): partly overlapping lines pull each other's maxima, the fit does not, and the
    noise of single points averages out (Levenberg-Marquardt-type fit, scipy.optimize.least_squares).

    The covariance is the least-squares one, s² (JᵀJ)⁻¹ with J the Jacobian at the solution and s² the
    residual variance (W. H. Press et al., *Numerical Recipes*, 3rd ed., Cambridge 2007, 15.5; GUM
    annex H.3 for a fitted line): it assumes independent noise from point to point, as in a spectrum that is
    not zero-filled; zero-filling and apodisation correlate neighbouring points and make it an
    underestimate (common practice; the digital resolution is combined with it for the printed digits).
    None when the fit failed, a line sits on its bound or the normal matrix is singular."""
    sel = (hz >= lines_Hz.min() - 3 * fwhm_Hz) & (hz <= lines_Hz.max() + 3 * fwhm_Hz)
    x, yv = hz[sel], yb[sel]
    n = lines_Hz.size
    if x.size < 2 * n + 2 or fwhm_Hz <= 0:
        return lines_Hz, np.interp(lines_Hz, hz, yb), fwhm_Hz, None
    start_amps = np.linalg.lstsq(_lorentzians(x, lines_Hz, fwhm_Hz), yv, rcond=None)[0]

    def resid(p):
        return _lorentzians(x, p[:n], p[-1]) @ p[n:2 * n] - yv

    try:
        fit = least_squares(resid, np.concatenate([lines_Hz, start_amps, [fwhm_Hz]]), method="trf",
                            bounds=(np.concatenate([lines_Hz - fwhm_Hz, np.full(n, -np.inf), [fwhm_Hz / 4]]),
                                    np.concatenate([lines_Hz + fwhm_Hz, np.full(n, np.inf), [fwhm_Hz * 4]])),
                            max_nfev=200)
    except (ValueError, np.linalg.LinAlgError):
        return lines_Hz, start_amps, fwhm_Hz, None
    order = np.argsort(fit.x[:n])
    cov = None
    if not np.any(fit.active_mask[:n]) and x.size > fit.x.size:
        s2 = 2.0 * float(fit.cost) / (x.size - fit.x.size)
        try:
            cov = s2 * np.linalg.inv(fit.jac.T @ fit.jac)[:n, :n][np.ix_(order, order)]
        except np.linalg.LinAlgError:
            cov = None
    return fit.x[:n][order], fit.x[n:2 * n][order], float(fit.x[-1]), cov


def _hidden_line(hz: np.ndarray, yb: np.ndarray, sd: float, lines_Hz: np.ndarray, amps: np.ndarray,
                 fwhm_Hz: float, j_Hz: float) -> Optional[float]:
    """Where a line of the next larger pattern could stand, one J beyond either outer line, hidden below the
    detection limit: the mean of the points within a quarter width there, less the tails of the found lines,
    standing over 3 standard errors of that mean. Returns its position (Hz) or None."""
    for pos in (lines_Hz.min() - j_Hz, lines_Hz.max() + j_Hz):
        sel = np.abs(hz - pos) <= fwhm_Hz / 4
        if not sel.any():
            continue
        rest = yb[sel] - _lorentzians(hz[sel], lines_Hz, fwhm_Hz) @ amps
        if rest.mean() > 3 * sd / np.sqrt(sel.sum()):
            return float(pos)
    return None


def _pattern(hz: np.ndarray, yb: np.ndarray, sd: float, lines_Hz: np.ndarray, fwhm_Hz: float, resolution_Hz: float,
             reference_fwhm_Hz: float) -> Multiplet:
    """:func:`multiplet` of one signal's lines read from the spectrum, and "m" when a line of a larger pattern
    may hide in the noise beside it (a quartet whose outer lines are lost reads as a doublet)."""
    cov = None
    if lines_Hz.size > 1:
        lines_Hz, amps, fwhm_Hz, cov = _fit_lines(hz, yb, lines_Hz, fwhm_Hz)
    else:
        amps = np.interp(lines_Hz, hz, yb)
    pat = multiplet(lines_Hz, amps, fwhm_Hz, resolution_Hz=resolution_Hz, reference_fwhm_Hz=reference_fwhm_Hz,
                    cov_Hz2=cov)
    if pat.j_Hz and reference_fwhm_Hz and fwhm_Hz > BROAD_FACTOR * reference_fwhm_Hz:
        # each line of the pattern may itself be an unresolved multiplet (a ddt whose small triplet splitting
        # is under the line width reads as a dd of broad lines): as for a broad single line, no call
        return Multiplet("m", reason=f"read as {pat.multiplicity}, but its lines are {fwhm_Hz:.1f} Hz wide, over "
                                     f"{BROAD_FACTOR:g} times the spectrum's: a further coupling may be unresolved")
    if pat.j_Hz:
        hidden = _hidden_line(hz, yb, sd, lines_Hz, amps, fwhm_Hz, min(pat.j_Hz))
        if hidden is not None:
            return Multiplet("m", reason=f"read as {pat.multiplicity}, but a line may hide in the noise "
                                         f"{min(pat.j_Hz):.1f} Hz beyond it: the pattern cannot be called")
    return pat


def _groups(lines: np.ndarray, group_ppm: float) -> list[list[int]]:
    """Indices into ``lines`` (sorted by shift) grouped where neighbours are within ``group_ppm``."""
    out: list[list[int]] = []
    for i in range(lines.size):
        if out and lines[i] - lines[out[-1][-1]] <= group_ppm:
            out[-1].append(i)
        else:
            out.append([i])
    return out


def analyse_nmr_spectrum(ppm: np.ndarray, y: np.ndarray, *, nucleus: Optional[str] = None,
                         solvent: Optional[str] = None, spectrometer_MHz: Optional[float] = None,
                         t_K: Optional[float] = None, smiles: Optional[str] = None) -> NmrSpectrumResult:
    """Peak list, signals, relative integrals and the environment check of one real 1D spectrum.

    Parameters
    ----------
    ppm, y : arrays
        Chemical shift (ppm, either order) and intensity (any unit) of the real spectrum, phased.
    nucleus, solvent, spectrometer_MHz, t_K : optional
        The conditions as stated (stored and shown); ``spectrometer_MHz`` turns the 20 Hz grouping into ppm
        (400 MHz assumed when unknown, flagged).
    smiles : str, optional
        The registered structure: the expected environments of the observed element and the scale of ``n_H``.

    Returns
    -------
    NmrSpectrumResult

    Notes
    -----
    Integrals assume a flat, phased baseline (the median of the signal-free points is subtracted) and full
    relaxation between scans; neither is checked, so integrals are as good as the acquisition.
    """
    ppm, y = np.asarray(ppm, dtype=float), np.asarray(y, dtype=float)
    if ppm.size < 16 or ppm.size != y.size:
        raise AnalysisError(f"a spectrum needs at least 16 points with one intensity each (got {ppm.size})")
    if not np.all(np.isfinite(y)):
        raise AnalysisError("the spectrum holds intensities that are not numbers")
    order = np.argsort(ppm)
    ppm, y = ppm[order], y[order]
    flags: list[Flag] = []
    element = element_of(nucleus)
    mhz = spectrometer_MHz
    if not mhz:
        mhz = 400.0
        flags.append(Flag("frequency_assumed", "no spectrometer frequency was given: lines within 20 Hz were "
                                               "grouped as if it were 400 MHz"))
    sd = noise_sd(y)
    base = _baseline(y, sd)
    yb = y - base
    top = float(yb.max())
    if top <= 0 or (sd > 0 and top < SNR_MIN * sd):
        raise AnalysisError("the spectrum has no line standing out of its noise")
    idx, _ = find_peaks(yb, height=SNR_MIN * sd if sd > 0 else 0.01 * top, prominence=SNR_MIN * sd if sd > 0 else None)
    if idx.size > MAX_LINES:
        raise AnalysisError(f"{idx.size} lines stand out of the noise (at most {MAX_LINES} are read): the "
                            "spectrum is not phased or not baseline-corrected")
    half = peak_widths(yb, idx, rel_height=0.5)[0]  # in points
    step = float(np.median(np.diff(ppm)))
    lines_ppm = _interpolated(ppm, yb, idx, half)
    groups = _groups(lines_ppm, GROUP_HZ / mhz)
    # regions: +-REGION_WIDTHS half-widths around the outer lines, clipped halfway to the neighbours
    bounds = []
    for g in groups:
        w = float(max(half[g])) * step / 2.0
        bounds.append([lines_ppm[g[0]] - REGION_WIDTHS * w, lines_ppm[g[-1]] + REGION_WIDTHS * w])
    for k in range(len(bounds) - 1):
        if bounds[k][1] > bounds[k + 1][0]:
            mid = (lines_ppm[groups[k][-1]] + lines_ppm[groups[k + 1][0]]) / 2.0
            bounds[k][1] = bounds[k + 1][0] = mid
    fwhm_hz = half * step * mhz
    resolution = step * mhz

    def reference_fwhm(g: list[int]) -> float:
        """The typical width of the other signals' lines: a signal's own broad line must not set the scale
        it is judged by (with two signals a median over all lines could never call one of them broad)."""
        others = np.delete(fwhm_hz, g)
        return float(np.median(others if others.size else fwhm_hz))

    patterns = [_pattern(ppm * mhz, yb, sd, lines_ppm[g] * mhz, float(np.median(fwhm_hz[g])), resolution,
                         reference_fwhm(g)) for g in groups]
    areas, centres, tags = [], [], []
    for g, (lo, hi) in zip(groups, bounds):
        sel = (ppm >= lo) & (ppm <= hi)
        areas.append(float(np.trapezoid(yb[sel], ppm[sel])) if sel.sum() > 1 else 0.0)
        heights = yb[idx[g]]
        centre = float(np.sum(lines_ppm[g] * heights) / np.sum(heights))
        centres.append(centre)
        tags.append(_assigned(centre, solvent, element))
    sample_total = sum(a for a, t in zip(areas, tags) if not t)
    expected = count = None
    if smiles:
        expected, count = expected_environments(smiles, element)
    signals = []
    for g, (lo, hi), area, centre, tag, pat in zip(groups, bounds, areas, centres, tags, patterns):
        rel = area / sample_total if not tag and sample_total > 0 else None
        j = tuple(round(v, 3) for v in pat.j_Hz) if spectrometer_MHz else ()  # no J in Hz without the frequency
        u_res = resolution / sqrt(6.0)
        j_err = tuple(round(float(np.hypot(u, u_res)), 4) for u in (pat.j_err_Hz or (0.0,) * len(j)))[:len(j)]
        half_ppm = float(max(half[g])) * step / 2.0 if len(g) == 1 else 0.0
        signals.append(NmrSignal(shift_ppm=round(centre, 4), from_ppm=round(float(lo), 4), to_ppm=round(float(hi), 4),
                                 lines=len(g), integral_rel=rel,
                                 n_H=rel * count if rel is not None and count else None, assigned=tag,
                                 multiplicity=pat.multiplicity, j_Hz=j, j_err_Hz=j_err, pattern=pat.reason,
                                 high_ppm=round(float(lines_ppm[g[-1]]) + half_ppm, 4),
                                 low_ppm=round(float(lines_ppm[g[0]]) - half_ppm, 4)))
    signals.sort(key=lambda s: -s.shift_ppm)  # as printed: downfield first
    found = sum(1 for s in signals if not s.assigned)
    if expected is not None and found != expected:
        flags.append(Flag("environments_differ",
                          f"{found} signals found, {expected} environments expected from the structure's topological "
                          "symmetry: a check, not proof (diastereotopic protons, slow exchange and overlapping "
                          "signals make the counts differ for a correct structure)"))
    if found == 0:
        flags.append(Flag("no_sample_signal", "every signal above the noise is solvent, water or TMS"))
    if element == "H" and solvent and not _solvent_key(solvent):
        flags.append(Flag("solvent_unknown", f"solvent {solvent!r} is not in the residual-signal table: its "
                                             "residual signal, if any, is counted as the sample's"))
    return NmrSpectrumResult(
        nucleus=nucleus, solvent=solvent, spectrometer_MHz=spectrometer_MHz, t_K=t_K,
        ppm_min=float(ppm[0]), ppm_max=float(ppm[-1]), points=int(ppm.size), noise_rel=sd / top,
        resolution_Hz=resolution if spectrometer_MHz else None,
        j_err_Hz=resolution / sqrt(6.0) if spectrometer_MHz else None,
        peaks_ppm=tuple(round(float(v), 4) for v in lines_ppm[::-1]), signals=tuple(signals), signals_found=found,
        environments_expected=expected, element_count=count, flags=tuple(flags))


def integrate_regions(ppm: np.ndarray, y: np.ndarray, regions: list[tuple[float, float]]) -> list[float]:
    """Areas (intensity x ppm) of ``regions`` ((from, to) ppm) of the spectrum, over the baseline that
    :func:`analyse_nmr_spectrum` subtracts: a person's regions integrated as the automatic ones are."""
    ppm, y = np.asarray(ppm, dtype=float), np.asarray(y, dtype=float)
    order = np.argsort(ppm)
    ppm, y = ppm[order], y[order]
    yb = y - _baseline(y, noise_sd(y))
    out = []
    for lo, hi in regions:
        sel = (ppm >= lo) & (ppm <= hi)
        out.append(float(np.trapezoid(yb[sel], ppm[sel])) if sel.sum() > 1 else 0.0)
    return out

