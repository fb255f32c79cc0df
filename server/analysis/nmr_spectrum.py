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
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Optional

import numpy as np
from scipy.signal import find_peaks, peak_widths

from server.analysis.results import Flag, Result
from server.errors import AnalysisError

METHOD = ("Peak picking above 5 noise standard deviations, lines within 20 Hz grouped into signals and integrated "
          "over their regions (Friebolin 2010); residual solvent shifts from Gottlieb et al. (1997); expected "
          "environments from RDKit topological symmetry classes")
VERSION = "nmr_spectrum/1.0"

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
    peaks_ppm: tuple[float, ...]
    signals: tuple[NmrSignal, ...]
    signals_found: int  # signals of the sample (solvent, water and TMS not counted)
    environments_expected: Optional[int]
    element_count: Optional[int]  # atoms of the observed element in the structure (H count for 1H)
    flags: tuple[Flag, ...] = ()

    JSON_KEYS = ("nucleus", "solvent", "spectrometer_MHz", "t_K", "ppm_min", "ppm_max", "points", "noise_rel",
                 "peaks_ppm", "signals", "signals_found", "environments_expected", "element_count",
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
    lines_ppm = ppm[idx]
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
    for g, (lo, hi), area, centre, tag in zip(groups, bounds, areas, centres, tags):
        rel = area / sample_total if not tag and sample_total > 0 else None
        signals.append(NmrSignal(shift_ppm=round(centre, 4), from_ppm=round(float(lo), 4), to_ppm=round(float(hi), 4),
                                 lines=len(g), integral_rel=rel,
                                 n_H=rel * count if rel is not None and count else None, assigned=tag))
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
        peaks_ppm=tuple(round(float(v), 4) for v in lines_ppm[::-1]), signals=tuple(signals), signals_found=found,
        environments_expected=expected, element_count=count, flags=tuple(flags))
