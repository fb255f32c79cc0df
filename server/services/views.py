"""The registry view: filters, sorting and paging as a declarative table, bound parameters only.

Every filter is a row of :data:`FILTERS` (query-string name, label, how its value parses,
how it becomes a SQL condition). The web table, the JSON API, the exports and the
explorer all call :func:`query_view` with the same query string, so a link reproduces
the view everywhere. Values are never pasted into SQL: each condition is built with
SQLAlchemy expressions, whose literals travel as bound parameters.
"""

from __future__ import annotations

import base64
import binascii
import json
import re
from dataclasses import dataclass, field, replace
from datetime import date, datetime, time, timedelta, timezone
from typing import Any, Callable, Mapping, Optional, Sequence

import pandas as pd
from sqlalchemy import and_, exists, func, or_
from sqlalchemy.sql import visitors
from sqlalchemy.sql.elements import ColumnElement
from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..chem.sidechains import KINDS as CHAIN_KINDS
from ..bounds import CARBONS, MAX_ROW_ID, PAGE, whole_number
from ..errors import InputError
from ..models import BATCH_STATES, IDENTITY_STATES, LIFE_STATES, Compound, CompoundSideChain, CompoundStats, Scaffold
from ..kinds import KINDS
from ..precision import rounded
from ..verdict_codes import CODES as VERDICT_CODES
from ..verdict_codes import LABELS as VERDICT_LABELS
from .verdicts import EFFECTIVE_CODE, effective_code


def _escape_like(text: str) -> str:
    return text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")


def _carbons(name: str, text: str) -> int:
    return whole_number(name, text, lo=CARBONS[0], hi=CARBONS[1])


