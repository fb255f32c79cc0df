"""Measurement conditions from the upload form and the file's ``# key: value`` lines.

Analyses receive conditions as keyword arguments in canonical units (``area_cm2``,
``thickness_um``, ``mass_mg``, ``rate_K_min``, ``temperature_K``, ``frequency_Hz``)
plus ``endo``. A value typed in the form wins over the same quantity in the file.
Every value must carry its unit (``"0.785 mm^2"``, ``"25 degC"``, ``"1 kHz"``); pint
does the conversion with the SI definitions (SI Brochure, 9th ed., BIPM 2019).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from server.errors import IngestError
from server.ingest.units import UNIT_PARSE_ERRORS, normalise_unit_text, parse_unit, ureg


@dataclass(frozen=True)
class _Spec:
    field: str  # form field name, used in errors
    kwarg: str  # keyword argument of the analyses
    unit: str  # canonical unit (pint)
    example: str
    aliases: tuple[str, ...]  # metadata keys (normalised) meaning this quantity
    positive: bool = True
    temperature: bool = False
    rate: bool = False


_SPECS: tuple[_Spec, ...] = (
    _Spec("area", "area_cm2", "cm^2", "0.785 mm^2", ("area", "sample area", "electrode area")),
    _Spec("thickness", "thickness_um", "um", "150 um", ("thickness", "d", "sample thickness")),
    _Spec("mass", "mass_mg", "mg", "4.2 mg", ("mass", "sample mass")),
    _Spec("rate", "rate_K_min", "K/min", "10 K/min", ("rate", "heating rate", "scan rate"), rate=True),
    _Spec(
        "temperature",
        "temperature_K",
        "K",
        "300 K",
        ("temperature", "temp", "measurement temperature"),
        temperature=True,
    ),
    _Spec("frequency", "frequency_Hz", "Hz", "1 kHz", ("frequency", "freq")),
    # NMR: the spectrometer's frequency for the observed nucleus (dnu in Hz scales with it)
    _Spec("spectrometer", "spectrometer_MHz", "MHz", "400 MHz",
          ("spectrometer", "spectrometer frequency", "observe frequency")),
)
_TEXT_FIELDS: dict[str, tuple[str, ...]] = {
    "instrument": ("instrument",),
    "operator": ("operator",),
    "notes": ("notes", "note", "comment", "comments"),
    "nucleus": ("nucleus", "observed nucleus"),
    "solvent": ("solvent",),
    "sweep": ("sweep", "sweep direction", "temperature sweep"),
}
#: A stated temperature sweep direction (a series on heating or on cooling).
SWEEP_DIRECTIONS: tuple[str, ...] = ("heating", "cooling")
_ENDO_ALIASES = ("endo", "endo direction", "endotherm")

#: The condition fields a measurement kind may say it needs (``server/kinds``).
CONDITION_FIELDS: tuple[str, ...] = tuple(s.field for s in _SPECS) + ("endo",)
#: The text conditions (instrument, operator, notes ...).
TEXT_FIELDS: tuple[str, ...] = tuple(_TEXT_FIELDS)
#: How to write each quantity (form placeholders, error messages).
CONDITION_EXAMPLES: dict[str, str] = {s.field: s.example for s in _SPECS}
#: Every field of the upload form besides ``kind`` and ``file``.
FORM_FIELDS: tuple[str, ...] = CONDITION_FIELDS + tuple(_TEXT_FIELDS)

_NUMBER_RE = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*")


def _norm_key(key: str) -> str:
    return re.sub(r"\s+", " ", str(key).replace("_", " ")).strip().lower()


@dataclass(frozen=True)
class Conditions:
    """Measurement conditions in canonical units; ``None`` where not given.

    ``sources`` says where each given value came from (``"form"`` or ``"file"``);
    ``extra`` keeps the file's other metadata as strings.
    """

    area_cm2: float | None = None
    thickness_um: float | None = None
    mass_mg: float | None = None
    rate_K_min: float | None = None
    temperature_K: float | None = None
    frequency_Hz: float | None = None
    spectrometer_MHz: float | None = None
    endo: str = "up"
    instrument: str | None = None
    operator: str | None = None
    notes: str | None = None
    nucleus: str | None = None
    solvent: str | None = None
    sweep: str | None = None
    extra: dict[str, str] = field(default_factory=dict)
    sources: dict[str, str] = field(default_factory=dict)

    def as_kwargs(self, *, endo: bool = False) -> dict[str, float | str | None]:
        """The numeric conditions as keyword arguments for analyses (``endo`` on request)."""
        out: dict[str, float | str | None] = {s.kwarg: getattr(self, s.kwarg) for s in _SPECS}
        if endo:
            out["endo"] = self.endo
        return out

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of every condition, with ``extra`` and ``sources``."""
        out: dict[str, Any] = self.as_kwargs(endo=True)
        out.update(
            instrument=self.instrument,
            operator=self.operator,
            notes=self.notes,
            nucleus=self.nucleus,
            solvent=self.solvent,
            sweep=self.sweep,
            extra=dict(self.extra),
            sources=dict(self.sources),
        )
        return out


