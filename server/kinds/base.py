"""What a measurement kind is: the parts every module under ``server/kinds/`` declares.

A kind binds an upload ``kind`` name to everything the rest of the application needs to
know about it, in one place:

* what it reads: column sets named by the canonical quantities of
  :mod:`server.ingest.columns`, and the measurement conditions it uses, named by the
  condition fields of :mod:`server.ingest.conditions`;
* the pure analysis it calls (``server/analysis/<method>.py``), whose ``METHOD`` and
  ``VERSION`` it carries;
* its result keys with labels, units and display precision (the web formatter reads them);
* the evidence it gives the compound verdict, the derived rows it keeps in step (barriers,
  crystal phases) and its contribution to the CompoundStats row;
* its figure, its one-line summary and its example-file generator.

:func:`check_kind` says what a kind lacks; ``server.kinds`` refuses to register an
incomplete kind and ``tests/kinds`` checks every registered one.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import ModuleType
from typing import Any, Optional

import numpy as np
import plotly.graph_objects as go

from ..ingest.columns import BY_NAME as QUANTITY_BY_NAME
from ..precision import UNIT_SPACE, error_key, trade_unit, value_text
from ..ingest.conditions import FORM_FIELDS, Conditions
from ..ingest.table import read_table, to_csv_bytes


@dataclass(frozen=True)
class Context:
    """What the registry knows about the sample, for analyses that need it."""

    formula: Optional[str] = None
    molar_mass_g_mol: Optional[float] = None
    smiles: Optional[str] = None
    #: The compound's live crystal structures (``server.analysis.pxrd.ReferenceStructure``), given only
    #: to kinds with ``needs_structures``.
    structures: tuple[Any, ...] = ()


@dataclass(frozen=True)
class ResultKey:
    """One result key as people read it: ``pr_uC_cm2`` -> ``Pr``, ``µC/cm²``, 3 significant digits."""

    key: str
    label: str
    unit: str = ""
    digits: int = 4


@dataclass(frozen=True)
class Need:
    """Condition fields (``area``, ``thickness``...) a kind uses, and when it needs them."""

    fields: tuple[str, ...]
    when: str = ""

    def text(self) -> str:
        return " and ".join(self.fields) + (f" {self.when}" if self.when else "")


@dataclass(frozen=True)
class Evidence:
    """What a stored measurement tells the verdict: the temperature it speaks for and details."""

    temperature_K: Optional[float]
    details: dict[str, Any] = field(default_factory=dict)


def evidence_at_measured_temperature(results: Mapping[str, Any], temperature_K: Optional[float]) -> Evidence:
    """Evidence that speaks for the temperature the file was measured at (loops, PUND), with the field,
    drive frequency or pulse width and Pr the verdict needs (a negative result keeps its highest field)."""
    keys = ("emax_kV_cm", "e_pulse_kV_cm", "frequency_Hz", "pulse_width_s", "pr_uC_cm2")
    return Evidence(temperature_K, {k: results[k] for k in keys if results.get(k) is not None})


@dataclass(frozen=True)
class Line:
    """One line of a compact cell: a label, a value printed to ``digits`` significant digits (text passes
    unchanged; None prints the label alone), its standard uncertainty if known, and its unit as declared (the page
    prints it as the trade does)."""

    label: str
    value: Any = None
    digits: int = 4
    unit: str = ""
    #: The value's standard uncertainty, same unit: printed as ``value ± err``, the digits following it
    #: (:func:`server.precision.with_uncertainty`); None keeps ``digits`` significant digits.
    err: Any = None


@dataclass(frozen=True)
class CompactTable:
    """A list result the measurement page shows as a table at desktop widths that stacks into labelled
    blocks on a phone, instead of a wide table that scrolls sideways (``templates/partials/compact_table.html``).

    ``replaces`` is the result key whose plain table it takes the place of; ``columns`` gives (label, unit as
    declared) per column, the first naming the rows; each row holds one cell per column, a cell its lines."""

    replaces: str
    caption: str
    columns: tuple[tuple[str, str], ...]
    rows: tuple[tuple[tuple[Line, ...], ...], ...]
    note: str = ""


@dataclass(frozen=True)
class Example:
    """An example upload: its file name, its bytes (conditions in ``# key: value`` lines) and the
    model parameters it was generated from, so tests can check the analysis recovers them."""

    filename: str
    raw: bytes
    model: dict[str, Any] = field(default_factory=dict)


# Sample geometry of the example pellets (typical pressed-pellet values, common practice).
EXAMPLE_AREA_CM2 = 0.0785  # 3.16 mm diameter electrode
EXAMPLE_THICKNESS_UM = 150.0
#: The bowl every example file describes: the hexamethoxy CH2-bridged triphenylene bowl
#: (C27H24O6), the first compound of the invented demo campaign.
EXAMPLE_SMILES = "COc1c(OC)c2c3c4c1Cc1c(OC)c(OC)c5c(c14)c1c(c(OC)c(OC)c(c31)C2)C5"


def example_csv(frame, conditions: Mapping[str, str], metadata: Mapping[str, str] | None = None) -> bytes:
    """An example table file: its conditions as ``# key: value`` lines first, then the frame.

    Numbers are written with 9 significant digits, as an instrument would: the last bits of a float
    differ between numerical-library builds, and the committed examples must not depend on them.
    """
    floats = frame.select_dtypes("float").columns
    frame = frame.copy()
    frame[floats] = frame[floats].map(lambda v: float(f"{v:.9g}"))
    return to_csv_bytes(frame, {**conditions, **(metadata or {})})


@dataclass(frozen=True)
class Kind:
    """One measurement kind; see the module docstring for the parts.

    ``analyse(parsed, conditions, context)`` returns the analysis result (a frozen dataclass
    with ``to_dict()``, ``flags`` and, where the method defines one, ``verdict``).
    ``figure(parsed, result)`` builds the plotly figure, or is None for a kind without one.
    ``evidence(results, temperature_K)`` is None for kinds the verdict does not use.
    ``stats(measurements)`` returns the CompoundStats fields this kind fills, from the
    compound's live (not archived) measurements of this kind, oldest first; it returns
    every field it owns, None (or "" for a text field) where there is nothing to say.
    ``derive(session, compound, batch, measurement, actor)`` keeps the kind's derived rows
    (BarrierEstimate, CrystalPhase) in step with a stored measurement: created on upload,
    rewritten on re-analysis, archived and restored with it.
    """

    name: str
    label: str
    analysis: ModuleType  # server.analysis.<method>: METHOD and VERSION
    analyse: Callable[[Any, Conditions, Context], Any]
    results: tuple[ResultKey, ...]
    summary_keys: tuple[str, ...]
    example: Callable[[], Example]
    column_sets: tuple[tuple[str, ...], ...] = ()  # alternatives, each a tuple of QUANTITIES names
    optional_columns: tuple[str, ...] = ()
    columns_text: str = ""  # for kinds not read as a table (CIF)
    #: For a file that is not a table: ``reader(raw, filename)`` reads it into what ``analyse`` and
    #: ``figure`` take (otherwise they get the raw bytes); its ``metadata`` dict, if it has one, gives
    #: conditions as ``# key: value`` lines of a table do (the form still wins).
    reader: Optional[Callable[[bytes, Optional[str]], Any]] = None
    needs: tuple[Need, ...] = ()
    figure: Optional[Callable[[Any, Any], go.Figure]] = None
    evidence: Optional[Callable[[Mapping[str, Any], Optional[float]], Evidence]] = None
    stats: Optional[Callable[[Sequence[Any]], dict[str, Any]]] = None  # Measurement rows
    derive: Optional[Callable[..., None]] = None
    #: ``correct(parsed, result, edit)``: a person's edit of the analysis checked against the file as read and
    #: its automatic result; returns the result keys the edit replaces (InputError naming the field on bad
    #: input). None: the kind's results are not edited by hand (``services/corrections.py`` stores edits).
    correct: Optional[Callable[[Any, Any, Any], dict[str, Any]]] = None
    no_figure_reason: str = ""  # says why ``figure`` is None
    needs_structures: bool = False  # the analysis compares with the compound's CIFs (Context.structures)
    content_type: str = "text/plain"
    #: ``compact(results)``: CompactTables that replace wide list tables on the measurement page (None: the
    #: list results are shown as plain tables).
    compact: Optional[Callable[[Mapping[str, Any]], tuple[CompactTable, ...]]] = None

    @property
    def table(self) -> bool:
        """Read with ingest.read_table (False: the analysis reads the raw bytes)."""
        return bool(self.column_sets)

    @property
    def version(self) -> str:
        return self.analysis.VERSION

    @property
    def method(self) -> str:
        return self.analysis.METHOD

    def read(self, raw: bytes, filename: str | None) -> Any:
        if self.table:
            return read_table(raw, filename=filename)
        return self.reader(raw, filename) if self.reader is not None else raw

    def columns_in_words(self, quote: str = "") -> str:
        """The accepted columns, from the canonical quantities (``quote="`"`` for Markdown)."""
        if not self.table:
            return self.columns_text

        def headers(names: tuple[str, ...]) -> str:
            return ", ".join(f"{quote}{QUANTITY_BY_NAME[q].header}{quote}" for q in names)

        text = "; or ".join(headers(s) for s in self.column_sets)
        return text + (f"; optional {headers(self.optional_columns)}" if self.optional_columns else "")

    @property
    def columns(self) -> str:
        """The accepted columns in words (the upload page)."""
        return self.columns_in_words()

    @property
    def needs_text(self) -> str:
        return "; ".join(n.text() for n in self.needs)

    @property
    def condition_fields(self) -> tuple[str, ...]:
        """Every condition field this kind uses, in declaration order."""
        out: list[str] = []
        for n in self.needs:
            out.extend(f for f in n.fields if f not in out)
        return tuple(out)

    def result_key(self, key: str) -> Optional[ResultKey]:
        return next((r for r in self.results if r.key == key), None)

    def summary_items(self, results: Mapping[str, Any]) -> list[tuple[ResultKey, Any]]:
        """The summary keys present in ``results``, with their labels (the web formats the line)."""
        keys = {r.key: r for r in self.results}
        return [(keys[k], results[k]) for k in self.summary_keys if results.get(k) is not None]

    def summary_text(self, results: Mapping[str, Any], apparent_keys: Any = None, space: str = UNIT_SPACE) -> str:
        """The one-line summary, one home for pages and the report pack: each summary key as ``label value
        unit``, a value with its standard error beside it as ``value ± error`` (digits follow the error,
        JCGM 100:2008, 7.2.6), units by :func:`server.precision.trade_unit` (``space`` between their
        factors); apparent values (the analysis's list, or ``apparent_keys`` from ``server/merit.py``)
        say so, lists are counted."""
        apparent = set(results.get("apparent") or ()) | set(apparent_keys or ())
        parts = []
        for rk, value in self.summary_items(results):
            label = f"apparent {rk.label}" if rk.key in apparent else rk.label
            if isinstance(value, list):
                parts.append(f"{len(value)} {label}")
            elif isinstance(value, (int, float)) and not isinstance(value, bool):
                text = value_text(value, results.get(error_key(rk.key, results) or ""), rk.digits)
                parts.append(f"{label} {text}" + (f" {trade_unit(rk.unit, space)}" if rk.unit else ""))
            else:
                parts.append(str(value))
        return ", ".join(parts)

    def readme_row(self) -> str:
        """This kind's row of the README's table of upload kinds."""
        return f"| `{self.name}` | {self.columns_in_words('`')} | {self.needs_text} |"


def check_kind(kind: Kind) -> list[str]:
    """What ``kind`` lacks or gets wrong, as sentences (empty: complete)."""
    problems = []
    if not kind.name.isidentifier() or kind.name != kind.name.lower():
        problems.append(f"name {kind.name!r} is not a lower-case identifier")
    for attr in ("METHOD", "VERSION"):
        if not getattr(kind.analysis, attr, ""):
            problems.append(f"analysis module {kind.analysis.__name__} has no {attr}")
    if not kind.table and not kind.columns_text:
        problems.append("neither column sets nor a description of the file it reads")
    for q in {q for s in kind.column_sets for q in s} | set(kind.optional_columns):
        if q not in QUANTITY_BY_NAME:
            problems.append(f"column {q!r} is not a canonical quantity of server.ingest.columns")
    for f in kind.condition_fields:
        if f not in FORM_FIELDS:
            problems.append(f"condition {f!r} is not a field of server.ingest.conditions")
    if not kind.results:
        problems.append("no result keys with labels")
    keys = [r.key for r in kind.results]
    if len(keys) != len(set(keys)):
        problems.append("a result key is declared twice")
    for key in kind.summary_keys:
        if key not in keys:
            problems.append(f"summary key {key!r} has no label")
    if not kind.summary_keys:
        problems.append("no summary keys")
    if kind.figure is None and not kind.no_figure_reason:
        problems.append("no figure, and no reason given for having none")
    for attr in ("analyse", "example"):
        if not callable(getattr(kind, attr)):
            problems.append(f"{attr} is not callable")
    return problems


def rng_for(kind_name: str, seed: int = 2026) -> np.random.Generator:
    """The seeded generator of a kind's example file (deterministic output)."""
    return np.random.default_rng([seed, sum(kind_name.encode())])
