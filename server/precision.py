"""How numbers are printed for people: significant digits, and digits that follow an uncertainty.

One home for display precision: the pages (``server/web/format.py``), the report pack and the
paper exports print numbers through these functions.
"""

from __future__ import annotations

import math
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
