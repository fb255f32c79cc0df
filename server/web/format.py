"""Jinja filters that turn result keys with units in their names into labels people read."""

from __future__ import annotations

from typing import Any, Optional

from markupsafe import Markup

from .. import verdict_codes
import math

from ..chem.identity import formula_html
from ..precision import error_key, significant, time_unit, trade_unit, with_uncertainty

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

def _result_key(key: str, kind: str | None):
    """The label, unit and digits a kind module declares for ``key`` (``server/kinds/``), if any."""
    from ..kinds import KINDS

    if kind in KINDS:
        return KINDS[kind].result_key(key)
    return next((rk for k in KINDS.values() if (rk := k.result_key(key)) is not None), None)


def split_key(key: str, kind: str | None = None) -> tuple[str, str]:
    """('pr_pos_uC_cm2', 'pe_loop') -> ('Pr+', 'µC cm⁻²'): the kind's own label, else the unit read off the
    key's suffix (keys without a unit suffix keep an empty unit); the unit as the trade prints it
    (:func:`server.precision.trade_unit`)."""
    rk = _result_key(key, kind)
    if rk is not None:
        return rk.label, trade_unit(rk.unit)
    for suffix, unit in UNIT_SUFFIXES:
        if key.endswith(suffix) and len(key) > len(suffix):
            return key[: -len(suffix)].replace("_", " "), trade_unit(unit)
    return key.replace("_", " "), ""


def digits_of(key: str, kind: str | None = None) -> int:
    rk = _result_key(key, kind)
    return rk.digits if rk is not None else 4


def number(value: Any, digits: int = 4) -> str:
    """Numbers with a sensible number of significant digits (a list of numbers joined by commas); other
    values as text."""
    if isinstance(value, (list, tuple)) and all(isinstance(v, (int, float)) for v in value):
        return ", ".join(significant(v, digits) for v in value)
    return significant(value, digits)


def _finite(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def scalar_items(results: dict[str, Any], kind: str | None = None,
                 apparent_keys: Any = None) -> list[tuple[str, str, Any, int, str]]:
    """(label, unit, value, significant digits, uncertainty) for the scalar results, in the analysis's order;
    apparent values (the analysis's list, or ``apparent_keys`` from ``server/merit.py``) are labelled so.

    A value with its standard error beside it is printed with the error's last digit and the error with two
    significant digits (:func:`server.precision.with_uncertainty`), and the error row is folded into it; a
    time under a second is printed in ms, µs or ns (:func:`server.precision.time_unit`)."""
    out = []
    apparent = set(results.get("apparent") or ()) | set(apparent_keys or ())
    errors = {e for k in results if (e := error_key(k, results))}
    for key, value in results.items():
        if not isinstance(value, (int, float, str, bool)) or key in ("verdict", "source") or key in errors:
            continue
        label, unit = split_key(key, kind)
        label = f"apparent {label}" if key in apparent else label
        err = results.get(error_key(key, results) or "")
        if unit == "s" and _finite(value) and value != 0:
            factor, unit = time_unit(float(value))
            value = float(value) * factor
            err = float(err) * factor if _finite(err) else None
        if _finite(value) and _finite(err) and err > 0:
            text, err_text = with_uncertainty(float(value), float(err))
            out.append((label, unit, text, digits_of(key, kind), err_text))
        else:
            out.append((label, unit, value, digits_of(key, kind), ""))
    return out


def list_table(rows: list[dict[str, Any]], kind: str | None = None) -> tuple[list[tuple[str, str]], list[list[tuple[str, str]]]]:
    """A list result (e.g. DSC peaks) as ``(headers, body)``: headers (label, unit), cells (value text, error text).
    A column's standard error beside it in the rows (:func:`server.precision.error_key`) is folded into it, the
    value printed to the error's last digit (:func:`server.precision.with_uncertainty`), as :func:`scalar_items`
    does for single values."""
    keys = list(rows[0].keys()) if rows else []
    errors = {e for row in rows for k in row if (e := error_key(k, row))}
    shown = [k for k in keys if k not in errors]
    headers = [split_key(k, kind) for k in shown]
    body = []
    for row in rows:
        cells = []
        for k in shown:
            value, err = row.get(k), row.get(error_key(k, row) or "")
            if _finite(value) and _finite(err) and err > 0:
                cells.append(with_uncertainty(float(value), float(err)))
            else:
                cells.append((number(value, digits_of(k, kind)), ""))
        body.append(cells)
    return headers, body


def summary(kind: str, results: dict[str, Any], apparent_keys: Any = None) -> str:
    """The one-line summary of a measurement (:meth:`server.kinds.base.Kind.summary_text`): its kind's
    summary keys, labelled, values with an uncertainty as value ± error, units as the trade prints them."""
    from ..kinds import KINDS

    return KINDS[kind].summary_text(results, apparent_keys) if kind in KINDS else ""


def shared_code_prefix(codes: Any) -> str:
    """The campaign prefix every one of ``codes`` starts with ("RVZ-" for RVZ-00001, RVZ-00002), or ""
    when they do not all share one (codes of an earlier prefix stay as stored, so a list can mix)."""
    heads = {code.split("-", 1)[0] + "-" if "-" in code else "" for code in codes}
    return heads.pop() if len(heads) == 1 else ""


def short_code(code: str, prefix: str) -> str:
    """``code`` without the shared ``prefix`` a table states once in its caption."""
    return code[len(prefix):] if prefix and code.startswith(prefix) and len(code) > len(prefix) else code


def formula(value: Optional[str]) -> Markup:
    """A chemical formula with its counts as subscripts (``{{ c.formula | formula }}``); "" for none."""
    return Markup(formula_html(value)) if value else Markup("")


def install(env) -> None:  # noqa: ANN001 - a jinja2 Environment
    from ..services.accounts import shown_name, shown_text
    from ..services.views import OWN_T_SORTS

    env.filters["formula"] = formula
    env.filters["number"] = number
    env.filters["unit"] = trade_unit  # {{ rk.unit | unit }}: µC cm⁻², J mol⁻¹ K⁻¹ (server/precision.py)
    env.filters["who"] = shown_name  # {{ label | who(actor) }}: names hidden from upload tokens and visitors
    env.filters["unquoted"] = shown_text  # {{ message | unquoted(actor) }}: quoted labels likewise
    env.filters["scalar_items"] = scalar_items
    env.filters["short_code"] = short_code
    env.globals["shared_code_prefix"] = shared_code_prefix
    env.globals["own_t_sorts"] = OWN_T_SORTS  # registry columns whose header says "at T (K)"
    env.globals["split_key"] = split_key
    env.globals["digits_of"] = digits_of
    env.globals["with_uncertainty"] = with_uncertainty
    env.globals["list_table"] = list_table
    env.globals["measurement_summary"] = summary
    # The verdict vocabulary (server.verdict_codes): rows in strength order, sentence and short labels.
    env.globals["verdicts"] = verdict_codes.VERDICTS
    env.globals["verdict_labels"] = verdict_codes.LABELS
    env.globals["verdict_short"] = verdict_codes.SHORT
