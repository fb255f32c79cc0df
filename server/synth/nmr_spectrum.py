"""Invented 1D 1H NMR spectra: Lorentzian lines in first-order multiplets, noise, written as JCAMP-DX.

A signal of ``n_H`` protons coupled to ``neighbours`` equivalent protons with ``j_Hz`` is split into
``neighbours + 1`` lines of binomial intensities spaced by J (the first-order n + 1 rule, Friebolin,
*Basic One- and Two-Dimensional NMR Spectroscopy*, 5th ed. 2010, ch. 4); every line is a Lorentzian of
full width ``fwhm_Hz`` (the Fourier transform of an exponentially decaying FID). Gaussian noise of
``noise_rel`` of the tallest point is added after the lines.

:func:`signals_for` invents plausible shifts for a registered structure: each topological symmetry
class of H atoms gets a shift by its carbon's neighbourhood (aromatic CH, O- or S-CHn at one to four bonds
from the heteroatom, the CH2 bridge of a bowl). The numbers are typical values (common practice, from
memory), not predictions: they serve the demo and the tests only.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import comb
from typing import Optional

import numpy as np

from server.ingest.jcamp import write_jcamp


@dataclass(frozen=True)
class Signal:
    shift_ppm: float
    n_H: float
    neighbours: int = 0  # equivalent coupled protons: a signal of neighbours + 1 lines
    j_Hz: float = 7.0
    #: further couplings, each (equivalent protons, J in Hz): each splits every line again (a coupling
    #: tree, Friebolin ch. 4), so Signal(s, 1, 1, 8.4, ((1, 2.1),)) is a doublet of doublets
    also: tuple[tuple[int, float], ...] = ()

    def lines_Hz(self, mhz: float) -> list[tuple[float, float]]:
        """(position in Hz, area) of every line of the first-order multiplet; the areas sum to ``n_H``."""
        out = [(self.shift_ppm * mhz, float(self.n_H))]
        for n, j in ((self.neighbours, self.j_Hz),) + self.also:
            out = [(x + (k - n / 2.0) * j, w * comb(n, k) / 2.0 ** n) for x, w in out for k in range(n + 1)]
        return out


def ab_lines(centre_ppm: float, delta_nu_Hz: float, j_Hz: float, n_H: float, *, mhz: float) -> list[tuple[float, float]]:
    """(position in ppm, area) of the four lines of two strongly coupled protons (an AB system), exact:
    D = sqrt(Δν² + J²), lines at ν₀ ± (D ± J)/2, the inner ones of relative intensity 1 + J/D and the outer
    ones 1 - J/D (the roof effect; Friebolin, ch. 4, the AB system). ``n_H``: the area of the four lines."""
    d = float(np.hypot(delta_nu_Hz, j_Hz))
    centre = centre_ppm * mhz
    inner, outer = n_H * (1 + j_Hz / d) / 4, n_H * (1 - j_Hz / d) / 4
    return [((centre + sign * (d + j_Hz) / 2) / mhz, outer) for sign in (-1, 1)] + \
           [((centre + sign * (d - j_Hz) / 2) / mhz, inner) for sign in (-1, 1)]


#: A routine 1H acquisition: 32 k points over 13 ppm (about 5.2 kHz at 400 MHz, 0.16 Hz per point), so a
#: J from two line positions is known to 0.065 Hz and prints to 0.1 Hz (common practice: spectrometers
#: record 32 k to 64 k points over 12 to 16 ppm; from memory).
PPM_FROM, PPM_TO, POINTS = 12.5, -0.5, 32768


def spectrum(signals: list[Signal], *, rng: np.random.Generator, mhz: float = 400.0, ppm_from: float = PPM_FROM,
             ppm_to: float = PPM_TO, points: int = POINTS, fwhm_Hz: float = 1.5,
             noise_rel: float = 0.005, lines: tuple[tuple[float, float], ...] = ()) -> tuple[np.ndarray, np.ndarray]:
    """(ppm from ``ppm_from`` down to ``ppm_to``, intensity) of ``signals``; area of a signal = its n_H.
    ``lines``: further lines as (ppm, area), e.g. :func:`ab_lines`. The digital resolution is
    (``ppm_from`` - ``ppm_to``) x ``mhz`` / (``points`` - 1) Hz per point."""
    ppm = np.linspace(ppm_from, ppm_to, points)
    hz = ppm * mhz
    gamma = fwhm_Hz / 2.0
    y = np.zeros(points)
    every = [line for s in signals for line in s.lines_Hz(mhz)] + [(p * mhz, w) for p, w in lines]
    for centre, weight in every:
        y += weight * (gamma / np.pi) / ((hz - centre) ** 2 + gamma ** 2) * mhz  # per ppm: area = weight
    y = y + rng.normal(0.0, noise_rel * float(y.max()), points)
    return ppm, y


def jcamp_file(ppm: np.ndarray, y: np.ndarray, *, mhz: float, solvent: str, t_K: float, title: str,
               nucleus: str = "1H", in_hz: bool = True, crlf: bool = False,
               comments: Optional[list[str]] = None) -> bytes:
    """The spectrum as a JCAMP-DX 5.01 file, ordinates DIFDUP-compressed; X in Hz (as spectrometers write it,
    with ``.OBSERVE FREQUENCY``) or in ppm. Temperature as ``##TEMPERATURE=`` in degrees Celsius (the core
    standard's unit) and ``##$TE=`` in K. ``crlf``: Windows line ends; ``comments``: ``$$`` lines first."""
    top = float(np.max(np.abs(y))) or 1.0
    scale = 1e5 / top  # ordinates as integers up to 100 000
    first, last = (ppm[0] * mhz, ppm[-1] * mhz) if in_hz else (ppm[0], ppm[-1])
    records = {"ORIGIN": "invented demo spectrometer", "OWNER": "demo", "XUNITS": "HZ" if in_hz else "PPM",
               "YUNITS": "ARBITRARY UNITS", ".OBSERVE FREQUENCY": f"{mhz:.6g}", ".OBSERVE NUCLEUS": f"^{nucleus}",
               ".SOLVENT NAME": solvent, "TEMPERATURE": f"{t_K - 273.15:.2f}", "$TE": f"{t_K:.2f}"}
    raw = write_jcamp(y * scale, firstx=float(first), lastx=float(last), form="DIFDUP", title=title,
                      records=records, yfactor=1.0 / scale)
    text = raw.decode("utf-8")
    if comments:
        head, rest = text.split("\n", 1)
        text = head + "\n" + "".join(f"$$ {c}\n" for c in comments) + rest
    if crlf:
        text = text.replace("\n", "\r\n")
    return text.encode("utf-8")