def form_value_as_given(conditions: Mapping[str, Any], name: str) -> str | None:
    """A stored condition (``Conditions.to_dict()``) as form text, if it was typed on the form.

    Re-analysis feeds these back, so values typed once are applied again while file
    metadata is read again from the raw file. Quantities come back in their canonical unit
    (``repr`` keeps every digit).
    """
    if conditions.get("sources", {}).get(name) != "form":
        return None  # file values are read again; sample defaults are applied again by the caller
    spec = next((s for s in _SPECS if s.field == name), None)
    if spec is None:
        return conditions.get(name)
    value = conditions.get(spec.kwarg)
    return f"{value!r} {spec.unit}" if value is not None else None


def parse_quantity(
    text: str,
    *,
    field: str,
    unit: str,
    example: str,
    temperature: bool = False,
    rate: bool = False,
    positive: bool = True,
    origin: str = "",
) -> float:
    """Parse ``"<number> <unit>"`` and return the magnitude in ``unit``.

    Parameters
    ----------
    text : str
        As typed, e.g. ``"0.785 mm^2"``, ``"25 degC"``.
    field : str
        Form field name, attached to errors.
    unit : str
        Canonical unit (pint text), e.g. ``"cm^2"``.
    example : str
        Shown in error messages (``"write e.g. '0.785 mm^2'"``).
    temperature, rate : bool
        Allow ``C`` for degree Celsius; for a rate Celsius is a temperature difference.
    positive : bool
        Refuse zero and negative values (temperatures are always checked against
        absolute zero).
    origin : str
        Appended to error messages to say where the value came from.

    Raises
    ------
    IngestError
        ``field=field``: no number, no unit, unreadable unit, wrong dimension,
        not positive, below absolute zero.
    """
    shown = text.strip()
    m = _NUMBER_RE.fullmatch(text)
    if m is None:
        raise IngestError(f"'{shown}' is not a number with a unit; write e.g. '{example}'{origin}", field=field)
    number, unit_text = m.group(1), m.group(2)
    if not unit_text:
        hint = f"{number} {example.split(' ', 1)[1]}"
        raise IngestError(f"'{shown}' has no unit; write e.g. '{hint}'{origin}", field=field)
    target = parse_unit(unit)
    try:
        given = parse_unit(normalise_unit_text(unit_text, temperature=temperature, rate=rate))
        dims = given.dimensionality
    except UNIT_PARSE_ERRORS as exc:
        raise IngestError(f"'{unit_text}' is not a unit; write e.g. '{example}'{origin}", field=field) from exc
    if dims != target.dimensionality:
        raise IngestError(
            f"'{unit_text}' is not a unit of {field}; write e.g. '{example}'{origin}",
            field=field,
        )
    try:
        value = float(ureg.Quantity(float(number), given).to(target).magnitude)
    except OverflowError as exc:
        raise IngestError(f"'{shown}' is out of range{origin}", field=field) from exc
    if not math.isfinite(value):
        raise IngestError(f"'{shown}' is out of range{origin}", field=field)
    if temperature and value < 0:
        raise IngestError(f"'{shown}' is below absolute zero{origin}", field=field)
    if positive and value <= 0:
        raise IngestError(f"'{shown}' must be greater than zero{origin}", field=field)
    return value


def _form_value(form: Mapping[str, str | None], name: str) -> str | None:
    value = form.get(name)
    if value is None:
        return None
    value = str(value).strip()
    return value or None


def _file_value(
    metadata: Mapping[str, str], aliases: tuple[str, ...], field: str, consumed: set[str]
) -> tuple[str, str] | None:
    """(key as written, value) from the file metadata; two different values -> error."""
    found: list[tuple[str, str]] = []
    for key, value in metadata.items():
        if _norm_key(key) in aliases:
            consumed.add(key)
            v = str(value).strip()
            if v:
                found.append((key, v))
    if not found:
        return None
    distinct = {v for _, v in found}
    if len(distinct) > 1:
        listed = ", ".join(f"'# {k}: {v}'" for k, v in found)
        raise IngestError(
            f"the file gives {field} more than once with different values ({listed}); keep one", field=field
        )
    return found[0]


