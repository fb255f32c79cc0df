"""Canonical quantities of instrument files and the parsing of column headers.

A header names a quantity and its unit, ``name (unit)`` or ``name [unit]``; the
dimensionless quantities (``tan_delta``, ``eps_r``, ``eps_i``) may be written bare or
with empty brackets (``D ()``). :func:`parse_header` matches the name against the
aliases of :data:`QUANTITIES` (case-insensitive, ``_`` and spaces alike), parses the
unit with the project's pint registry and checks its dimension, so ``T (C)`` is a
temperature in degree Celsius while ``Q (C)`` is a charge in coulomb.

The canonical table is the shared data contract of the project (``docs``: common
brief); units follow the SI Brochure, 9th ed. (BIPM 2019).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import cached_property

import pint

from server.errors import IngestError
from server.ingest.units import UNIT_PARSE_ERRORS, normalise_unit_text, parse_unit, ureg


@dataclass(frozen=True)
class CanonicalQuantity:
    """One canonical column: its name, the header names that mean it, and its unit.

    ``unit`` is the canonical unit as pint text; ``unit_optional`` is true only for
    the dimensionless quantities, whose header may omit the unit.
    """

    name: str
    label: str
    symbol: str
    aliases: tuple[str, ...]
    unit: str
    unit_optional: bool = False
    temperature: bool = False

    @cached_property
    def pint_unit(self) -> pint.Unit:
        return parse_unit(self.unit)

    @property
    def dimensionality(self) -> pint.util.UnitsContainer:
        return self.pint_unit.dimensionality

    @property
    def header(self) -> str:
        """The header a file written by this project uses, e.g. ``"E (kV/cm)"``."""
        return f"{self.symbol} ({self.unit})"


_HEAT_FLOW_ALIASES = ("heat flow", "hf", "heat flow rate", "dsc")

QUANTITIES: tuple[CanonicalQuantity, ...] = (
    CanonicalQuantity("E_kV_cm", "electric field", "E", ("e", "field", "electric field", "e field"), "kV/cm"),
    CanonicalQuantity("P_uC_cm2", "polarization", "P", ("p", "polarization", "polarisation"), "uC/cm^2"),
    CanonicalQuantity("V_V", "voltage", "V", ("v", "voltage", "u"), "V"),
    CanonicalQuantity("Q_uC", "charge", "Q", ("q", "charge"), "uC"),
    CanonicalQuantity("I_A", "current", "I", ("i", "current"), "A"),
    CanonicalQuantity("t_s", "time", "t", ("t", "time"), "s"),
    CanonicalQuantity("T_K", "temperature", "T", ("t", "temperature", "temp"), "K", temperature=True),
    CanonicalQuantity("f_Hz", "frequency", "f", ("f", "frequency", "freq"), "Hz"),
    CanonicalQuantity("C_F", "capacitance", "C", ("c", "capacitance", "cp"), "F"),
    CanonicalQuantity(
        "tan_delta",
        "loss tangent",
        "D",
        ("d", "tan delta", "tan d", "tand", "tan \u03b4", "loss", "loss tangent", "dissipation factor"),
        "",
        unit_optional=True,
    ),
    CanonicalQuantity(
        "eps_r",
        "real relative permittivity",
        "eps'",
        ("eps r", "eps'", "epsilon r", "epsilon'", "\u03b5'", "\u03b5r", "permittivity", "eps real"),
        "",
        unit_optional=True,
    ),
    CanonicalQuantity(
        "eps_i",
        "imaginary relative permittivity",
        "eps''",
        ("eps i", "eps''", "epsilon i", "epsilon''", "\u03b5''", "eps imag"),
        "",
        unit_optional=True,
    ),
    CanonicalQuantity("heat_flow_mW", "heat flow", "heat_flow", _HEAT_FLOW_ALIASES, "mW"),
    CanonicalQuantity("heat_flow_W_g", "specific heat flow", "heat_flow", _HEAT_FLOW_ALIASES, "W/g"),
    CanonicalQuantity("k_per_s", "rate constant", "k", ("k", "rate", "rate constant"), "1/s"),
    # mass spectra: m/z is dimensionless (mass in u over charge number), intensity in arbitrary units
    CanonicalQuantity("mz", "mass-to-charge ratio", "m/z", ("m/z", "mz", "mass to charge", "m z"), "",
                      unit_optional=True),
    CanonicalQuantity("intensity", "intensity", "intensity",
                      ("intensity", "int", "abundance", "counts", "relative intensity", "rel intensity", "i"), "",
                      unit_optional=True),
    # diffraction and scattering: the scattering angle 2theta and the scattering vector q = 4 pi sin(theta)/lambda
    CanonicalQuantity("two_theta_deg", "scattering angle 2theta", "2theta",
                      ("2theta", "2 theta", "two theta", "2\u03b8", "2th", "angle"), "deg"),
    CanonicalQuantity("q_per_nm", "scattering vector", "q", ("q", "scattering vector", "momentum transfer"), "1/nm"),
    # second-harmonic generation: signal over that of a reference powder under the same beam
    CanonicalQuantity("shg_ratio", "SHG intensity over the reference's", "SHG/ref",
                      ("shg/ref", "shg ratio", "shg", "i shg/i ref", "shg intensity ratio", "i(2w)/i ref"), "",
                      unit_optional=True),
)

BY_NAME: dict[str, CanonicalQuantity] = {q.name: q for q in QUANTITIES}


@dataclass(frozen=True)
class ColumnSpec:
    """A parsed header: which canonical quantity, and the unit the file uses."""

    header: str
    quantity: CanonicalQuantity
    unit: pint.Unit

    @property
    def canonical(self) -> str:
        return self.quantity.name

    @property
    def needs_conversion(self) -> bool:
        return self.unit != self.quantity.pint_unit


def _norm_name(name: str) -> str:
    out = name.strip().replace("_", " ").replace("\u2019", "'").replace("\u2032", "'").replace("\u2033", "''")
    return re.sub(r"\s+", " ", out).lower()


_ALIAS_INDEX: dict[str, list[CanonicalQuantity]] = {}
for _q in QUANTITIES:
    for _alias in {_norm_name(a) for a in _q.aliases}:
        _ALIAS_INDEX.setdefault(_alias, []).append(_q)


def quantities_named(name: str) -> list[CanonicalQuantity]:
    """The canonical quantities a header name (symbol or alias, any case) may mean; several when only
    the unit tells them apart (``t``: time or temperature)."""
    return list(_ALIAS_INDEX.get(_norm_name(name), []))


def accepted_names() -> str:
    """A one-line summary of the accepted column names, for error messages."""
    parts = []
    for q in QUANTITIES:
        names = ", ".join(dict.fromkeys([q.symbol, *q.aliases[1:4]]))
        parts.append(f"{names} ({q.unit or 'no unit'}) for {q.label}")
    return "; ".join(parts)


def split_header(header: str) -> tuple[str, str | None]:
    """Split ``"name (unit)"`` / ``"name [unit]"`` into name and unit text.

    The unit is the last bracketed group (brackets may nest inside it:
    ``"P (uC/(cm^2))"``); ``None`` when the header has no bracketed unit.
    """
    text = header.strip()
    if not text or text[-1] not in ")]":
        return text, None
    close = text[-1]
    open_ = "(" if close == ")" else "["
    depth = 0
    for i in range(len(text) - 1, -1, -1):
        ch = text[i]
        if ch == close:
            depth += 1
        elif ch == open_:
            depth -= 1
            if depth == 0:
                name = text[:i].strip()
                if not name:
                    return text, None
                return name, text[i + 1 : -1].strip()
    return text, None


def _describe_dimension(qs: list[CanonicalQuantity]) -> str:
    return " or ".join(f"{q.label} (e.g. {q.unit or 'no unit'})" for q in qs)


def parse_header(header: str) -> ColumnSpec:
    """Resolve one header to its canonical quantity and unit.

    Parameters
    ----------
    header : str
        The header as written in the file, e.g. ``"P (µC/cm²)"``, ``"T [°C]"``, ``"D"``.

    Returns
    -------
    ColumnSpec

    Raises
    ------
    IngestError
        With ``column=header``: unknown name, missing unit for a quantity that has
        one, unparsable unit, or a unit of the wrong dimension.
    """
    written = header
    header = header.strip()
    if not header:
        raise IngestError("a column has no name; name each column as 'name (unit)'", column=written)
    name, unit_text = split_header(header)
    exact = BY_NAME.get(name) if unit_text is None else None
    if exact is not None:
        # A canonical name ("E_kV_cm") carries its unit in itself.
        return ColumnSpec(written, exact, exact.pint_unit)
    candidates = _ALIAS_INDEX.get(_norm_name(name), [])
    if not candidates:
        raise IngestError(
            f"unknown column '{name}'; accepted names are: {accepted_names()}",
            column=written,
        )
    if unit_text is None or unit_text == "":
        optional = [q for q in candidates if q.unit_optional]
        if optional:
            q = optional[0]
            return ColumnSpec(written, q, q.pint_unit)
        q = candidates[0]
        raise IngestError(
            f"no unit given for {q.label}; write the header as '{name} ({q.unit})' with the unit of the data",
            column=written,
        )
    matches: list[tuple[CanonicalQuantity, pint.Unit]] = []
    parse_failures: list[str] = []
    for q in candidates:
        text = normalise_unit_text(unit_text, temperature=q.temperature)
        try:
            unit = parse_unit(text)
            dims = unit.dimensionality
        except UNIT_PARSE_ERRORS as exc:
            parse_failures.append(str(exc))
            continue
        if dims == q.dimensionality:
            matches.append((q, unit))
    if len(matches) > 1:
        # "t (s)" vs "T (K)" are told apart by the unit; if still ambiguous, by case.
        exact_case = [m for m in matches if m[0].symbol == name]
        matches = exact_case or matches[:1]
    if matches:
        q, unit = matches[0]
        try:
            one = float(ureg.Quantity(1.0, unit).to(q.pint_unit).magnitude)
        except OverflowError:
            one = math.inf
        if not math.isfinite(one) or one == 0.0:
            raise IngestError(
                f"'{unit_text}' is too far from {q.unit} to convert in floating point", column=written
            )
        return ColumnSpec(written, q, unit)
    if len(parse_failures) == len(candidates):
        raise IngestError(
            f"'{unit_text}' is not a unit pint can read; write it as e.g. '{candidates[0].unit or '1'}'",
            column=written,
        )
    raise IngestError(
        f"'{unit_text}' is not a unit of {_describe_dimension(candidates)}",
        column=written,
    )


def parse_headers(headers: list[str], *, line: int | None = None) -> list[ColumnSpec]:
    """Parse all headers of a table; a quantity given twice is an error.

    ``line`` (the header's file line) is attached to every error raised.
    """
    specs: list[ColumnSpec] = []
    seen: dict[str, str] = {}
    for header in headers:
        try:
            spec = parse_header(header)
        except IngestError as exc:
            raise IngestError(exc.message, line=line, column=exc.column) from exc
        if spec.canonical in seen:
            raise IngestError(
                f"{spec.quantity.label} appears twice (columns '{seen[spec.canonical]}' and "
                f"'{header}'); keep one column per quantity",
                line=line,
                column=header,
            )
        seen[spec.canonical] = header
        specs.append(spec)
    return specs


def convert_to_canonical(values, spec: ColumnSpec):
    """Convert a numpy array from the file's unit to the canonical unit.

    Multiplicative units are scaled by one factor; offset units (degC, degF) go
    through pint's offset conversion, vectorised over the array.
    """
    if not spec.needs_conversion:
        return values
    return ureg.Quantity(values, spec.unit).to(spec.quantity.pint_unit).magnitude
