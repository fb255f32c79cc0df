"""High-resolution mass spectra: calculated against found m/z of the claimed ion, and the isotope cluster.

Method
------
* The ion's m/z is the monoisotopic mass of the molecule plus the adduct, minus (cations) or plus
  (anions) one electron mass, divided by |z| = 1: e.g. [M+H]+ = M + m(1H) - m(e), [M+Cl]- = M + m(35Cl)
  + m(e). Masses: :mod:`server.analysis.composition` (NIST/IUPAC isotope masses via RDKit, CODATA
  electron mass). Leaving out the electron mass shifts m/z by 0.55 mu, 1.2 ppm at m/z 450 (A. G.
  Brenton and A. R. Godfrey, "Accurate mass measurement: terminology and treatment of data", J. Am.
  Soc. Mass Spectrom. 21, 1821 (2010)).
* Found m/z: the strongest observed peak within 0.5 of the calculated monoisotopic m/z (profile data
  are first reduced to peaks, each centred by Gaussian three-point interpolation of its apex). Error in ppm = (found - calc) / calc x 1e6; pass when |error| <= the tolerance, 5 ppm unless
  the file says otherwise (common practice; several journals' author guidelines ask for 5 ppm).
* Isotope cluster: the calculated cluster (:func:`server.analysis.composition.isotope_cluster`, peaks
  >= 1 % of the strongest) is matched peak by peak with the strongest observed peak within 0.4 of each
  calculated m/z, and so are the positions one to four nucleons below and two above it (calculated zero);
  the score is the cosine similarity of the two intensity vectors (1: same shape; a missing peak counts as
  zero, an unexpected one at a position of zero calculated intensity lowers the score). A score below 0.90 is flagged (our threshold, chosen so that a wrong
  S or Se count, which moves the M+2 peak by tens of percent, always falls below it).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Optional

import numpy as np
import pandas as pd
from scipy.signal import find_peaks

from server.analysis.composition import ELECTRON_MASS_U, add_counts, isotope_cluster, monoisotopic_mass_u
from server.analysis.crystal import hill_formula, parse_formula
from server.analysis.results import Flag, Result
from server.errors import AnalysisError

METHOD = ("Calculated m/z of the claimed ion from monoisotopic masses with the electron mass (Brenton and Godfrey, "
          "J. Am. Soc. Mass Spectrom. 21, 1821 (2010)); isotope cluster by convolution of natural abundances "
          "(Yergey 1983) compared by cosine score")
VERSION = "hrms/1.0"

DEFAULT_TOLERANCE_PPM = 5.0  # common practice
ISOTOPE_SCORE_MIN = 0.90  # our threshold (see the module docstring)
MATCH_WINDOW = 0.5  # m/z units around a calculated peak searched for the observed one
MIN_REL_PCT = 1.0  # calculated cluster peaks shown and scored

#: Ion name -> (atoms added, atoms removed, charge sign). Every ion here carries one charge.
IONS: dict[str, tuple[str, str, int]] = {
    "M+.": ("", "", +1),
    "[M+H]+": ("H", "", +1),
    "[M+Na]+": ("Na", "", +1),
    "[M+K]+": ("K", "", +1),
    "[M+NH4]+": ("NH4", "", +1),
    "[M-H]-": ("", "H", -1),
    "[M+Cl]-": ("Cl", "", -1),
}
_ION_SPELLINGS = {"m+.": "M+.", "m+": "M+.", "[m]+.": "M+.", "[m]+": "M+.", "m.+": "M+.", "[m].+": "M+."}


def parse_ion(text: str) -> str:
    """The canonical ion name of ``text`` (``[M+Na]+``, ``M+·``, ``[M+NH₄]⁺``...); unknown -> AnalysisError."""
    t = (text or "").strip()
    for a, b in (("⁺", "+"), ("⁻", "-"), ("−", "-"), ("·", "."), ("•", "."), ("₄", "4"), (" ", "")):
        t = t.replace(a, b)
    low = t.lower()
    if low in _ION_SPELLINGS:
        return _ION_SPELLINGS[low]
    for name in IONS:
        if low == name.lower():
            return name
    raise AnalysisError(f"ion '{text.strip()}' is not one of {', '.join(IONS)}", field="ion")


def ion_mz(formula: str, ion: str) -> float:
    """Calculated monoisotopic m/z of ``ion`` (a key of :data:`IONS`) of the neutral ``formula``."""
    counts, sign = ion_counts(formula, ion)
    return monoisotopic_mass_u(counts) - sign * ELECTRON_MASS_U


def ion_counts(formula: str, ion: str) -> tuple[dict[str, float], int]:
    """Element counts of the ion and its charge sign."""
    added, removed, sign = IONS[ion]
    parts = [(parse_formula(formula), 1.0)]
    if added:
        parts.append((parse_formula(added), 1.0))
    if removed:
        parts.append((parse_formula(removed), -1.0))
    return add_counts(*parts), sign


def parse_tolerance_ppm(text: Optional[str]) -> float:
    """``"5 ppm"`` -> 5.0; None -> the default."""
    if text is None or not str(text).strip():
        return DEFAULT_TOLERANCE_PPM
    m = re.fullmatch(r"\s*(\d+(?:\.\d*)?|\.\d+)\s*ppm\s*", str(text), re.I)
    if not m or float(m.group(1)) <= 0:
        raise AnalysisError(f"tolerance '{text}' is not a positive number of ppm, e.g. '5 ppm'", field="tolerance")
    return float(m.group(1))


@dataclass(frozen=True)
class ClusterPeak(Result):
    """One peak of the calculated isotope cluster beside the observed one."""

    calc_mz: float
    calc_rel_pct: float
    found_mz: Optional[float]
    found_rel_pct: float


@dataclass(frozen=True)
class HrmsResult(Result):
    """Calculated against found m/z, the error in ppm, the pass at the tolerance and the cluster match."""

    ion: str
    ion_formula: str
    calc_mz: float
    found_mz: Optional[float]
    error_ppm: Optional[float]
    tolerance_ppm: float
    passed: bool
    isotope_score: Optional[float]
    cluster: tuple[ClusterPeak, ...]
    centroided: bool
    mz_min: float
    mz_max: float
    flags: tuple[Flag, ...] = field(default_factory=tuple)

    JSON_KEYS = ("ion", "ion_formula", "calc_mz", "found_mz", "error_ppm", "tolerance_ppm", "passed",
                 "isotope_score", "cluster", "centroided", "mz_min", "mz_max", "flags")

    def to_dict(self):
        """The JSON keys, with ``passed`` published as ``pass`` (the issue's key)."""
        return {("pass" if k == "passed" else k): v for k, v in super().to_dict().items()}

    @property
    def verdict(self) -> str:
        return "pass" if self.passed else "fail"


def observed_peaks(mz: np.ndarray, intensity: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool]:
    """Peaks of a spectrum: (m/z, intensity, centroided). A list whose points are more than 0.05 apart
    (median spacing) is taken as centroided; a profile is reduced to its local maxima, each centred by Gaussian
    three-point interpolation (a parabola through the logarithms of the apex and its two neighbours)."""
    order = np.argsort(mz)
    mz, intensity = mz[order], intensity[order]
    if len(mz) < 3 or float(np.median(np.diff(mz))) > 0.05:
        return mz, intensity, True
    noise = float(np.median(intensity))
    idx, _ = find_peaks(intensity, prominence=max(3.0 * noise, 1e-3 * float(intensity.max())))
    centres, heights = [], []
    for i in idx:
        if 0 < i < len(mz) - 1 and np.all(intensity[i - 1 : i + 2] > 0):
            # Gaussian three-point interpolation: a parabola through the logarithms of the apex and its
            # neighbours (exact for a Gaussian peak sampled evenly)
            la, lb, lc = np.log(intensity[i - 1 : i + 2])
            curve = la - 2.0 * lb + lc
            step = 0.5 * (mz[i + 1] - mz[i - 1])
            offset = 0.5 * (la - lc) / curve if curve < 0 else 0.0
            centres.append(float(mz[i] + np.clip(offset, -1.0, 1.0) * step))
        else:
            centres.append(float(mz[i]))
        heights.append(float(intensity[i]))
    return np.array(centres), np.array(heights), False


def _strongest_near(mz: np.ndarray, h: np.ndarray, target: float, window: float = MATCH_WINDOW) -> Optional[int]:
    near = np.flatnonzero(np.abs(mz - target) <= window)
    return None if near.size == 0 else int(near[np.argmax(h[near])])


def analyse_hrms(frame: pd.DataFrame, *, formula: Optional[str], ion: Optional[str],
                 tolerance: Optional[str] = None) -> HrmsResult:
    """Compare a spectrum (``mz`` and ``intensity`` columns) with the claimed ion of ``formula``.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical columns ``mz`` and ``intensity`` (profile or centroided list).
    formula : str
        The registered neutral formula (Hill order), e.g. ``"C27H24O6"``.
    ion : str
        The claimed ion, one of :data:`IONS` (spellings with ``⁺``, ``·`` accepted).
    tolerance : str, optional
        e.g. ``"3 ppm"``; default 5 ppm.

    Raises
    ------
    AnalysisError
        No formula, no or unknown ion, a bad tolerance, no positive intensity.
    """
    if not formula:
        raise AnalysisError("the compound has no formula to calculate the ion from", field="formula")
    if ion is None or not str(ion).strip():
        raise AnalysisError(f"say which ion was measured with a line '# ion: [M+H]+' (one of {', '.join(IONS)})",
                            field="ion")
    name = parse_ion(ion)
    tol = parse_tolerance_ppm(tolerance)
    mz = frame["mz"].to_numpy(dtype=float)
    inten = frame["intensity"].to_numpy(dtype=float)
    if not np.any(inten > 0):
        raise AnalysisError("no point of the spectrum has a positive intensity", column="intensity")
    counts, sign = ion_counts(formula, name)
    calc = monoisotopic_mass_u(counts) - sign * ELECTRON_MASS_U
    pmz, ph, centroided = observed_peaks(mz, inten)
    flags: list[Flag] = []
    lo, hi = float(np.min(mz)), float(np.max(mz))
    found = error = None
    if not (lo - MATCH_WINDOW <= calc <= hi + MATCH_WINDOW):
        flags.append(Flag("ion_out_of_range", f"the file covers m/z {lo:.1f}-{hi:.1f}, which does not include "
                                              f"the calculated {name} at m/z {calc:.4f}"))
    else:
        k = _strongest_near(pmz, ph, calc)
        if k is None:
            flags.append(Flag("no_peak_at_ion", f"no peak within {MATCH_WINDOW} of the calculated {name} at "
                                                f"m/z {calc:.4f}: check the formula and the ion"))
        else:
            found = float(pmz[k])
            error = (found - calc) / calc * 1e6
    passed = error is not None and abs(error) <= tol
    if error is not None and not passed:
        flags.append(Flag("mass_error_over_tolerance", f"found m/z {found:.4f} is {error:+.1f} ppm from the "
                                                       f"calculated {calc:.4f} (tolerance ±{tol:g} ppm)"))
    # isotope cluster: calculated masses are of the ion (electron mass applied to each peak)
    calc_cluster = [(m - sign * ELECTRON_MASS_U, p) for m, p in isotope_cluster(counts)]
    top = max(p for _, p in calc_cluster)
    shown = [(m, 100.0 * p / top) for m, p in calc_cluster if 100.0 * p / top >= MIN_REL_PCT]
    cluster: list[ClusterPeak] = []
    score = None
    if found is not None:
        # also look one to four nucleons below and two above the calculated cluster: peaks there that the
        # formula does not predict (another element's isotopes) must lower the score
        spacing = 1.00335  # 13C - 12C, u
        ends = [shown[0][0] - k * spacing for k in range(4, 0, -1)] + \
               [shown[-1][0] + k * spacing for k in (1, 2)]
        positions = [(m, 0.0) for m in ends[:4]] + shown + [(m, 0.0) for m in ends[4:]]
        obs = []
        for m, rel in positions:
            j = _strongest_near(pmz, ph, m, window=0.4)
            obs.append((None, 0.0) if j is None else (float(pmz[j]), float(ph[j])))
        obs_top = max(h for _, h in obs) or 1.0
        for (m, rel), (fm, h) in zip(positions, obs):
            if rel > 0 or 100.0 * h / obs_top >= MIN_REL_PCT:
                cluster.append(ClusterPeak(m, rel, fm, 100.0 * h / obs_top))
        a = np.array([c.calc_rel_pct for c in cluster])
        b = np.array([c.found_rel_pct for c in cluster])
        score = float(a @ b / (np.linalg.norm(a) * np.linalg.norm(b))) if np.linalg.norm(b) > 0 else 0.0
        if score < ISOTOPE_SCORE_MIN:
            flags.append(Flag("isotope_pattern_mismatch", f"the observed isotope cluster matches the calculated one "
                                                          f"with a score of {score:.3f} (below {ISOTOPE_SCORE_MIN})"))
    else:
        cluster = [ClusterPeak(m, rel, None, 0.0) for m, rel in shown]
    charge = "+" if sign > 0 else "-"
    ion_formula = f"{hill_formula(counts, sep='')}{charge}"
    return HrmsResult(ion=name, ion_formula=ion_formula, calc_mz=calc, found_mz=found, error_ppm=error,
                      tolerance_ppm=tol, passed=passed, isotope_score=score, cluster=tuple(cluster),
                      centroided=centroided, mz_min=lo, mz_max=hi, flags=tuple(flags))
