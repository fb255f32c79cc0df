"""Structure search over the registry: substructure (SMARTS/SMILES) and similarity (Tanimoto).

Two back ends give the same answers (tests/services/test_search.py checks it):

* **cartridge** - PostgreSQL with the RDKit cartridge (``CREATE EXTENSION rdkit``) and the
  table ``compound_structure (compound_id, m mol, mcfp sfp)`` made by migration 0004 (its bit-vector
  column replaced by counts in migration 0021), with GiST indexes on ``m`` and ``mcfp``. Queries
  are bound parameters, never pasted into SQL: ``m @> qmol_from_smarts(:q)`` or
  ``m @> mol_from_smiles(:q)`` and ``tanimoto_sml(morgan_fp(mol_from_smiles(:q), 2), mcfp) >= :t``.
* **in-process** - SQLite, and PostgreSQL without a working cartridge (migration 0002
  skips the table then, with a warning): one :class:`~server.chem.search.StructureIndex`
  per engine, built lazily from the compound table, brought up to date before each search
  (so compounds registered by other processes are found) and updated on registration.

Which one a database uses: :func:`backend`. Fingerprints are unfolded Morgan count vectors of
radius 2 in both (``server.chem.search.fingerprint``), which no setting of the database changes.
"""

from __future__ import annotations

import logging
import math
import threading
import time
import weakref
from collections.abc import Collection
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Optional

from sqlalchemy import event, func, text
from sqlalchemy.engine import Connection, Engine
from sqlalchemy.exc import DBAPIError
from sqlmodel import Session, select

from ..chem.search import (MORGAN_RADIUS, Query, QueryTooGeneral, StructureIndex, load_entries, read_query,
                           save_entries)
from ..errors import InputError
from ..models import Compound

__all__ = ["STRUCTURE_TABLE", "Hit", "backend", "search", "index_compound", "structure_index", "keep_index_in",
           "enable_cartridge",
           "CartridgeState"]

log = logging.getLogger("remanence.search")

STRUCTURE_TABLE = "compound_structure"  # cartridge-only; migrations/env.py keeps autogenerate off it
CARTRIDGE = "cartridge"
IN_PROCESS = "in-process"

# The GiST screen for `%` runs at a threshold this much below the asked one; the exact
# `tanimoto_sml(...) >= :t` filter then decides, so a rounding in the index's bounds can
# never drop a molecule the in-process index keeps.
_SCREEN_SLACK = 1e-6
_CHUNK = 900  # ids per IN (...) list (SQLite's historical limit on bound parameters is 999)
# Seconds of substructure matching one search may spend; over it, 422 (common practice for a shared
# search box, not a measured optimum: the query limits of chem.search refuse the pathological queries
# first, and this backstop leaves room for the cartridge on a loaded 2-core server).
MATCH_BUDGET_S = 5.0

_lock = threading.Lock()
_indexes: "weakref.WeakKeyDictionary[Engine, StructureIndex]" = weakref.WeakKeyDictionary()
_backends: "weakref.WeakKeyDictionary[Engine, str]" = weakref.WeakKeyDictionary()
_files: "weakref.WeakKeyDictionary[Engine, Path]" = weakref.WeakKeyDictionary()
_unsaved: "weakref.WeakKeyDictionary[Engine, int]" = weakref.WeakKeyDictionary()
# File (in the data directory) where the in-process index keeps its entries between start-ups.
INDEX_FILE = "structure-index.bin"
# Structures computed since the file was last written before it is written again (about 2 s of
# start-up work at the bench's 2 ms a molecule; a file write per registration elsewhere would cost more).
SAVE_AFTER = 1000
_PENDING = "remanence.search.pending"
_HOOKED = "remanence.search.hooked"


@dataclass(frozen=True)
class Hit:
    """One compound found. ``similarity`` (Tanimoto, 0-1) is None for a substructure-only search."""

    compound_id: int
    code: str
    similarity: Optional[float]

    def to_dict(self) -> dict:
        return asdict(self)


