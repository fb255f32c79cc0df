"""How numbers are printed for people: significant digits, and digits that follow an uncertainty.

One home for display precision: the pages (``server/web/format.py``), the report pack and the
paper exports print numbers through these functions.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from typing import Any, Optional

#: Significant digits an uncertainty is quoted with (JCGM 100:2008, "Guide to the expression of
#: uncertainty in measurement", 7.2.6: "at most two significant digits").
UNCERTAINTY_DIGITS = 2


def significant(value: Any, digits: int = 4) -> str:
    """Numbers with ``digits`` significant digits (scientific notation outside 1e-3 ... 1e6);
    None and non-finite numbers as an em dash, booleans as yes/no, other values as text."""
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


def rounded(value: Any, digits: int = 4) -> Any:
    """A number kept as a number, rounded to ``digits`` significant digits (the digits
    :func:`significant` prints); None, non-finite numbers and non-numbers pass unchanged."""
    if isinstance(value, bool) or not isinstance(value, float) or not math.isfinite(value) or value == 0:
        return value
    return round(value, digits - 1 - math.floor(math.log10(abs(value))))


def with_uncertainty(value: Optional[float], err: Optional[float], digits: int = 4) -> tuple[str, str]:
    """``(value, uncertainty)`` as text, the value rounded to the last digit of the uncertainty,
    the uncertainty to :data:`UNCERTAINTY_DIGITS` significant digits (JCGM 100:2008, 7.2.6).

    ``18.634, 0.2371`` -> ``("18.63", "0.24")``; without a usable uncertainty the value keeps
    ``digits`` significant digits and the uncertainty is empty.
    """
    if value is None or not math.isfinite(value):
        return "", ""
    if err is None or not math.isfinite(err) or err <= 0:
        return significant(float(value), digits), ""
    exponent = math.floor(math.log10(err)) - (UNCERTAINTY_DIGITS - 1)
    decimals = max(0, -exponent)
    step = 10.0 ** exponent
    value_r = round(value / step) * step
    return f"{value_r:.{decimals}f}", f"{round(err / step) * step:.{decimals}f}"


def decimals_within(err: Optional[float], most: int = 1) -> Optional[int]:
    """Decimals to print a value with so its standard uncertainty ``err`` is at most one unit of the last digit
    (the chemist's rule that only the last digit is uncertain; common practice), at most ``most``; None when
    the uncertainty exceeds 1 (no digit after the units, nor the units themselves, is sure) or is unknown.
    ``0.055`` -> 1, ``0.22`` -> 0, ``3.0`` -> None."""
    if err is None or not math.isfinite(err) or err <= 0 or err > 1:
        return None
    return min(most, max(0, math.floor(-math.log10(err) + 1e-9)))


def error_key(key: str, results: Mapping[str, Any]) -> Optional[str]:
    """The key of ``key``'s standard error in ``results``, by the house naming (``ea_kJ_mol`` ->
    ``ea_err_kJ_mol``, ``eps_inf`` -> ``eps_inf_err``), if present."""
    cuts = [i for i, ch in enumerate(key) if ch == "_"] + [len(key)]
    for i in cuts:
        cand = key[:i] + "_err" + key[i:]
        if cand in results and cand != key:
            return cand
    return None


def value_text(value: Any, err: Any = None, digits: int = 4) -> str:
    """``value ± err`` with the digits following the uncertainty (:func:`with_uncertainty`,
    ``19.1934, 0.2712`` -> ``19.19 ± 0.27``); without a usable uncertainty, ``digits`` significant digits."""
    usable = (isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
              and isinstance(err, (int, float)) and not isinstance(err, bool) and math.isfinite(err) and err > 0)
    if not usable:
        return significant(value, digits)
    text, err_text = with_uncertainty(float(value), float(err))
    return f"{text} ± {err_text}"


#: Sub-second times printed in the unit the trade uses (a 0.95 ms pulse, not 9.463e-04 s).
_TIME_UNITS = ((1.0, 1.0, "s"), (1e-3, 1e3, "ms"), (1e-6, 1e6, "µs"), (1e-9, 1e9, "ns"))


def time_unit(value_s: float) -> tuple[float, str]:
    """``(factor, unit)`` to print a time in seconds: the largest of s, ms, µs, ns in which it reads at least
    0.1 (``9.463e-4`` -> 0.9463 ms, ``2e-5`` -> 20 µs, ``0.5`` -> 0.5 s)."""
    a = abs(value_s)
    for scale, factor, unit in _TIME_UNITS:
        if a >= 0.1 * scale:
            return factor, unit
    return _TIME_UNITS[-1][1], _TIME_UNITS[-1][2]


#: The space between the factors of a unit on a page: U+202F NARROW NO-BREAK SPACE, a thin space the
#: line never breaks at (SI Brochure, 9th ed. (2019), 5.4.6: a space or a half-high dot between factors).
UNIT_SPACE = "\u202f"
_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")
_PLAIN = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻", "0123456789-")
_FACTOR = re.compile(r"(?P<base>[^\s^⁰¹²³⁴⁵⁶⁷⁸⁹⁻]+)(?:\^(?P<caret>[+-]?\d+)|(?P<sup>[⁻⁰¹²³⁴⁵⁶⁷⁸⁹]+))?")
#: Unit words printed as the trade writes them.
_WORDS = {"uC": "µC", "um": "µm", "us": "µs", "deg": "°"}


def _factors(text: str) -> list[tuple[str, int]]:
    out = []
    for token in text.replace("·", " ").split():
        m = _FACTOR.fullmatch(token)
        if m is None:
            raise ValueError(token)
        exp = m["caret"] or (m["sup"].translate(_PLAIN) if m["sup"] else "1")
        out.append((_WORDS.get(m["base"], m["base"]), int(exp)))
    return out


def trade_unit(unit: str, space: str = UNIT_SPACE) -> str:
    """A unit as the trade prints it: a quotient as factors with negative superscript powers, joined by
    a thin space (``space``; a plain one for figure fonts), the minus a true superscript minus.

    ``µC/cm²`` -> ``µC cm⁻²``, ``kV/cm`` -> ``kV cm⁻¹``, ``J/(mol K)`` -> ``J mol⁻¹ K⁻¹``, ``1/nm`` ->
    ``nm⁻¹``, ``s^-1`` -> ``s⁻¹``; units without a quotient or power (``K``, ``Å``, ``%``) and text that is
    not a unit pass unchanged (IUPAC Green Book, 3rd ed. (2007), 1.3; SI Brochure, 9th ed., 5.4.6).
    """
    text = (unit or "").strip()
    if not text or text.count("/") > 1 or not re.search(r"[/^]", text):
        return _WORDS.get(text, text)
    num, _, den = text.partition("/")
    if "(" in num:
        return text
    den = den.strip()
    if den.startswith("(") and den.endswith(")"):
        den = den[1:-1]
    try:
        factors = [f for f in _factors(num) if f[0] != "1"] + [(b, -e) for b, e in _factors(den)]
    except ValueError:
        return text
    if not factors:
        return text
    return space.join(b + (str(e).translate(_SUPERSCRIPT) if e != 1 else "") for b, e in factors)


#: A unit in parentheses after a space (an axis title's ``(µC/cm²)``), or a quotient unit after a number
#: (``ΔH = 5.6 J/g``); quotients elsewhere (``T/Tc``, ``ln(k/T)``) are quantities, not units.
_TEXT_UNIT = re.compile(r"(?:(?<=\s)|^)\(((?:[^()]|\([^()]*\))+)\)|(?<=\d )([A-Za-zµ]+[²³]?/[A-Za-zµ]+[²³]?)(?![\w/])")


def trade_text(text: str, space: str = UNIT_SPACE) -> str:
    """Units inside a title or a label printed by :func:`trade_unit`: ``P (µC/cm²)`` -> ``P (µC cm⁻²)``,
    ``ΔS (J/(mol K))`` -> ``ΔS (J mol⁻¹ K⁻¹)``, ``ΔH = 5.6 J/g`` -> ``ΔH = 5.6 J g⁻¹``; ``T/Tc`` is kept."""
    def repl(m: re.Match) -> str:
        return f"({trade_unit(m[1], space)})" if m[1] is not None else trade_unit(m[2], space)

    return _TEXT_UNIT.sub(repl, text or "")
