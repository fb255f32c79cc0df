"""Combustion (CHNS) elemental analysis: calculated against found mass percentages, with solvates.

Method
------
Calculated percentages are 100 x n(el) x A(el) / M from the standard atomic weights (IUPAC
conventional values, RDKit's periodic table; :func:`server.analysis.composition.mass_percentages`).
A solvate "M · x S" is calculated for the formula M + x S (x may be fractional: 0.5 H2O is a
hemihydrate). The analysis passes when every measured element lies within ±0.4 % absolute of the
calculated value: the usual journal criterion for purity (common practice; several journals' author
guidelines state it, e.g. the ACS journals' guidelines for new compounds).

The file: ``# key: value`` lines (``# solvate: 0.5 H2O``, or a named solvent such as
``0.25 dichloromethane``; several joined by ``+``), then a two-column table ``element, found (%)``,
comma, semicolon or tab separated, one row per measured element (C, H, N, S...).
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field
from typing import Optional

from server.analysis.composition import add_counts, mass_percentages
from server.analysis.crystal import hill_formula, molar_mass_from_counts, parse_formula
from server.analysis.results import Flag, Result
from server.errors import AnalysisError, IngestError

METHOD = ("Mass percentages from standard atomic weights (IUPAC), found within ±0.4 % absolute of calculated "
          "(common journal criterion), solvates included on request")
VERSION = "elemental/1.0"

TOLERANCE_PCT = 0.4  # absolute, common journal criterion
#: Elements a combustion or pyrolysis analyser reports, in the order results list them.
MEASURABLE = ("C", "H", "N", "S", "O", "Se", "F", "Cl", "Br", "I", "P")
#: Named solvents of crystallisation and their formulae.
SOLVENTS = {
    "water": "H2O", "methanol": "CH4O", "ethanol": "C2H6O", "acetone": "C3H6O", "acetonitrile": "C2H3N",
    "dichloromethane": "CH2Cl2", "chloroform": "CHCl3", "hexane": "C6H14", "toluene": "C7H8",
    "ethyl acetate": "C4H8O2", "thf": "C4H8O", "tetrahydrofuran": "C4H8O", "dmso": "C2H6OS",
    "diethyl ether": "C4H10O", "benzene": "C6H6", "dmf": "C3H7NO",
}
_SUM_SLACK_PCT = 0.5  # found percentages may round to a sum slightly above 100


@dataclass(frozen=True)
class Solvate:
    """One solvent of crystallisation: its formula and molecules per formula unit."""

    formula: str
    fraction: float


@dataclass(frozen=True)
class ElementalInput:
    """An elemental-analysis file as read: found percentages by element (file order) and the solvates."""

    found_pct: dict[str, float]
    solvates: tuple[Solvate, ...]
    metadata: dict[str, str]


def parse_solvates(text: Optional[str]) -> tuple[Solvate, ...]:
    """``"0.5 H2O"``, ``"0.25 dichloromethane + 0.5 H2O"`` -> solvates; empty -> ()."""
    if text is None or not text.strip() or text.strip().lower() in ("none", "no"):
        return ()
    out = []
    for part in re.split(r"\s*\+\s*", text.strip()):
        m = re.fullmatch(r"(\d+(?:\.\d*)?|\.\d+)\s*(?:x\s*|·\s*)?(.+)", part.strip(), re.I)
        if not m:
            raise AnalysisError(f"solvate '{part}' is not '<fraction> <solvent>', e.g. '0.5 H2O'", field="solvate")
        fraction, what = float(m.group(1)), m.group(2).strip()
        if fraction <= 0:
            raise AnalysisError(f"solvate '{part}': the fraction must be greater than zero", field="solvate")
        formula = SOLVENTS.get(what.lower(), what)
        parse_formula(formula, what="solvent")
        out.append(Solvate(formula, fraction))
    return tuple(out)


def read_elemental(raw: bytes) -> ElementalInput:
    """Read the file; bad cells raise :class:`IngestError` naming the line and column."""
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise IngestError("the file is not UTF-8 text", field="file") from exc
    metadata: dict[str, str] = {}
    rows: list[tuple[int, list[str]]] = []
    for n, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            key, sep, value = s[1:].partition(":")
            if sep:
                metadata[key.strip().lower()] = value.strip()
            continue
        delim = "\t" if "\t" in s else (";" if ";" in s else ",")
        rows.append((n, [c.strip() for c in next(csv.reader(io.StringIO(s), delimiter=delim))]))
    if not rows:
        raise IngestError("the file has no table 'element, found (%)'", field="file")
    head_line, head = rows[0]
    names = [re.sub(r"[\s()\[\]%]+", " ", h).strip().lower() for h in head]
    if len(head) != 2 or names[0] not in ("element", "el") or names[1] != "found":
        raise IngestError(f"line {head_line}: the header must be 'element, found (%)', not '{', '.join(head)}'",
                          line=head_line)
    found: dict[str, float] = {}
    for n, cells in rows[1:]:
        if len(cells) != 2:
            raise IngestError(f"line {n}: expected two cells (element, found %), got {len(cells)}", line=n)
        el, value = cells
        if el not in MEASURABLE:
            raise IngestError(f"line {n}, column '{head[0]}': '{el}' is not an element combustion analysis "
                              f"reports ({', '.join(MEASURABLE)})", line=n, column=head[0])
        if el in found:
            raise IngestError(f"line {n}, column '{head[0]}': {el} is given twice", line=n, column=head[0])
        try:
            pct = float(value.rstrip("%").strip())
        except ValueError:
            raise IngestError(f"line {n}, column '{head[1]}': '{value}' is not a number", line=n,
                              column=head[1]) from None
        if not math.isfinite(pct) or pct < 0 or pct > 100:
            raise IngestError(f"line {n}, column '{head[1]}': {value} is not a percentage between 0 and 100",
                              line=n, column=head[1])
        found[el] = pct
    if not found:
        raise IngestError("the table has no rows: give at least C and H", field="file")
    total = sum(found.values())
    if total > 100.0 + _SUM_SLACK_PCT:
        raise IngestError(f"the found percentages sum to {total:.2f} %, over 100 %", column=head[1])
    return ElementalInput(found, parse_solvates(metadata.get("solvate")), metadata)


@dataclass(frozen=True)
class ElementalResult(Result):
    """Calculated, found and deviation (percentage points) per element, and the pass at ±0.4 %."""

    formula: str
    calc_formula: str
    solvate: str
    molar_mass_g_mol: float
    calc_pct: dict[str, float]
    found_pct: dict[str, float]
    delta_pct: dict[str, float]
    tolerance_pct: float
    passed: bool
    flags: tuple[Flag, ...] = field(default_factory=tuple)

    def to_dict(self):
        """The fields, with ``passed`` published as ``pass`` (the issue's key)."""
        return {("pass" if k == "passed" else k): v for k, v in super().to_dict().items()}

    @property
    def verdict(self) -> str:
        return "pass" if self.passed else "fail"


def solvate_text(solvates: tuple[Solvate, ...]) -> str:
    """``"0.5 H2O"``; joined by `` + ``."""
    return " + ".join(f"{s.fraction:g} {s.formula}" for s in solvates)


def analyse_elemental(found_pct: dict[str, float], *, formula: Optional[str],
                      solvates: tuple[Solvate, ...] = ()) -> ElementalResult:
    """Compare found percentages with those calculated for ``formula`` (plus solvates).

    Parameters
    ----------
    found_pct : dict
        Element symbol -> found mass percentage.
    formula : str
        The registered neutral formula, e.g. ``"C27H24O6"``.
    solvates : tuple of Solvate
        Solvent molecules per formula unit to include in the calculated composition.
    """
    if not formula:
        raise AnalysisError("the compound has no formula to calculate percentages from", field="formula")
    parts = [(parse_formula(formula), 1.0)] + [(parse_formula(s.formula, what="solvent"), s.fraction)
                                                for s in solvates]
    counts = add_counts(*parts)
    pct = mass_percentages(counts)
    order = [el for el in MEASURABLE if el in found_pct]
    calc = {el: pct.get(el, 0.0) for el in order}
    found = {el: found_pct[el] for el in order}
    delta = {el: found[el] - calc[el] for el in order}
    passed = all(abs(d) <= TOLERANCE_PCT + 1e-9 for d in delta.values())
    flags = [Flag("outside_tolerance", f"{el}: found {found[el]:.2f} %, calculated {calc[el]:.2f} % "
                                       f"(Δ {delta[el]:+.2f}, more than ±{TOLERANCE_PCT} %)")
             for el in order if abs(delta[el]) > TOLERANCE_PCT + 1e-9]
    absent = [el for el in order if el not in counts]
    if absent:
        flags.append(Flag("element_not_in_formula", f"{', '.join(absent)} found but not in the formula {formula}"))
    return ElementalResult(formula=formula, calc_formula=hill_formula(counts, sep=""), solvate=solvate_text(solvates),
                           molar_mass_g_mol=molar_mass_from_counts(counts), calc_pct=calc, found_pct=found,
                           delta_pct=delta, tolerance_pct=TOLERANCE_PCT, passed=passed, flags=tuple(flags))