def _parse_endo(text: str, origin: str) -> str:
    word = _norm_key(text)
    word = re.sub(r"^(?:endo(?:therm(?:ic)?)?s?)\s*", "", word)
    if word in {"up", "down"}:
        return word
    raise IngestError(f"'{text.strip()}' is neither 'up' nor 'down'{origin}", field="endo")


def _sweep_text(form: Mapping[str, str | None], file_metadata: Mapping[str, str]) -> str:
    typed = _form_value(form, "sweep")
    if typed is not None:
        return typed
    found = _file_value(file_metadata, _TEXT_FIELDS["sweep"], "sweep", set())
    return found[1] if found else ""


def with_defaults(conditions: Conditions, defaults: Mapping[str, float | None], *, source: str) -> Conditions:
    """``conditions`` with the quantities it lacks taken from ``defaults`` (canonical kwargs such as
    ``area_cm2``), their ``sources`` entry set to ``source``. A value the upload gave always wins."""
    by_kwarg = {s.kwarg: s for s in _SPECS}
    changes: dict[str, Any] = {}
    sources = dict(conditions.sources)
    for kwarg, value in defaults.items():
        if value is None or getattr(conditions, kwarg) is not None:
            continue
        changes[kwarg] = float(value)
        sources[by_kwarg[kwarg].field] = source
    if not changes:
        return conditions
    return replace(conditions, **changes, sources=sources)


def parse_conditions(form: Mapping[str, str | None], file_metadata: Mapping[str, str]) -> Conditions:
    """Merge form fields and file metadata into :class:`Conditions` (the form wins).

    Parameters
    ----------
    form : Mapping[str, str | None]
        Form fields by name: ``area``, ``thickness``, ``mass``, ``rate``,
        ``temperature``, ``frequency``, ``endo``, ``instrument``, ``operator``,
        ``notes``. Empty strings and ``None`` count as not given; other keys are
        ignored.
    file_metadata : Mapping[str, str]
        ``ParsedTable.metadata``. Keys are matched case-insensitively with ``_`` and
        spaces alike, and with aliases (``sample area``, ``d``, ``sample mass``,
        ``heating rate``, ``temp``, ``freq`` ...). Keys that are not conditions go
        to ``extra``.

    Returns
    -------
    Conditions

    ``sweep`` (``heating`` or ``cooling``) states the direction of the temperature run a
    measurement belongs to.

    Raises
    ------
    IngestError
        With ``field`` set to the form field name: missing unit, unparsable value,
        wrong dimension, zero or negative area/thickness/mass/rate/frequency, a
        temperature below absolute zero, an ``endo`` other than up/down, or the file
        giving one quantity twice with different values.
    """
    consumed: set[str] = set()
    values: dict[str, Any] = {}
    sources: dict[str, str] = {}

    def pick(name: str, aliases: tuple[str, ...]) -> tuple[str, str] | None:
        """(value, origin text for messages); the form wins, but file duplicates are still consumed."""
        from_file = _file_value(file_metadata, aliases, name, consumed)
        typed = _form_value(form, name)
        if typed is not None:
            sources[name] = "form"
            return typed, ""
        if from_file is not None:
            sources[name] = "file"
            key, value = from_file
            return value, f" (from the file line '# {key}: {value}')"
        return None

    for spec in _SPECS:
        got = pick(spec.field, spec.aliases)
        if got is None:
            continue
        text, origin = got
        values[spec.kwarg] = parse_quantity(
            text,
            field=spec.field,
            unit=spec.unit,
            example=spec.example,
            temperature=spec.temperature,
            rate=spec.rate,
            positive=spec.positive,
            origin=origin,
        )
    endo = pick("endo", _ENDO_ALIASES)
    values["endo"] = _parse_endo(*endo) if endo is not None else "up"
    for name, aliases in _TEXT_FIELDS.items():
        got = pick(name, aliases)
        values[name] = got[0] if got is not None else None
    if values["sweep"] is not None:
        values["sweep"] = _norm_key(values["sweep"])
        if values["sweep"] not in SWEEP_DIRECTIONS:
            raise IngestError(f"sweep '{_sweep_text(form, file_metadata)}' is neither 'heating' nor 'cooling'",
                              field="sweep")
    extra = {str(k).strip().lower(): str(v) for k, v in file_metadata.items() if k not in consumed}
    return Conditions(**values, extra=extra, sources=sources)