def _engine(session: Session) -> Engine:
    bind = session.get_bind()
    return bind.engine if isinstance(bind, Connection) else bind


def backend(session: Session) -> str:
    """``"cartridge"`` or ``"in-process"`` for the session's database (found once per engine)."""
    engine = _engine(session)
    with _lock:
        known = _backends.get(engine)
    if known is not None:
        return known
    chosen = IN_PROCESS
    if engine.dialect.name == "postgresql":
        ready = session.execute(
            text(
                "SELECT to_regclass(:table) IS NOT NULL "
                "AND EXISTS (SELECT 1 FROM pg_extension WHERE extname = 'rdkit')"
            ),
            {"table": STRUCTURE_TABLE},
        ).scalar_one()
        if ready:
            chosen = CARTRIDGE
        else:
            log.warning(
                "PostgreSQL without the RDKit cartridge (extension rdkit or table %s missing): "
                "structure search runs in process", STRUCTURE_TABLE,
            )
    with _lock:
        _backends[engine] = chosen
    return chosen


# --- in-process index --------------------------------------------------------------------------


def _index_for(engine: Engine) -> StructureIndex:
    with _lock:
        index = _indexes.get(engine)
        if index is None:
            index = _indexes[engine] = StructureIndex()
        return index


def keep_index_in(engine: Engine, directory: Path | None) -> None:
    """Keep ``engine``'s in-process index entries in ``directory`` (:data:`INDEX_FILE`) between start-ups.

    The app passes its data directory. The file is keyed by stored SMILES text (see
    ``server.chem.search.save_entries``), so it is right for any state of the table: an entry is used only
    for the very SMILES it was computed from, and what it lacks is computed and written back.
    """
    with _lock:
        if directory is None:
            _files.pop(engine, None)
        else:
            _files[engine] = Path(directory) / INDEX_FILE


def structure_index(session: Session) -> StructureIndex:
    """The engine's in-process index, brought up to date with the compound table.

    Compounds are never deleted and their structures never change, so the index is current
    when it holds exactly the table's ids; the check is one ``count``/``max`` query, and a
    difference (first use, another process registered, a registration rolled back) loads
    or drops only the ids that differ. On first use with a file (:func:`keep_index_in`) the
    entries are read from it instead of being computed.
    """
    engine = _engine(session)
    index = _index_for(engine)
    count, max_id = session.exec(select(func.count(Compound.id), func.max(Compound.id))).one()
    if count == len(index) and max_id == index.max_id():
        return index
    db_ids = set(session.exec(select(Compound.id)).all())
    held = index.ids()
    index.remove_many(held - db_ids)
    missing = sorted(db_ids - held)

    def rows():
        for start in range(0, len(missing), _CHUNK):
            chunk = missing[start:start + _CHUNK]
            yield from session.exec(select(Compound.id, Compound.smiles).where(Compound.id.in_(chunk))).all()

    path = _files.get(engine)
    known = load_entries(path) if path is not None and not held else None
    computed = index.add_many(rows(), known=known)
    first_file = known is not None and not known  # no usable file yet (none, damaged, or another RDKit)
    del known  # only needed while the rows go in
    if missing:
        log.info("structure index: %d compounds added (%d computed, %d held)", len(missing), computed, len(index))
    if path is not None and computed:
        with _lock:
            unsaved = _unsaved[engine] = _unsaved.get(engine, 0) + computed
        if unsaved >= SAVE_AFTER or first_file:
            _save(session, index, path)
            with _lock:
                _unsaved[engine] = 0
    return index


