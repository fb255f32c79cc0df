"""Element composition of a formula: monoisotopic mass, isotope cluster and mass percentages.

Sources
-------
* Isotope masses and natural abundances: RDKit's periodic table (``Chem.GetPeriodicTable()``:
  ``GetMassForIsotope``, ``GetAbundanceForIsotope``), whose table follows the IUPAC/CIAAW isotopic
  compositions and the atomic masses of NIST's "Atomic Weights and Isotopic Compositions for All
  Elements" (J. S. Coursey et al., NIST Physical Measurement Laboratory). Standard atomic weights
  (for mass percentages) from ``GetAtomicWeight`` (IUPAC conventional values).
* Electron mass: :data:`scipy.constants.physical_constants` ``"electron mass in u"`` (the CODATA
  adjustment that the installed SciPy carries; CODATA 2018 gives 5.48579909065e-4 u).

Formulae are read by :func:`server.analysis.crystal.parse_formula` (the project's one formula reader).
"""

from __future__ import annotations

from functools import lru_cache

import scipy.constants as sc
from rdkit import Chem

from server.analysis.crystal import molar_mass_from_counts, parse_formula
from server.errors import AnalysisError

__all__ = ["ELECTRON_MASS_U", "element_isotopes", "monoisotopic_mass_u", "isotope_cluster", "mass_percentages",
           "parse_formula", "add_counts"]

#: Electron mass in unified atomic mass units (SciPy's CODATA value).
ELECTRON_MASS_U: float = sc.physical_constants["electron mass in u"][0]

# Isotopes below this fraction of a cluster's strongest peak are dropped while convolving (pruning):
# 1e-6 keeps every peak a mass spectrometer with 4-5 decades of dynamic range could see.
_PRUNE = 1e-6


@lru_cache(maxsize=None)
def element_isotopes(symbol: str) -> tuple[tuple[int, float, float], ...]:
    """The stable isotopes of an element: (mass number, mass in u, abundance as a fraction), lightest first.

    Read from RDKit's periodic table by scanning mass numbers around the most common isotope.
    An element without natural isotopic abundances raises :class:`AnalysisError`.
    """
    table = Chem.GetPeriodicTable()
    try:
        common = table.GetMostCommonIsotope(symbol)
    except RuntimeError as exc:  # RDKit raises for an unknown symbol
        raise AnalysisError(f"'{symbol}' is not an element symbol") from exc
    out = []
    for a in range(max(1, common - 20), common + 21):
        abundance = table.GetAbundanceForIsotope(symbol, a)
        if abundance > 0:
            out.append((a, float(table.GetMassForIsotope(symbol, a)), abundance / 100.0))
    if not out:
        raise AnalysisError(f"{symbol} has no natural isotopic composition in the periodic table")
    total = sum(p for _, _, p in out)
    return tuple((a, m, p / total) for a, m, p in out)


def add_counts(*parts: tuple[dict[str, float], float]) -> dict[str, float]:
    """Sum element counts: ``add_counts((M, 1), (H2O, 0.5))``; zero counts are dropped, negative refused."""
    out: dict[str, float] = {}
    for counts, factor in parts:
        for el, n in counts.items():
            out[el] = out.get(el, 0.0) + n * factor
    if any(n < -1e-9 for n in out.values()):
        raise AnalysisError("the formula has fewer atoms than the ion removes")
    return {el: n for el, n in out.items() if abs(n) > 1e-9}


def monoisotopic_mass_u(counts: dict[str, float]) -> float:
    """Mass of the molecule made of each element's most abundant isotope (u)."""
    total = 0.0
    for el, n in counts.items():
        if abs(n - round(n)) > 1e-9:
            raise AnalysisError(f"{el}{n:g}: a monoisotopic mass needs whole atom counts")
        iso = max(element_isotopes(el), key=lambda t: t[2])
        total += iso[1] * round(n)
    return total


def _convolve(a: dict[int, tuple[float, float]], b: dict[int, tuple[float, float]]) -> dict[int, tuple[float, float]]:
    """Combine two clusters keyed by nucleon offset: value (probability, probability-weighted mass)."""
    out: dict[int, list[float]] = {}
    for ka, (pa, ma) in a.items():
        for kb, (pb, mb) in b.items():
            p = pa * pb
            slot = out.setdefault(ka + kb, [0.0, 0.0])
            slot[0] += p
            # mean mass of the combined peak: (ma/pa + mb/pb) weighted by p
            slot[1] += p * (ma / pa + mb / pb)
    top = max(p for p, _ in out.values())
    return {k: (p, m) for k, (p, m) in out.items() if p >= _PRUNE * top}


def isotope_cluster(counts: dict[str, float]) -> list[tuple[float, float]]:
    """The isotope cluster of a neutral formula as (mean mass in u, fraction), in nucleon order.

    Each element's isotope distribution is raised to its atom count by repeated squaring of the
    convolution, then the elements are convolved together; peaks with the same total nucleon number
    are merged at their abundance-weighted mean mass (what a spectrum at ordinary HRMS resolution
    shows: the fine structure such as 34S vs 13C2 within one nominal mass is not separated), and peaks
    below 1e-6 of the strongest are pruned at each step. The fractions of the kept peaks sum to
    nearly 1 (exactly 1 without pruning). The offset zero is the lightest isotopes' combination;
    the returned list starts at the first kept peak.

    References
    ----------
    J. A. Yergey, "A general approach to calculating isotopic distributions for mass spectrometry",
    Int. J. Mass Spectrom. Ion Phys. 52, 337 (1983) (polynomial expansion by convolution).
    """
    cluster: dict[int, tuple[float, float]] = {0: (1.0, 0.0)}
    for el, n in sorted(counts.items()):
        if abs(n - round(n)) > 1e-9 or n < 0:
            raise AnalysisError(f"{el}{n:g}: an isotope pattern needs whole, positive atom counts")
        isos = element_isotopes(el)
        a0 = isos[0][0]
        single = {a - a0: (p, p * m) for a, m, p in isos}
        power, base, k = {0: (1.0, 0.0)}, single, int(round(n))
        while k:
            if k & 1:
                power = _convolve(power, base)
            k >>= 1
            if k:
                base = _convolve(base, base)
        cluster = _convolve(cluster, power)
    return [(m / p, p) for _, (p, m) in sorted(cluster.items())]


def mass_percentages(counts: dict[str, float]) -> dict[str, float]:
    """Mass percentage of each element (standard atomic weights), in the formula's element order."""
    total = molar_mass_from_counts(counts)
    table = Chem.GetPeriodicTable()
    return {el: 100.0 * table.GetAtomicWeight(el) * n / total for el, n in counts.items()}