def _float(name: str, text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{text!r} is not a number", field=name) from None
    if value != value or value in (float("inf"), float("-inf")):
        raise InputError(f"{text!r} is not a finite number", field=name)
    return value


def _bool(name: str, text: str) -> bool:
    if text in ("yes", "true", "1"):
        return True
    if text in ("no", "false", "0"):
        return False
    raise InputError(f"{text!r}: use yes or no", field=name)


def _date(name: str, text: str) -> date:
    try:
        return date.fromisoformat(text)
    except ValueError:
        raise InputError(f"{text!r} is not a date (YYYY-MM-DD)", field=name) from None


def _choice(choices: Callable[[], Sequence[str]]):
    def parse(name: str, text: str) -> str:
        allowed = list(choices())
        if text not in allowed:
            raise InputError(f"{text!r} is not one of {', '.join(allowed)}", field=name)
        return text

    return parse


@dataclass(frozen=True)
class Filter:
    name: str
    label: str
    parse: Callable[[str, str], Any]
    condition: Optional[Callable[[Any, Mapping[str, Any]], ColumnElement]] = None  # None: handled elsewhere
    multi: bool = False
    help: str = ""


def _chain_exists(values: Mapping[str, Any]) -> Optional[ColumnElement]:
    """One EXISTS over the side chains, so kind, carbon range and branching refer to the same chain."""
    conds = []
    if "chain_kind" in values:
        conds.append(CompoundSideChain.kind == values["chain_kind"])
    if "c_min" in values:
        conds.append(CompoundSideChain.carbons >= values["c_min"])
    if "c_max" in values:
        conds.append(CompoundSideChain.carbons <= values["c_max"])
    if "branched" in values:
        conds.append(CompoundSideChain.branched == values["branched"])
    if not conds:
        return None
    return exists().where(CompoundSideChain.compound_id == Compound.id, *conds)


NO_BRIDGE = "-"  # the ``bridge`` filter's value for compounds without a named bridge
MAX_CHAIN_TYPES = 12  # distinct side chains named in one ``chains`` filter


@dataclass(frozen=True, order=True)
class ChainType:
    """One distinct side chain of a molecule: kind, carbon count, branched or not."""

    kind: str
    carbons: int
    branched: bool

    def __str__(self) -> str:
        return f"{self.kind}:{self.carbons}{'b' if self.branched else ''}"

    @property
    def label(self) -> str:
        return f"C{self.carbons} {self.kind}{' (branched)' if self.branched else ''}"


@dataclass(frozen=True)
class ChainSet:
    """The set of distinct side chains of a molecule (one element: a pure compound; more: mixed chains).

    Written in a query string as ``kind:carbons[b]`` items joined by commas, e.g. ``alkoxy:2,alkoxy:12``.
    """

    types: tuple[ChainType, ...]

    @classmethod
    def of(cls, side_chains: Sequence[Mapping[str, Any]]) -> "ChainSet":
        return cls(tuple(sorted({ChainType(c["kind"], int(c["carbons"]), bool(c["branched"])) for c in side_chains})))

    @property
    def mixed(self) -> bool:
        return len(self.types) > 1

    @property
    def label(self) -> str:
        """``C12 alkoxy`` for a pure compound; ``C2 / C12 alkoxy, mixed`` (kinds named once when shared)."""
        if not self.mixed:
            return self.types[0].label if self.types else "no side chains"
        kinds = {t.kind for t in self.types}
        if len(kinds) == 1:
            parts = [f"C{t.carbons}{' branched' if t.branched else ''}" for t in self.types]
            return f"{' / '.join(parts)} {next(iter(kinds))}, mixed"
        return " / ".join(t.label for t in self.types) + ", mixed"

    def __str__(self) -> str:
        return ",".join(str(t) for t in self.types)


def _chain_set(name: str, text: str) -> ChainSet:
    items = [s.strip() for s in text.split(",") if s.strip()]
    if not items or len(items) > MAX_CHAIN_TYPES:
        raise InputError(f"name 1 to {MAX_CHAIN_TYPES} side chains as kind:carbons, e.g. alkoxy:2,alkoxy:12",
                         field=name)
    types = []
    for item in items:
        m = re.fullmatch(r"([a-z]+):(\d{1,3})(b?)", item)
        if m is None or m.group(1) not in CHAIN_KINDS:
            raise InputError(f"{item!r} is not kind:carbons (kind one of {', '.join(CHAIN_KINDS)}; "
                             "a trailing b for branched), e.g. alkoxy:12", field=name)
        types.append(ChainType(m.group(1), _carbons(name, m.group(2)), m.group(3) == "b"))
    return ChainSet(tuple(sorted(set(types))))


def _chain_set_condition(value: ChainSet, _: Mapping[str, Any]) -> ColumnElement:
    """Exactly these distinct side chains: each one present and no other."""

    def match(t: ChainType) -> ColumnElement:
        return and_(CompoundSideChain.kind == t.kind, CompoundSideChain.carbons == t.carbons,
                    CompoundSideChain.branched == t.branched)

    own = CompoundSideChain.compound_id == Compound.id
    return and_(*[exists().where(own, match(t)) for t in value.types],
                ~exists().where(own, ~or_(*[match(t) for t in value.types])))


def _barrier_col(values: Mapping[str, Any]):
    src = values.get("barrier_source", "measured")
    return CompoundStats.barrier_computed_kcal_mol if src == "computed" else CompoundStats.barrier_measured_kcal_mol


def _start_of(d: date) -> datetime:
    return datetime.combine(d, time.min, tzinfo=timezone.utc)


def _text(value: str, _: Mapping[str, Any], actor: Optional[Actor] = None) -> ColumnElement:
    """Code, label or notes contain ``value``; label and notes of embargoed rows only for who may see them."""
    pattern = f"%{_escape_like(value)}%"
    return access.code_or_structure_condition(
        actor, Compound.code.ilike(pattern, escape="\\"),
        or_(Compound.label.ilike(pattern, escape="\\"), Compound.notes.ilike(pattern, escape="\\")))


FILTERS: tuple[Filter, ...] = (
    Filter("q", "Text", lambda n, t: t, _text, help="code, label or notes contain"),
    Filter("scaffold", "Scaffold", lambda n, t: t, lambda v, _: Scaffold.code == v),
    # "-": no named bridge (no scaffold, or a scaffold whose bridge atoms were not recognised)
    Filter("bridge", "Bridge", lambda n, t: t,
           lambda v, _: or_(Compound.scaffold_id.is_(None), Scaffold.bridge == "") if v == NO_BRIDGE
           else Scaffold.bridge == v),
    Filter("no_scaffold", "Without a scaffold", _bool,
           lambda v, _: Compound.scaffold_id.is_(None) if v else Compound.scaffold_id.is_not(None)),
    Filter("chain_kind", "Side-chain kind", _choice(lambda: CHAIN_KINDS)),
    Filter("c_min", "Carbons from", _carbons),
    Filter("c_max", "Carbons to", _carbons),
    Filter("branched", "Branched", _bool),
    # The molecule's most frequent side chain (what the outcome map groups by).
    Filter("main_kind", "Main side-chain kind", _choice(lambda: CHAIN_KINDS),
           lambda v, _: CompoundStats.chain_kind == v),
    Filter("main_c", "Main side-chain carbons", _carbons, lambda v, _: CompoundStats.chain_carbons == v),
    Filter("main_branched", "Main side chain branched", _bool, lambda v, _: CompoundStats.chain_branched == v),
    # Exactly this set of distinct side chains (what each row of the outcome map counts).
    Filter("chains", "Side chains, exactly", _chain_set, _chain_set_condition,
           help="e.g. alkoxy:12, or alkoxy:2,alkoxy:12 for mixed chains"),
    Filter("batch_state", "Batch state", _choice(lambda: BATCH_STATES),
           lambda v, _: CompoundStats.batch_states.like(f"%,{v},%")),
    Filter("state", "Life state", _choice(lambda: LIFE_STATES), lambda v, _: CompoundStats.life_state.in_(v),
           multi=True),
    Filter("identity", "Identity", _choice(lambda: IDENTITY_STATES),
           lambda v, _: CompoundStats.identity_status == v, help="whether the live batches' identity is confirmed"),
    Filter("verdict", "Verdict", _choice(lambda: VERDICT_CODES), lambda v, _: EFFECTIVE_CODE.in_(v), multi=True),
    Filter("polar", "Polar phase", _choice(lambda: ("yes", "no", "unknown")),
           lambda v, _: {"yes": CompoundStats.polar_phase.is_(True), "no": CompoundStats.polar_phase.is_(False),
                         "unknown": CompoundStats.polar_phase.is_(None)}[v]),
    Filter("barrier_source", "Barrier from", _choice(lambda: ("measured", "computed"))),
    Filter("barrier_min", "Barrier from (kcal/mol)", _float, lambda v, vals: _barrier_col(vals) >= v),
    Filter("barrier_max", "Barrier to (kcal/mol)", _float, lambda v, vals: _barrier_col(vals) <= v),
    Filter("has", "Has measurement", _choice(lambda: tuple(KINDS)),
           lambda v, _: and_(*[CompoundStats.kinds.like(f"%,{k},%") for k in v]), multi=True),
    Filter("made_from", "Registered from", _date, lambda v, _: Compound.created_at >= _start_of(v)),
    Filter("made_to", "Registered to", _date, lambda v, _: Compound.created_at < _start_of(v) + timedelta(days=1)),
    Filter("archived", "Include archived", _bool),
)
FILTER_BY_NAME = {f.name: f for f in FILTERS}
# What the filter form calls each query-string parameter, for errors that name the box to correct.
PARAM_LABELS: dict[str, str] = {
    **{f.name: f.label for f in FILTERS},
    "substructure": "Substructure (SMARTS)",
    "similar": "Similar to (SMILES)",
    "threshold": "Tanimoto threshold",
    "sort": "Sort",
    "dir": "Sort direction",
    "page": "Page",
    "size": "Rows per page",
    "after": "Page position",
    "before": "Page position",
}

# Filters whose answer depends on a compound's structure (its scaffold, side chains, or a value computed
# from it): for a caller who may not see embargoed structures they never match an embargoed row
# (``access.structure_condition``). ``q`` is handled by :func:`_text` (the code stays searchable).
STRUCTURAL_FILTERS = frozenset({"scaffold", "bridge", "chain_kind", "c_min", "c_max", "branched", "main_kind",
                                "main_c", "main_branched", "chains", "no_scaffold"})

# Sortable columns: query-string name -> (label, unit, SQL expression)
SORTS: dict[str, tuple[str, str, Any]] = {
    "code": ("Code", "", Compound.number),
    "label": ("Label", "", Compound.label),
    "mw": ("Molar mass", "g/mol", Compound.mw),
    "scaffold": ("Scaffold", "", Scaffold.code),
    "carbons": ("Chain carbons", "", CompoundStats.chain_carbons),
    "batches": ("Batches", "", CompoundStats.n_batches),
    "measurements": ("Measurements", "", CompoundStats.n_measurements),
    "barrier": ("Barrier, measured", "kcal/mol", CompoundStats.barrier_measured_kcal_mol),
    "barrier_computed": ("Barrier, computed", "kcal/mol", CompoundStats.barrier_computed_kcal_mol),
    "pr": ("Pr, largest", "µC/cm²", CompoundStats.pr_max_uC_cm2),
    "ec": ("Ec", "kV/cm", CompoundStats.ec_kV_cm),
    "t_peak": ("ε′ peak T", "K", CompoundStats.t_peak_K),
    "verdict": ("Verdict", "", EFFECTIVE_CODE),
    "created": ("Registered", "", Compound.created_at),
    "activity": ("Last activity", "", CompoundStats.last_activity_at),
}
# Sorts over structure-derived values (label included: labels spell out structures): for a caller who
# may not see embargoed structures, embargoed rows sort as if the value were missing
# (``access.structure_value``).
STRUCTURAL_SORTS = frozenset({"label", "mw", "scaffold", "carbons", "barrier_computed"})
# Columns whose values each come with a temperature of their own (the largest Pr with its loop's T, printed in
# the cell): the header says "at T (K)" too (templates/partials/column_head.html).
OWN_T_SORTS = frozenset({"pr"})


@dataclass(frozen=True)
class ViewQuery:
    """A parsed query string: filter values, sort, page."""

    values: dict[str, Any] = field(default_factory=dict)
    sort: str = "code"
    descending: bool = True
    page: int = 1
    size: int = 50
    substructure: Optional[str] = None
    similar: Optional[str] = None
    threshold: float = 0.7
    # A keyset position (:class:`Cursor`): the page just after, or just before, this compound in the
    # view's order. ``page`` then only labels the page; without a cursor, page N is found by offset.
    after: Optional["Cursor"] = None
    before: Optional["Cursor"] = None

    def link(self, **changes: Any) -> str:
        """The query string of this view with some parameters changed (None removes one)."""
        params = self.params()
        for key, value in changes.items():
            if value is None:
                params.pop(key, None)
            else:
                params[key] = value
        from urllib.parse import urlencode

        return urlencode(params, doseq=True)

    def params(self) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for name, value in self.values.items():
            f = FILTER_BY_NAME[name]
            if f.multi:
                out[name] = list(value)
            elif isinstance(value, bool):
                out[name] = "yes" if value else "no"
            else:
                out[name] = str(value)
        if self.substructure:
            out["substructure"] = self.substructure
        if self.similar:
            out["similar"] = self.similar
            out["threshold"] = str(self.threshold)
        if self.sort != "code" or not self.descending:
            out["sort"] = self.sort
            out["dir"] = "desc" if self.descending else "asc"
        if self.page != 1:
            out["page"] = str(self.page)
        if self.after is not None:
            out["after"] = self.after.token
        if self.before is not None:
            out["before"] = self.before.token
        if self.size != 50:
            out["size"] = str(self.size)
        return out


def parse_view(params: Any, *, max_size: int = 500) -> ViewQuery:
    """Parse a query string (Starlette QueryParams or a mapping of lists/strings)."""

    def getlist(name: str) -> list[str]:
        if hasattr(params, "getlist"):
            return [v for v in params.getlist(name) if v != ""]
        raw = params.get(name)
        if raw is None or raw == "":
            return []
        return [v for v in (raw if isinstance(raw, (list, tuple)) else [raw]) if v != ""]

    values: dict[str, Any] = {}
    for f in FILTERS:
        raw = [v.strip() for v in getlist(f.name) if v.strip()]
        if not raw:
            continue
        values[f.name] = tuple(f.parse(f.name, v) for v in raw) if f.multi else f.parse(f.name, raw[-1])
    sort = (getlist("sort") or ["code"])[-1]
    if sort not in SORTS:
        raise InputError(f"cannot sort by {sort!r}; use one of {', '.join(SORTS)}", field="sort")
    direction = (getlist("dir") or ["desc"])[-1]
    if direction not in ("asc", "desc"):
        raise InputError("dir is asc or desc", field="dir")
    page = whole_number("page", (getlist("page") or ["1"])[-1], lo=PAGE[0], hi=PAGE[1])
    size = whole_number("size", (getlist("size") or ["50"])[-1], lo=1, hi=max_size)
    if page * size > MAX_ROW_ID:
        raise InputError("that page is far past the last one", field="page")
    sub = (getlist("substructure") or [None])[-1]
    sim = (getlist("similar") or [None])[-1]
    threshold = _float("threshold", (getlist("threshold") or ["0.7"])[-1])
    positions = {}
    for name in ("after", "before"):
        token = (getlist(name) or [None])[-1]
        if token is not None:
            positions[name] = Cursor.parse(name, token, sort=sort, descending=direction == "desc")
    if len(positions) == 2:
        raise InputError("a page continues after one row or before one, not both", field="before")
    return ViewQuery(values=values, sort=sort, descending=direction == "desc", page=page, size=size,
                     substructure=sub, similar=sim, threshold=threshold, **positions)


@dataclass(frozen=True)
class Cursor:
    """Where a keyset page starts: the registration number of the row next to it, under one sort.

    The token (``after=`` / ``before=`` in the query string) is opaque to callers: base64url of
    ``{"s": sort, "d": "asc"|"desc", "n": number}``. It never carries a sort value: the server reads
    the anchor row's value again, as the caller may see it (:func:`access.structure_value`), so a
    token written for a member says nothing of an embargoed structure to whoever it is passed to,
    and a token naming an embargoed compound places a viewer's page by code alone.
    """

    sort: str
    descending: bool
    number: int

    @property
    def token(self) -> str:
        raw = json.dumps({"s": self.sort, "d": "desc" if self.descending else "asc", "n": self.number},
                         separators=(",", ":")).encode()
        return base64.urlsafe_b64encode(raw).decode().rstrip("=")

    @classmethod
    def parse(cls, name: str, token: str, *, sort: str, descending: bool) -> "Cursor":
        bad = InputError("this page position is not one the registry wrote; start again from the first page",
                         field=name)
        if len(token) > 200:
            raise bad
        try:
            data = json.loads(base64.urlsafe_b64decode(token + "=" * (-len(token) % 4)))
        except (binascii.Error, ValueError, UnicodeDecodeError):
            raise bad from None
        if not isinstance(data, dict) or set(data) != {"s", "d", "n"} or type(data["n"]) is not int \
                or not 1 <= data["n"] <= MAX_ROW_ID:
            raise bad
        if data["s"] != sort or data["d"] != ("desc" if descending else "asc"):
            raise InputError("this page position belongs to another sort; start again from the first page",
                             field=name)
        return cls(sort=sort, descending=descending, number=data["n"])


def parse_view_or_error(params: Any, *, max_size: int = 500) -> tuple[ViewQuery, Optional[InputError]]:
    """:func:`parse_view`, or on bad input the view without the offending parameter, and the error.

    A page keeps the rest of what the user asked for (and shows the bad value back in its box)
    instead of forgetting every filter because of one typo.
    """
    try:
        return parse_view(params, max_size=max_size), None
    except InputError as exc:
        error = exc
    keys = params.keys() if hasattr(params, "keys") else ()
    rest = {k: (params.getlist(k) if hasattr(params, "getlist") else params[k]) for k in keys if k != error.field}
    try:
        return parse_view(rest, max_size=max_size), error
    except InputError:
        return ViewQuery(), error


@dataclass(frozen=True)
class ViewRow:
    compound: Compound
    stats: Optional[CompoundStats]
    scaffold: Optional[str]
    bridge: Optional[str] = None
    similarity: Optional[float] = None

    @property
    def verdict(self) -> str:
        return effective_code(self.compound)


@dataclass(frozen=True)
class ViewResult:
    """One page of a view. ``total`` is None when it was not counted (:func:`query_view`, ``count=False``)
    and more rows follow; ``next_cursor`` / ``prev_cursor`` are the keyset positions of the pages beside it
    (None where there is none, or where the view is ordered in Python and paged by offset)."""

    rows: list[ViewRow]
    total: Optional[int]
    query: ViewQuery
    has_next: bool = False
    next_cursor: Optional[Cursor] = None
    prev_cursor: Optional[Cursor] = None

    @property
    def pages(self) -> Optional[int]:
        return None if self.total is None else max(1, -(-self.total // self.query.size))


def _conditions(q: ViewQuery, actor: Optional[Actor] = None) -> list[ColumnElement]:
    conds: list[ColumnElement] = []
    if not q.values.get("archived"):
        conds.append(Compound.archived == False)  # noqa: E712 - SQL expression
    for f in FILTERS:
        if f.name in q.values and f.condition is not None:
            if f.name == "q":
                conds.append(_text(q.values["q"], q.values, actor))
                continue
            cond = f.condition(q.values[f.name], q.values)
            structural = f.name in STRUCTURAL_FILTERS or (
                f.name in ("barrier_min", "barrier_max") and q.values.get("barrier_source") == "computed")
            conds.append(access.structure_condition(actor, cond) if structural else cond)
    chain = _chain_exists(q.values)
    if chain is not None:
        conds.append(access.structure_condition(actor, chain))
    return conds


def _joined(stmt, conds: Sequence[ColumnElement], *, needs: Sequence[Any] = ()):  # noqa: ANN001, ANN202 - a Select
    """``stmt`` over Compound with the outer joins that ``conds`` and ``needs`` read (stats and scaffold
    are one row per compound at most, so a join nobody reads changes no count and no order)."""
    tables = {getattr(e, "table", e) for c in (*conds, *needs) for e in visitors.iterate(c)}
    if CompoundStats.__table__ in tables:
        stmt = stmt.join(CompoundStats, CompoundStats.compound_id == Compound.id, isouter=True)
    if Scaffold.__table__ in tables:
        stmt = stmt.join(Scaffold, Scaffold.id == Compound.scaffold_id, isouter=True)
    return stmt.where(*conds)


def count_view(session: Session, q: ViewQuery, *, actor: Optional[Actor], structures_only: bool = False) -> int:
    """How many compounds the view lists (what the registry page shows once the first rows are out)."""
    conds = _all_conditions(session, q, actor, structures_only)[0]
    return session.exec(_joined(select(func.count()).select_from(Compound), conds)).one()


def _first_hits_apply(q: ViewQuery) -> bool:
    """Whether the view's first page can be read from the first substructure hits alone: a substructure and
    nothing else narrows it (archived rows may be asked for), ordered by code, the first page."""
    return (bool(q.substructure) and not q.similar and q.sort == "code" and q.page == 1 and q.after is None
            and q.before is None and set(q.values) <= {"archived"})


def _first_hits(session: Session, q: ViewQuery, actor: Optional[Actor]) -> Optional[list[int]]:
    """The compound ids of the view's first page and one more, from the search's first hits
    (``search.search(limit=)``: matching stops once they are certain), or None when they cannot be trusted.

    The search orders by id, the page by registration number. Numbers are allocated in the registering
    transaction before the compound row is written (services/codes.py), so both orders agree; a registry
    where they do not (rows loaded with numbers of their own) is caught by one indexed probe, a compound
    beyond the hits read whose number would place it among them, and then the whole answer is used.
    """
    from . import search

    want = q.size + 1
    hits = search.search(session, substructure=q.substructure, include_archived=bool(q.values.get("archived")),
                         include_embargoed=access.sees_embargoed(actor), limit=want, newest_first=q.descending)
    ids = [h.compound_id for h in hits]
    if len(ids) < want:
        return ids  # the whole answer
    edge = ids[-1]  # the last id read, in the search's order
    low, high = session.exec(select(func.min(Compound.number), func.max(Compound.number))
                             .where(Compound.id.in_(ids))).one()
    stray = (Compound.id < edge) & (Compound.number > low) if q.descending else \
        (Compound.id > edge) & (Compound.number < high)
    return None if session.exec(select(Compound.id).where(stray).limit(1)).first() is not None else ids


def _all_conditions(session: Session, q: ViewQuery, actor: Optional[Actor],
                    structures_only: bool, first_page: bool = False) -> tuple[list[ColumnElement], dict[int, float]]:
    similarity: dict[int, float] = {}
    conds = _conditions(q, actor)
    if q.substructure or q.similar:
        from . import search

        ids = _first_hits(session, q, actor) if first_page and _first_hits_apply(q) else None
        if ids is None:
            hits = search.search(session, substructure=q.substructure, similar=q.similar, threshold=q.threshold,
                                 include_archived=bool(q.values.get("archived")),
                                 include_embargoed=access.sees_embargoed(actor))
            ids = [h.compound_id for h in hits]
            similarity = {h.compound_id: h.similarity for h in hits if h.similarity is not None}
        conds.append(Compound.id.in_(ids) if ids else Compound.id == -1)
    if structures_only or q.substructure or q.similar:
        conds.append(access.structure_visible(actor))
    return conds, similarity


def _sort_parts(q: ViewQuery, actor: Optional[Actor]) -> tuple[Any, ColumnElement, ColumnElement, Any]:
    """(the raw sort column, rows holding a value the actor may sort by, rows sorted as missing, the column
    as the actor sees it). Rows of the second kind come first in the view's order, the others after them,
    newest first: the two parts are read separately so each follows an index."""
    raw = SORTS[q.sort][2]
    masked = q.sort in STRUCTURAL_SORTS and not access.sees_embargoed(actor)
    # "Has a value" as a range from the column's own extreme (an index lookup): SQLite's planner walks
    # the sort index for a range but not for IS NOT NULL on an outer-joined table.
    bound = select(func.max(raw) if q.descending else func.min(raw)).scalar_subquery()
    valued = raw <= bound if q.descending else raw >= bound
    missing = raw.is_(None)
    if masked:
        valued = access.structure_condition(actor, valued)
        missing = access.structure_missing(actor, missing)
    seen = access.structure_value(actor, raw) if q.sort in STRUCTURAL_SORTS else raw
    return raw, valued, missing, seen


def _keyset_numbers(session: Session, q: ViewQuery, conds: list[ColumnElement], actor: Optional[Actor],
                    want: int) -> tuple[list[int], bool]:
    """The registration numbers of one keyset page in view order, and whether it reached the start
    (a ``before`` page with fewer rows than asked: the caller shows the first page instead).

    Order: the sort value (descending or ascending; rows without one last), then the number, newest
    first. Forward from ``after`` (or from the top), or backward from ``before``; ``want`` rows at most.
    """
    raw, valued, missing, seen = _sort_parts(q, actor)
    cursor = q.after or q.before
    anchor_value, anchor_valued = None, None
    if cursor is not None:
        found = session.exec(_joined(select(seen).select_from(Compound), [Compound.number == cursor.number],
                                     needs=[seen])).first()
        if found is None and not session.exec(select(Compound.id).where(Compound.number == cursor.number)).first():
            raise InputError("the row this page continues from is gone; start again from the first page",
                             field="after" if q.after is not None else "before")
        anchor_value = found
        anchor_valued = anchor_value is not None
    n = cursor.number if cursor is not None else None
    number = Compound.number

    def fetch(extra: list[ColumnElement], order: list[Any], limit: int) -> list[int]:
        if limit <= 0:
            return []
        stmt = _joined(select(number).select_from(Compound), [*conds, *extra], needs=[raw]).order_by(*order).limit(limit)
        return list(session.exec(stmt).all())

    if q.before is None:  # forward
        out: list[int] = []
        if cursor is None or anchor_valued:
            extra = [valued]
            if cursor is not None:
                if q.descending:
                    extra += [raw <= anchor_value, or_(raw < anchor_value, number < n)]
                else:
                    extra += [raw >= anchor_value, or_(raw > anchor_value, number < n)]
            out = fetch(extra, [raw.desc() if q.descending else raw.asc(), number.desc()], want)
        tail = [missing] + ([number < n] if cursor is not None and not anchor_valued else [])
        out += fetch(tail, [number.desc()], want - len(out))
        return out, False
    back: list[int] = []  # backward from the anchor, nearest first
    if not anchor_valued:
        back = fetch([missing, number > n], [number.asc()], want)
    extra = [valued]
    if anchor_valued:
        if q.descending:
            extra += [raw >= anchor_value, or_(raw > anchor_value, number > n)]
        else:
            extra += [raw <= anchor_value, or_(raw < anchor_value, number > n)]
    back += fetch(extra, [raw.asc() if q.descending else raw.desc(), number.asc()], want - len(back))
    return back[::-1], len(back) < want


def query_view(session: Session, q: ViewQuery, *, actor: Optional[Actor], paged: bool = True,
               structures_only: bool = False, count: bool = True) -> ViewResult:
    """The rows of a view as ``actor`` may see them; structure search (if asked) narrows the candidates first.

    A caller who may not see embargoed structures never gets an embargoed compound from a
    structure query (``access.structure_visible``): otherwise its code in the answer would tell
    which fragments it contains. ``structures_only`` applies the same condition to every view
    (plots and maps of structure-derived properties).

    Paging (DEVELOPERS.md, "Registry lists"): the first page and every page reached through a cursor
    (``q.after`` / ``q.before``) is read by keyset, each part of the order along its index, so its cost
    does not grow with the registry or with the depth of the page; ``page=N`` without a cursor (an older
    link) is found by offset over the numbers alone. The rows are then read by number. ``count=False``
    leaves ``total`` None unless the page itself shows that nothing follows; a first page narrowed by a
    substructure alone is then read from the search's first hits (:func:`_first_hits`), so it does not
    wait for the whole match (:func:`count_view` counts it when asked).
    """
    conds, similarity = _all_conditions(session, q, actor, structures_only, first_page=paged and not count)
    python_order = bool(q.similar and q.sort == "code")  # most similar first, ordered below
    expr = SORTS[q.sort][2]
    if q.sort in STRUCTURAL_SORTS:
        expr = access.structure_value(actor, expr)
    order = [expr.desc().nulls_last() if q.descending else expr.asc().nulls_last(), Compound.number.desc()]
    if python_order and q.descending:
        order = [Compound.number.desc()]  # re-ordered by similarity below
    full = (select(Compound, CompoundStats, Scaffold.code, Scaffold.bridge)
            .join(CompoundStats, CompoundStats.compound_id == Compound.id, isouter=True)
            .join(Scaffold, Scaffold.id == Compound.scaffold_id, isouter=True))
    if not paged or python_order:  # every row at once (exports, plots), or ordered by similarity here
        rows = [ViewRow(c, s, code, bridge, similarity.get(c.id))
                for c, s, code, bridge in session.exec(full.where(*conds).order_by(*order)).all()]
        if python_order:
            rows.sort(key=lambda r: (-(r.similarity or 0.0), -r.compound.number))
        total = len(rows)
        if paged:
            has_next = len(rows) > q.page * q.size
            rows = rows[(q.page - 1) * q.size: q.page * q.size]
            return ViewResult(rows=rows, total=total, query=q, has_next=has_next)
        return ViewResult(rows=rows, total=total, query=q)
    if q.after is None and q.before is None and q.page > 1:
        stmt = _joined(select(Compound.number).select_from(Compound), conds, needs=[expr]).order_by(*order)
        numbers = list(session.exec(stmt.offset((q.page - 1) * q.size).limit(q.size + 1)).all())
        has_next, numbers = len(numbers) > q.size, numbers[:q.size]
    else:
        numbers, at_start = _keyset_numbers(session, q, conds, actor, q.size + (q.before is None))
        if q.before is None:
            has_next, numbers = len(numbers) > q.size, numbers[:q.size]
        elif at_start:  # fewer rows before the anchor than a page: the first page
            q = replace(q, page=1, before=None)
            numbers, _ = _keyset_numbers(session, q, conds, actor, q.size + 1)
            has_next, numbers = len(numbers) > q.size, numbers[:q.size]
        else:
            has_next = True
    by_number = {c.number: (c, s, code, bridge)
                 for c, s, code, bridge in session.exec(full.where(Compound.number.in_(numbers))).all()} \
        if numbers else {}
    rows = [ViewRow(*by_number[n], similarity.get(by_number[n][0].id)) for n in numbers if n in by_number]
    if count:
        total: Optional[int] = session.exec(_joined(select(func.count()).select_from(Compound), conds)).one()
    elif not has_next and q.page == 1 and q.after is None and q.before is None:
        total = len(rows)  # the whole view is on this page
    else:
        total = None
    first, last = (rows[0].compound.number, rows[-1].compound.number) if rows else (None, None)
    return ViewResult(rows=rows, total=total, query=q, has_next=has_next,
                      next_cursor=Cursor(q.sort, q.descending, last) if rows and has_next else None,
                      prev_cursor=Cursor(q.sort, q.descending, first)
                      if rows and (q.page > 1 or q.after is not None) else None)


EXPORT_COLUMNS: tuple[tuple[str, Callable[[ViewRow], Any]], ...] = (
    ("code", lambda r: r.compound.code),
    ("label", lambda r: r.compound.label),
    ("scaffold", lambda r: r.scaffold or ""),
    ("smiles", lambda r: r.compound.smiles),
    ("inchikey", lambda r: r.compound.inchikey),
    ("formula", lambda r: r.compound.formula),
    ("molar mass (g/mol)", lambda r: r.compound.mw),
    ("side chains", lambda r: r.compound.side_chain_summary),
    ("chain carbons", lambda r: r.stats.chain_carbons if r.stats else None),
    ("identity", lambda r: r.stats.identity_status if r.stats else "no batches"),
    ("verdict", lambda r: VERDICT_LABELS.get(r.verdict, r.verdict)),
    ("verdict code", lambda r: r.verdict),
    ("state", lambda r: r.stats.life_state if r.stats else "registered"),
    ("batches", lambda r: r.stats.n_batches if r.stats else 0),
    ("measurements", lambda r: r.stats.n_measurements if r.stats else 0),
    ("barrier measured (kcal/mol)", lambda r: r.stats.barrier_measured_kcal_mol if r.stats else None),
    ("barrier computed (kcal/mol)", lambda r: r.stats.barrier_computed_kcal_mol if r.stats else None),
    ("bowl depth (A)", lambda r: r.stats.bowl_depth_A if r.stats else None),
    ("relaxation Ea (kcal/mol)", lambda r: r.stats.relax_ea_kcal_mol if r.stats else None),
    ("relaxation Ea error (kcal/mol)", lambda r: r.stats.relax_ea_err_kcal_mol if r.stats else None),
    ("relaxation Ea apparent", lambda r: r.stats.relax_ea_apparent if r.stats else None),
    ("Pr largest (uC/cm^2)", lambda r: r.stats.pr_max_uC_cm2 if r.stats else None),
    ("Pr largest at T (K)", lambda r: r.stats.pr_max_t_K if r.stats else None),
    ("Pr largest at field amplitude (kV/cm)", lambda r: r.stats.pr_max_emax_kV_cm if r.stats else None),
    ("Ec of that loop (kV/cm)", lambda r: r.stats.ec_kV_cm if r.stats else None),
    ("permittivity peak T (K)", lambda r: r.stats.t_peak_K if r.stats else None),
    ("Curie constant (K)", lambda r: r.stats.curie_constant_K if r.stats else None),
    ("DSC transition T (K)", lambda r: r.stats.dsc_t_K if r.stats else None),
    ("polar phase", lambda r: r.stats.polar_phase if r.stats else None),
    ("registered (UTC)", lambda r: r.compound.created_at.strftime("%Y-%m-%d %H:%M")),
)


#: Significant digits each numeric export column is written with, the digits the pages print (barriers and
#: temperatures four; Pr, Ec, Curie constant, bowl depth three); the molar mass to 0.01 g/mol, as papers print it.
EXPORT_DECIMALS: dict[str, int] = {"molar mass (g/mol)": 2}
EXPORT_DIGITS: dict[str, int] = {
    "barrier measured (kcal/mol)": 4, "barrier computed (kcal/mol)": 4,
    "bowl depth (A)": 3, "Pr largest (uC/cm^2)": 3, "Pr largest at T (K)": 4,
    "Pr largest at field amplitude (kV/cm)": 3, "Ec of that loop (kV/cm)": 3, "permittivity peak T (K)": 4,
    "Curie constant (K)": 3, "DSC transition T (K)": 4,
    "relaxation Ea (kcal/mol)": 3, "relaxation Ea error (kcal/mol)": 2,
}

#: Columns holding a chemical formula: subscripts in XLSX rich text, plain in CSV (exports.table_bytes).
EXPORT_FORMULA_COLUMNS = ("formula",)


# What an export leaves empty for an embargoed row and a caller who may not see it: the structure and
# everything derived from it (scaffold, side chains, masses, xtb results computed from the structure).
EXPORT_STRUCTURAL_COLUMNS = ("label", "scaffold", "smiles", "inchikey", "formula", "molar mass (g/mol)",
                             "side chains", "chain carbons", "barrier computed (kcal/mol)", "bowl depth (A)")


def export_frame(result: ViewResult, *, actor: Optional[Actor]) -> pd.DataFrame:
    """The rows as a table at display precision (:data:`EXPORT_DIGITS`, :data:`EXPORT_DECIMALS`), the verdict as its label with the
    code in ``verdict code``; what ``actor`` may not see of an embargoed compound is left empty."""
    records = []
    for r in result.rows:
        rec = {name: get(r) for name, get in EXPORT_COLUMNS}
        rec.update({name: rounded(rec[name], d) for name, d in EXPORT_DIGITS.items()})
        rec.update({name: round(rec[name], d) for name, d in EXPORT_DECIMALS.items() if rec[name] is not None})
        if not access.may_see_structure(actor, r.compound):
            rec.update({name: None for name in EXPORT_STRUCTURAL_COLUMNS})
        records.append(rec)
    return pd.DataFrame.from_records(records, columns=[name for name, _ in EXPORT_COLUMNS])


def filter_choices(session: Session) -> dict[str, list[str]]:
    return {
        "scaffold": list(session.exec(select(Scaffold.code).order_by(Scaffold.code)).all()),
        "bridge": sorted({b for b in session.exec(select(Scaffold.bridge)).all() if b}),
        "chain_kind": ["alkoxy", "alkylthio", "alkyl", "other"],
        "batch_state": list(BATCH_STATES),
        "state": list(LIFE_STATES),
        "identity": list(IDENTITY_STATES),
        "verdict": list(VERDICT_CODES),
        "has": list(KINDS),
    }