def _save(session: Session, index: StructureIndex, path: Path) -> None:
    entries = index.entries()

    def records():
        for compound_id, smiles in session.exec(select(Compound.id, Compound.smiles)):
            entry = entries.get(compound_id)
            if entry is not None:
                yield smiles, entry

    try:
        n = save_entries(path, records())
    except OSError as exc:  # a read-only data directory costs start-up time, not searches
        log.warning("structure index not written to %s: %s", path, exc)
        return
    log.info("structure index: %d entries written to %s", n, path)


def _apply_pending(session: Session) -> None:
    for engine, compound_id, smiles in session.info.pop(_PENDING, []):
        _index_for(engine).add(compound_id, smiles)


def _drop_pending(session: Session) -> None:
    session.info.pop(_PENDING, None)


# --- registration hook -------------------------------------------------------------------------


def index_compound(session: Session, compound: Compound) -> None:
    """Make a newly flushed compound searchable, in the caller's transaction.

    Cartridge: inserts (or refreshes) its ``compound_structure`` row. In process: the
    structure enters the engine's index when the transaction commits (and is dropped if it
    rolls back), so a failed registration never leaves a ghost in the index.
    """
    if compound.id is None:
        raise ValueError("index_compound needs a flushed compound (with an id)")
    if backend(session) == CARTRIDGE:
        unreadable = session.execute(
            text(
                f"INSERT INTO {STRUCTURE_TABLE} (compound_id, m, mcfp) "
                f"SELECT :id, s.m, morgan_fp(s.m, {MORGAN_RADIUS}) "
                "FROM (SELECT mol_from_smiles(CAST(:smiles AS text)) AS m) AS s "
                "ON CONFLICT (compound_id) DO UPDATE SET m = EXCLUDED.m, mcfp = EXCLUDED.mcfp "
                "RETURNING m IS NULL"
            ),
            {"id": compound.id, "smiles": compound.smiles},
        ).scalar_one()
        if unreadable:
            # Registered by the Python RDKit but not readable by the cartridge's (older) RDKit.
            log.warning("the RDKit cartridge could not read %s (%s): it will not be found by structure search",
                        compound.code, compound.smiles)
        return
    session.info.setdefault(_PENDING, []).append((_engine(session), compound.id, compound.smiles))
    if not session.info.get(_HOOKED):
        event.listen(session, "after_commit", _apply_pending)
        event.listen(session, "after_rollback", _drop_pending)
        session.info[_HOOKED] = True


# --- search ------------------------------------------------------------------------------------


def _check_threshold(threshold: float) -> float:
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or not math.isfinite(threshold):
        raise InputError(f"the similarity threshold must be a number between 0 and 1, not {threshold!r}",
                         field="threshold")
    if not 0 < threshold <= 1:
        raise InputError(
            f"the similarity threshold must be above 0 and at most 1 (Tanimoto); got {threshold:g}",
            field="threshold",
        )
    return float(threshold)


def _given(value: str | None) -> bool:
    return value is not None and bool(value.strip())


