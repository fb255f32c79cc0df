"""The project's one pint unit registry.

Every module that converts units imports ``ureg`` and ``Q_`` from here, so quantities
made in different places can be combined (pint refuses to mix registries).

The registry is pint's default one (SI definitions of the SI Brochure, 9th ed.,
BIPM 2019), with offset units such as ``degC`` kept as offset units: ``Q_(25, "degC")``
converts to 298.15 K, and a plain product such as ``degC/min`` is refused unless it is
written as a difference (``delta_degC/min``), which :func:`normalise_unit_text` does for
rates.
"""

from __future__ import annotations

import re
import tokenize

import pint

ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=False)
Q_ = ureg.Quantity

# Characters instruments and spreadsheets write for "micro" and for exponents.
_MICRO = str.maketrans({"\u00b5": "u", "\u03bc": "u"})
_SUPERSCRIPTS = {"\u00b9": "1", "\u00b2": "2", "\u00b3": "3", "\u2070": "0", "\u2074": "4"}
_SUPERSCRIPT_RE = re.compile("(\u207b?)([\u00b9\u00b2\u00b3\u2070\u2074])")
# "cm2", "mm-1", "s-1": a letter directly followed by a (signed) integer is an exponent.
_BARE_EXPONENT_RE = re.compile(r"(?<=[A-Za-z])(-?\d+)(?![\d.])")
# Ways of writing degree Celsius; "C" alone only where a temperature is expected.
_CELSIUS_RE = re.compile(
    r"(?:\u00b0|\u00ba|(?<![A-Za-z_])(?:degrees|degree|deg)\s*)C\b|(?<![A-Za-z_])celsius\b", re.I
)
_CELSIUS_BARE_RE = re.compile(r"(?<![A-Za-z_])C(?![A-Za-z_])")
_KELVIN_RE = re.compile(r"\u00b0\s*K\b")
_FAHRENHEIT_RE = re.compile(r"(?:\u00b0|\u00ba|deg\s*)F\b")


def normalise_unit_text(text: str, *, temperature: bool = False, rate: bool = False) -> str:
    """Rewrite a unit as written in a file or a form into a string pint parses.

    Parameters
    ----------
    text : str
        The unit as written, e.g. ``"µC/cm²"``, ``"mm2"``, ``"°C"``.
    temperature : bool
        The quantity is a temperature: a bare ``C`` means degree Celsius (elsewhere
        ``C`` is the coulomb), ``F`` with a degree sign means degree Fahrenheit.
    rate : bool
        The quantity is a temperature per time (heating rate): Celsius is a
        temperature *difference* here, so ``°C/min`` becomes ``delta_degC/min``.

    Returns
    -------
    str
        The normalised unit text (``""`` for dimensionless).
    """
    out = text.strip().translate(_MICRO)
    out = _SUPERSCRIPT_RE.sub(lambda m: "^" + ("-" if m.group(1) else "") + _SUPERSCRIPTS[m.group(2)], out)
    out = out.replace("\u2212", "-").replace("**", "^")
    out = _BARE_EXPONENT_RE.sub(lambda m: "^" + m.group(1), out)
    out = _KELVIN_RE.sub("K", out)
    if temperature or rate:
        celsius = "delta_degC" if rate else "degC"
        out = _CELSIUS_RE.sub(celsius, out)
        out = _CELSIUS_BARE_RE.sub(celsius, out)
        out = _FAHRENHEIT_RE.sub("delta_degF" if rate else "degF", out)
    if out in {"-", "1", "%"}:
        return "" if out != "%" else "percent"
    return out.replace("%", "percent")


# What pint and Python's tokenizer can raise on a malformed unit expression.
UNIT_PARSE_ERRORS: tuple[type[BaseException], ...] = (
    pint.PintError,
    ValueError,
    TypeError,
    AttributeError,
    SyntaxError,
    KeyError,
    IndexError,
    OverflowError,
    ZeroDivisionError,
    RecursionError,
    AssertionError,  # pint's expression parser asserts on some malformed input ("1 mm^")
    tokenize.TokenError,
)


def parse_unit(text: str) -> pint.Unit:
    """Parse normalised unit text into a pint Unit (``""`` is dimensionless).

    Raises whatever pint raises (see ``UNIT_PARSE_ERRORS``); callers turn that into
    an error message naming the column or field.
    """
    if not text:
        return ureg.dimensionless
    return ureg.parse_units(text)
