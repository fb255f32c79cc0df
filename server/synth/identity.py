"""Invented identity evidence: HRMS profile spectra and elemental-analysis results.

A profile spectrum is the calculated isotope cluster of an ion, each peak a Gaussian whose full width
at half height is m/z / resolving power, with multiplicative noise of a few percent and a small
baseline noise; a mass error in ppm shifts the whole cluster (a calibration offset).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from server.analysis.composition import ELECTRON_MASS_U, isotope_cluster, mass_percentages
from server.analysis.crystal import parse_formula
from server.analysis.hrms import ion_counts, ion_mz


def hrms_profile(formula: str, ion: str, *, rng: np.random.Generator, error_ppm: float = 1.0,
                 resolving_power: float = 60000.0, noise: float = 0.03, window: tuple[float, float] = (-1.5, 4.5),
                 points_per_fwhm: float = 5.0) -> pd.DataFrame:
    """A profile spectrum around the ion of ``formula`` (columns ``m/z ()`` and ``intensity ()``)."""
    counts, sign = ion_counts(formula, ion)
    cluster = [(m - sign * ELECTRON_MASS_U, p) for m, p in isotope_cluster(counts)]
    mono = ion_mz(formula, ion)
    fwhm = mono / resolving_power
    x = np.arange(mono + window[0], mono + window[1], fwhm / points_per_fwhm)
    y = np.zeros_like(x)
    shift = 1.0 + error_ppm * 1e-6
    top = max(p for _, p in cluster)
    sigma = fwhm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
    for m, p in cluster:
        if p / top < 1e-4:
            continue
        height = 1e6 * p / top * (1.0 + noise * rng.standard_normal())
        y += height * np.exp(-0.5 * ((x - m * shift) / sigma) ** 2)
    y += np.abs(rng.normal(0.0, 200.0, size=x.size))
    return pd.DataFrame({"m/z ()": np.round(x, 5), "intensity ()": np.round(y, 1)})


def elemental_found(formula: str, *, rng: np.random.Generator, elements: tuple[str, ...] = ("C", "H", "N", "S"),
                    scatter_pct: float = 0.12, solvate: tuple[str, float] | None = None) -> dict[str, float]:
    """Found percentages of a sample of ``formula`` (optionally really a solvate), with analyser scatter."""
    counts = parse_formula(formula)
    if solvate is not None:
        extra = parse_formula(solvate[0])
        counts = {el: counts.get(el, 0.0) + extra.get(el, 0.0) * solvate[1] for el in set(counts) | set(extra)}
    pct = mass_percentages(counts)
    return {el: round(max(0.0, pct.get(el, 0.0) + scatter_pct * rng.standard_normal()), 2) for el in elements}


def elemental_file(found: dict[str, float], metadata: dict[str, str] | None = None) -> bytes:
    """An elemental-analysis file: ``# key: value`` lines, then ``element,found (%)``."""
    lines = [f"# {k}: {v}" for k, v in (metadata or {}).items()] + ["element,found (%)"]
    lines += [f"{el},{v:.2f}" for el, v in found.items()]
    return ("\n".join(lines) + "\n").encode()