def search(
    session: Session,
    *,
    substructure: str | None = None,
    similar: str | None = None,
    threshold: float = 0.7,
    candidate_ids: Collection[int] | None = None,
    include_archived: bool = False,
    include_embargoed: bool = True,
    budget_s: float = MATCH_BUDGET_S,
    limit: int | None = None,
    newest_first: bool = False,
) -> list[Hit]:
    """Compounds that contain a substructure and/or resemble a structure.

    Parameters
    ----------
    session : Session
    substructure : str, optional
        SMARTS, or SMILES (see :func:`server.chem.search.read_query`). Blank counts as not given.
    similar : str, optional
        SMILES (or MOL block) to compare with: Morgan radius-2 count fingerprints,
        Tanimoto similarity (Rogers & Hahn 2010, DOI 10.1021/ci100050t; Willett et al.
        1998, DOI 10.1021/ci9800211).
    threshold : float
        Lowest Tanimoto similarity kept, in (0, 1]; used with ``similar``.
    candidate_ids : collection of int, optional
        Search only these compound ids (e.g. the result of a property filter).
    include_archived : bool
        Archived compounds are left out unless True.
    include_embargoed : bool
        Pass False for a caller who may not see embargoed structures: a structure search
        would otherwise reveal them.
    budget_s : float
        Seconds of substructure matching allowed (:data:`MATCH_BUDGET_S`): checked between
        chunks of molecules in process, PostgreSQL's ``statement_timeout`` on the cartridge.
    limit : int, optional
        Only the first ``limit`` hits (a first page). A substructure-only search then stops
        matching once they are certain (``StructureIndex.substructure(limit=)``; ``LIMIT`` on
        the cartridge), so it does not wait for the whole count.
    newest_first : bool
        Substructure-only order by id descending (newest registration first) instead of ascending.

    Returns
    -------
    list of Hit
        With ``similar``: by similarity (highest first), then id. Otherwise by id
        (registration order; newest first with ``newest_first``). Both filters given:
        compounds that pass both.

    Raises
    ------
    InputError
        ``field="threshold"`` outside (0, 1]; ``field="substructure"`` when neither query
        is given. ChemistryError (an InputError) ``field="substructure"`` or
        ``field="similar"`` for a query RDKit cannot read; its kind QueryTooGeneral for a
        query over ``chem.search.QUERY_LIMITS`` or over the time budget.
    """
    t = _check_threshold(threshold)
    if not _given(substructure) and not _given(similar):
        raise InputError("give a substructure (SMARTS or SMILES) or a structure to compare with (similar)",
                         field="substructure")
    sub_q = read_query(substructure, kind="substructure") if _given(substructure) else None
    sim_q = read_query(similar, kind="similarity") if _given(similar) else None
    if limit is not None and (isinstance(limit, bool) or not isinstance(limit, int) or limit < 1):
        raise InputError(f"limit must be a whole number of at least 1, not {limit!r}", field="limit")
    if candidate_ids is not None:
        candidate_ids = {int(i) for i in candidate_ids}
        if not candidate_ids:
            return []
    newest_first = newest_first and sim_q is None  # similarity keeps its own order
    if backend(session) == CARTRIDGE:
        return _search_cartridge(session, sub_q, sim_q, t, candidate_ids, include_archived, include_embargoed,
                                 budget_s, limit, newest_first)
    if limit is not None and sim_q is None:
        return _first_in_process(session, sub_q, candidate_ids, include_archived, include_embargoed, budget_s,
                                 limit, newest_first)
    hits = _search_in_process(session, sub_q, sim_q, t, candidate_ids, include_archived, include_embargoed,
                              budget_s)
    if newest_first:
        hits.reverse()
    return hits if limit is None else hits[:limit]


def _search_cartridge(session, sub_q: Query | None, sim_q: Query | None, t: float, candidate_ids,
                      include_archived: bool, include_embargoed: bool, budget_s: float, limit: int | None = None,
                      newest_first: bool = False) -> list[Hit]:
    params: dict = {}
    where: list[str] = []
    sim_column = "NULL"
    order = "c.id"
    if sub_q is not None:
        reader = "qmol_from_smarts(CAST(:sub AS cstring))" if sub_q.language == "smarts" \
            else "mol_from_smiles(CAST(:sub AS text))"
        where.append(f"s.m @> {reader}")
        params["sub"] = sub_q.text
    if sim_q is not None:
        session.execute(text("SELECT set_config('rdkit.tanimoto_threshold', :g, true)"),
                        {"g": repr(max(0.0, t - _SCREEN_SLACK))})
        query_fp = f"morgan_fp(mol_from_smiles(CAST(:sim AS text)), {MORGAN_RADIUS})"
        sim_column = f"tanimoto_sml({query_fp}, s.mcfp)"
        where.append(f"s.mcfp % {query_fp}")  # GiST-indexed screen at the slackened threshold
        where.append(f"{sim_column} >= CAST(:t AS double precision)")
        params.update(sim=sim_q.text, t=t)
        order = "similarity DESC, c.id"
    elif newest_first:
        order = "c.id DESC"
    if not include_archived:
        where.append("NOT c.archived")
    if not include_embargoed:
        where.append("NOT c.embargoed")
    if candidate_ids is not None:
        where.append("c.id = ANY(:ids)")
        params["ids"] = sorted(candidate_ids)
    sql = (
        f"SELECT c.id, c.code, {sim_column} AS similarity "
        f"FROM {STRUCTURE_TABLE} AS s JOIN compound AS c ON c.id = s.compound_id "
        f"WHERE {' AND '.join(where)} ORDER BY {order}"
    )
    if limit is not None:
        sql += " LIMIT :limit"
        params["limit"] = limit
    rows = _within_budget(session, text(sql), params, budget_s)
    return [Hit(compound_id=r[0], code=r[1], similarity=None if r[2] is None else float(r[2])) for r in rows]


