"""Combustion elemental analysis: calculated against found percentages at ±0.4 % absolute, with solvates."""

from __future__ import annotations

from ..analysis import elemental
from ..synth.identity import elemental_file, elemental_found
from .base import Example, Kind, ResultKey, rng_for

# The example: the example bowl C27H24O6 measured for C and H (no N or S in it) with 0.1 % scatter.
_EX = {"formula": "C27H24O6", "elements": ("C", "H")}


def _analyse(raw: bytes, c, ctx):
    read = elemental.read_elemental(raw)
    return elemental.analyse_elemental(read.found_pct, formula=ctx.formula, solvates=read.solvates)


def _example() -> Example:
    e = _EX
    found = elemental_found(e["formula"], rng=rng_for("elemental"), elements=e["elements"], scatter_pct=0.1)
    return Example("elemental.csv", elemental_file(found, {"instrument": "CHNS analyser"}), {**e, "found": found})


KIND = Kind(
    name="elemental",
    label="Elemental analysis (CHNS)",
    analysis=elemental,
    analyse=_analyse,
    columns_text=("a table 'element, found (%)' with one row per measured element (C, H, N, S...); "
                  "'# solvate: 0.5 H2O' to calculate for a solvate"),
    results=(
        ResultKey("formula", "formula"),
        ResultKey("calc_formula", "calculated for"),
        ResultKey("solvate", "solvate"),
        ResultKey("molar_mass_g_mol", "molar mass", "g/mol", 6),
        ResultKey("calc_pct", "calculated", "%", 4),
        ResultKey("found_pct", "found", "%", 4),
        ResultKey("delta_pct", "found − calculated", "%", 2),
        ResultKey("tolerance_pct", "tolerance (absolute)", "%", 2),
        ResultKey("pass", "within ±0.4 %"),
        *(ResultKey(el, el, "%", 4) for el in elemental.MEASURABLE),
    ),
    summary_keys=("calc_formula", "pass"),
    no_figure_reason="an elemental analysis is a handful of numbers; the table shows them",
    example=_example,
)
