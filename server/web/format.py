"""Jinja filters that turn result keys with units in their names into labels people read."""

from __future__ import annotations

import math
from typing import Any

# Suffix of a key (after the quantity) -> unit as printed. Longest suffixes first.
UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_uC_cm2", "µC/cm²"),
    ("_kV_cm", "kV/cm"),
    ("_mJ_cm3", "mJ/cm³"),
    ("_kcal_mol", "kcal/mol"),
    ("_cal_molK", "cal/(mol K)"),
    ("_kJ_mol", "kJ/mol"),
    ("_J_molK", "J/(mol K)"),
    ("_J_g", "J/g"),
    ("_g_cm3", "g/cm³"),
    ("_g_mol", "g/mol"),
    ("_K_min", "K/min"),
    ("_per_s", "1/s"),
    ("_cm2", "cm²"),
    ("_um", "µm"),
    ("_mg", "mg"),
    ("_Hz", "Hz"),
    ("_mW", "mW"),
    ("_A3", "Å³"),
    ("_A", "Å"),
    ("_D", "D"),
    ("_K", "K"),
    ("_s", "s"),
)

LABELS = {
    "pr": "Pr", "pr_pos": "Pr+", "pr_neg": "Pr−", "ec": "Ec", "ec_pos": "Ec+", "ec_neg": "Ec−",
    "pmax": "Pmax", "emax": "Emax", "ps": "Ps", "imprint": "imprint", "loss": "loss per cycle",
    "t_peak": "T peak", "eps_peak": "ε′ peak", "t0": "T0", "curie_constant": "Curie constant C",
    "dg": "ΔG", "dh": "ΔH", "ds": "ΔS", "dg298": "ΔG(298 K)", "ea": "Ea", "k": "k",
}


# Unit cell keys from the crystal analysis (lengths in Å, angles in degrees, volume in Å³).
CELL_UNITS = {"a": "Å", "b": "Å", "c": "Å", "alpha": "°", "beta": "°", "gamma": "°", "volume": "Å³"}


def split_key(key: str) -> tuple[str, str]:
    """('pr_pos_uC_cm2') -> ('Pr+', 'µC/cm²'); keys without a unit suffix keep an empty unit."""
    if key in CELL_UNITS:
        return key, CELL_UNITS[key]
    for suffix, unit in UNIT_SUFFIXES:
        if key.endswith(suffix) and len(key) > len(suffix):
            base = key[: -len(suffix)]
            return LABELS.get(base, base.replace("_", " ")), unit
    return LABELS.get(key, key.replace("_", " ")), ""


def number(value: Any, digits: int = 4) -> str:
    """Numbers with a sensible number of significant digits; other values as text."""
    if isinstance(value, bool) or value is None:
        return "—" if value is None else ("yes" if value else "no")
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return "—"
        if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-3):
            return f"{value:.{digits - 1}e}"
        return f"{value:.{digits}g}"
    return str(value)


def scalar_items(results: dict[str, Any]) -> list[tuple[str, str, Any]]:
    """(label, unit, value) for the scalar results, in the analysis's own order."""
    out = []
    for key, value in results.items():
        if isinstance(value, (int, float, str, bool)):
            if key in ("verdict", "source"):
                continue
            label, unit = split_key(key)
            out.append((label, unit, value))
    return out


# Short names for tables and map cells; the full sentences (analysis.verdict.LABELS) go in legends and titles.
VERDICT_SHORT = {
    "proven_ferroelectric": "ferroelectric",
    "switching_phase_unknown": "switches, phase unknown",
    "polar_unswitched": "polar, not switched",
    "nonpolar": "non-polar",
    "transition_only": "transition only",
    "no_switching_seen": "no switching seen",
    "conflicting": "conflicting",
    "untested": "untested",
}


def install(env) -> None:  # noqa: ANN001 - a jinja2 Environment
    from ..services.accounts import shown_name, shown_text

    env.filters["number"] = number
    env.filters["who"] = shown_name  # {{ label | who(actor) }}: names hidden from upload tokens and visitors
    env.filters["unquoted"] = shown_text  # {{ message | unquoted(actor) }}: quoted labels likewise
    env.filters["scalar_items"] = scalar_items
    env.globals["split_key"] = split_key
    env.globals["verdict_short"] = VERDICT_SHORT