def _within_budget(session: Session, statement, params: dict, budget_s: float) -> list:
    """Run the search statement with ``statement_timeout`` = the budget, in a savepoint.

    A cancelled statement rolls back to the savepoint only (the caller's transaction goes
    on) and becomes :class:`QueryTooGeneral`; the timeout is put back afterwards.
    """
    before = session.execute(text("SELECT current_setting('statement_timeout')")).scalar_one()
    try:
        with session.begin_nested():
            session.execute(text("SELECT set_config('statement_timeout', :ms, true)"),
                            {"ms": str(max(1, round(budget_s * 1000)))})
            rows = session.execute(statement, params).all()
            session.execute(text("SELECT set_config('statement_timeout', :v, true)"), {"v": before})
    except DBAPIError as exc:
        if getattr(exc.orig, "sqlstate", None) != "57014":  # query_canceled
            raise
        raise QueryTooGeneral(
            f"query too general: matching took longer than the search time budget of {budget_s:g} s "
            "(limit 'budget_s'). Name the elements of more atoms, or narrow the search with filters.",
            field="substructure",
        ) from None
    return rows


def _first_in_process(session, sub_q: Query, candidate_ids, include_archived: bool, include_embargoed: bool,
                      budget_s: float, limit: int, newest_first: bool) -> list[Hit]:
    """The first ``limit`` visible substructure hits: the index is asked for a few more each round (archived,
    embargoed or not yet committed hits are left out afterwards), so a first page matches a few chunks."""
    index = structure_index(session)
    deadline = time.monotonic() + budget_s
    ask = limit
    while True:
        ids = index.substructure(sub_q.mol, candidate_ids, budget_s=max(0.0, deadline - time.monotonic()),
                                 limit=ask, newest_first=newest_first)
        hits = _visible(session, [(i, None) for i in ids], include_archived, include_embargoed)
        if len(hits) >= limit or len(ids) < ask:
            return hits[:limit]
        ask *= 4


def _visible(session, found: list[tuple[int, Optional[float]]], include_archived: bool,
             include_embargoed: bool) -> list[Hit]:
    """``found`` (id, similarity) as hits, in the same order, without what this caller and transaction may not see."""
    ids = [i for i, _ in found]
    info: dict[int, tuple[str, bool, bool]] = {}
    for start in range(0, len(ids), _CHUNK):
        chunk = ids[start:start + _CHUNK]
        rows = session.exec(
            select(Compound.id, Compound.code, Compound.archived, Compound.embargoed).where(Compound.id.in_(chunk))
        ).all()
        info.update({r[0]: (r[1], r[2], r[3]) for r in rows})
    hits = []
    for compound_id, sim in found:
        if compound_id not in info:
            # Committed by another session after this transaction's snapshot (the index is shared):
            # not visible here yet, so not an answer of this transaction.
            continue
        code, archived, embargoed = info[compound_id]
        if (archived and not include_archived) or (embargoed and not include_embargoed):
            continue
        hits.append(Hit(compound_id=compound_id, code=code, similarity=sim))
    return hits