# Typical 1H shifts (ppm) of an sp3 CHn by its distance (bonds) to an O or S linker, common practice.
_BY_DISTANCE = {
    "O": {1: {3: 3.95, 2: 4.12, 1: 4.45}, 2: {3: 1.45, 2: 1.82, 1: 2.05}},
    "S": {1: {3: 2.55, 2: 2.95, 1: 3.25}, 2: {3: 1.35, 2: 1.68, 1: 1.90}},
}
_FAR = {3: {3: 1.00, 2: 1.48, 1: 1.70}, 4: {3: 0.90, 2: 1.30, 1: 1.62}}
#: The exo and endo protons of a bowl's CH2 bridge (diastereotopic while inversion is slow) and their
#: geminal coupling: typical of CH2-bridged bowls (from memory).
BRIDGE_PPM, BRIDGE_J_HZ = (4.70, 3.42), 19.5


def _hetero_distance(mol, idx: int) -> tuple[Optional[str], int]:
    """(nearest O or S linker, bonds to it) of atom ``idx``; (None, 99) when there is none."""
    from rdkit import Chem

    dist = Chem.GetDistanceMatrix(mol)
    best: tuple[Optional[str], int] = (None, 99)
    for a in mol.GetAtoms():
        if a.GetSymbol() in ("O", "S") and not a.IsInRing() and dist[idx][a.GetIdx()] < best[1]:
            best = (a.GetSymbol(), int(dist[idx][a.GetIdx()]))
    return best


def signals_for(smiles: str) -> list[Signal]:
    """Invented 1H signals of a structure: one per topological class of H (the CH2 bridge of a bowl as two
    doublets), a first-order multiplet from the H on neighbouring sp3 carbons."""
    from rdkit import Chem

    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    heavy = Chem.RemoveHs(mol)
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    classes: dict[int, list[int]] = {}
    for a in mol.GetAtoms():
        if a.GetSymbol() == "H":
            classes.setdefault(ranks[a.GetNeighbors()[0].GetIdx()], []).append(a.GetIdx())
    out: list[Signal] = []
    for rank, hs in sorted(classes.items()):
        carbon = mol.GetAtomWithIdx(hs[0]).GetNeighbors()[0]
        n_h = carbon.GetTotalNumHs(includeNeighbors=True)
        if carbon.GetIsAromatic():
            out.append(Signal(7.10, len(hs)))
            continue
        aromatic_neighbours = sum(nb.GetIsAromatic() for nb in carbon.GetNeighbors())
        if carbon.IsInRing() and aromatic_neighbours == 2 and n_h == 2:
            out += [Signal(BRIDGE_PPM[0], len(hs) / 2, 1, BRIDGE_J_HZ), Signal(BRIDGE_PPM[1], len(hs) / 2, 1, BRIDGE_J_HZ)]
            continue
        element, d = _hetero_distance(heavy, carbon.GetIdx())
        table = _BY_DISTANCE[element][d] if element and d <= 2 else _FAR[3 if d == 3 else 4]
        # a small offset per class, so chemically different CH2 of a chain do not fall on one shift exactly
        shift = table.get(n_h, 1.3) + 0.004 * ((rank * 7) % 5 - 2)
        coupled = sum(nb.GetTotalNumHs(includeNeighbors=True) for nb in carbon.GetNeighbors()
                      if nb.GetSymbol() == "C" and not nb.GetIsAromatic())
        out.append(Signal(round(shift, 3), len(hs), coupled, 7.0))
    return out