def _search_in_process(session, sub_q: Query | None, sim_q: Query | None, t: float, candidate_ids,
                       include_archived: bool, include_embargoed: bool, budget_s: float) -> list[Hit]:
    index = structure_index(session)
    candidates = candidate_ids
    found: list[tuple[int, Optional[float]]] = []
    if sub_q is not None:
        candidates = index.substructure(sub_q.mol, candidates, budget_s=budget_s)
        found = [(i, None) for i in candidates]
    if sim_q is not None:
        found = index.similar(sim_q.mol, t, candidates)
    return _visible(session, found, include_archived, include_embargoed)


# --- enabling the cartridge after the migrations ------------------------------------------------


@dataclass(frozen=True)
class CartridgeState:
    """What :func:`enable_cartridge` found: ``ready``, and the server's words when it is not."""

    ready: bool
    created_table: bool = False
    error: str = ""


def enable_cartridge(engine: Engine) -> CartridgeState:
    """On PostgreSQL, make the cartridge back end usable if the server allows it; a no-op elsewhere.

    Migration 0004 skips ``compound_structure`` when ``CREATE EXTENSION rdkit`` fails (package
    missing, or the packaged script's defect, see :mod:`server.pg_cartridge`). Once the
    administrator has fixed that, this creates the extension and builds the table and its
    GiST indexes exactly as migration 0004 does, filled from ``compound.smiles``, in one
    transaction. Returns ``CartridgeState(ready=False, error=...)`` with PostgreSQL's message
    when it still cannot (nothing is changed then).
    """
    if engine.dialect.name != "postgresql":
        return CartridgeState(ready=False, error="not PostgreSQL: structure search runs in process")
    with engine.connect() as conn:
        available = conn.execute(text("SELECT 1 FROM pg_available_extensions WHERE name = 'rdkit'")).first()
        conn.rollback()
        if available is None:
            return CartridgeState(ready=False, error="the RDKit cartridge is not installed on the PostgreSQL server "
                                                     "(Debian package postgresql-15-rdkit)")
        try:
            with conn.begin():
                conn.execute(text("CREATE EXTENSION IF NOT EXISTS rdkit"))
                if conn.execute(text("SELECT to_regclass(:t)"), {"t": STRUCTURE_TABLE}).scalar_one() is not None:
                    created = False
                else:
                    # The statements of migrations 0004 and 0021 (kept there as those revisions' record).
                    conn.execute(text(
                        f"CREATE TABLE {STRUCTURE_TABLE} (compound_id integer NOT NULL, m mol, mcfp sfp, "
                        f"CONSTRAINT pk_{STRUCTURE_TABLE} PRIMARY KEY (compound_id), "
                        f"CONSTRAINT fk_{STRUCTURE_TABLE}_compound_id_compound FOREIGN KEY (compound_id) "
                        "REFERENCES compound (id))"))
                    conn.execute(text(f"CREATE INDEX ix_{STRUCTURE_TABLE}_m ON {STRUCTURE_TABLE} USING gist (m)"))
                    conn.execute(text(f"CREATE INDEX ix_{STRUCTURE_TABLE}_mcfp ON {STRUCTURE_TABLE} USING gist (mcfp)"))
                    conn.execute(text(
                        f"INSERT INTO {STRUCTURE_TABLE} (compound_id, m, mcfp) "
                        f"SELECT s.id, s.m, morgan_fp(s.m, {MORGAN_RADIUS}) "
                        "FROM (SELECT id, mol_from_smiles(smiles::cstring) AS m FROM compound) AS s"))
                    created = True
        except DBAPIError as exc:
            return CartridgeState(ready=False, error=str(exc.orig).strip())
    with _lock:
        _backends.pop(engine, None)  # found again on next use
    return CartridgeState(ready=True, created_table=created)
