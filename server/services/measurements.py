"""Uploading raw instrument files, analysing them, and re-analysing what is stored.

The raw bytes are the source of truth: they are stored unchanged with their SHA-256, and
every number on a measurement is derived from them by the analysis whose version is stamped
on the row. Reading, unit parsing and analysis all happen before anything is added to the
session, so a file that fails anywhere leaves nothing behind.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any, Mapping, Optional, Sequence

from sqlalchemy import func
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..analysis.results import jsonable
from ..errors import InputError
from ..ingest.conditions import FORM_FIELDS, Conditions, form_value_as_given, parse_conditions
from ..kinds import KINDS, Context, Kind
from ..models import Batch, Compound, Measurement, RawFile, utcnow
from ..plots import figure_json
from . import audit, stats, verdicts
from .errors import Forbidden, NotFound, TooLarge

__all__ = ["FORM_FIELDS", "upload_measurement", "reanalyse", "reanalyse_one", "set_archived", "refresh_derived"]


@dataclass(frozen=True)
class Analysed:
    """A file read and analysed, not yet stored."""

    kind: Kind
    parsed: Any
    conditions: Conditions
    result: Any

    @property
    def results(self) -> dict[str, Any]:
        return jsonable(self.result.to_dict())

    @property
    def flags(self) -> list[dict[str, str]]:
        return [f.to_dict() for f in getattr(self.result, "flags", ())]

    @property
    def verdict(self) -> str:
        return getattr(self.result, "verdict", "") or ""


def get_kind(name: str) -> Kind:
    try:
        return KINDS[name]
    except KeyError:
        raise InputError(f"unknown kind {name!r}; use one of {', '.join(KINDS)}", field="kind") from None


def context_for(compound: Compound) -> Context:
    return Context(formula=compound.formula, molar_mass_g_mol=compound.mw, smiles=compound.smiles)


def analyse(kind: Kind, raw: bytes, *, filename: str | None, form: Mapping[str, Optional[str]], context: Context) -> Analysed:
    """Read and analyse one file (pure: no database). Raises InputError on bad input."""
    if not raw:
        raise InputError("the file is empty", field="file")
    parsed = kind.read(raw, filename)
    metadata = parsed.metadata if kind.table else {}
    conditions = parse_conditions(form, metadata)
    result = kind.analyse(parsed, conditions, context)
    return Analysed(kind=kind, parsed=parsed, conditions=conditions, result=result)


def upload_measurement(
    *,
    session: Session,
    batch: Batch,
    kind_name: str,
    raw: bytes,
    filename: str | None,
    form: Mapping[str, Optional[str]],
    actor: str,
    allowed_kinds: Optional[Sequence[str]] = None,
) -> tuple[Measurement, bool]:
    """Store and analyse an instrument file for a batch; returns (measurement, created).

    The same bytes posted again for the same batch and kind return the stored measurement
    (created False) without analysing again.
    """
    kind = get_kind(kind_name)
    if allowed_kinds is not None and kind.name not in allowed_kinds:
        raise Forbidden(f"this token may upload only {', '.join(allowed_kinds)}, not {kind.name}")
    sha = hashlib.sha256(raw).hexdigest()
    existing = session.exec(
        select(Measurement).where(Measurement.batch_id == batch.id, Measurement.sha256 == sha,
                                  Measurement.kind == kind.name)
    ).first()
    if existing is not None:
        return existing, False
    compound = session.get(Compound, batch.compound_id)
    done = analyse(kind, raw, filename=filename, form=form, context=context_for(compound))

    rawfile = session.exec(select(RawFile).where(RawFile.sha256 == sha)).first()
    if rawfile is None:
        rawfile = RawFile(sha256=sha, size=len(raw), filename=_display_name(filename), data=raw,
                          content_type=kind.content_type)
        session.add(rawfile)
        session.flush()
    c = done.conditions
    m = Measurement(
        batch_id=batch.id,
        kind=kind.name,
        raw_file_id=rawfile.id,
        sha256=sha,
        conditions=jsonable(c.to_dict()),
        results=done.results,
        flags=done.flags,
        verdict=done.verdict,
        analysis_version=kind.version,
        temperature_K=c.temperature_K,
        instrument=c.instrument or "",
        operator=c.operator or "",
        notes=c.notes or "",
        created_by=actor,
    )
    session.add(m)
    try:
        session.flush()
    except IntegrityError:
        # The same file arrived twice at once; the other request stored it first.
        session.rollback()
        again = session.exec(
            select(Measurement).where(Measurement.batch_id == batch.id, Measurement.sha256 == sha,
                                      Measurement.kind == kind.name)
        ).first()
        if again is None:
            raise
        return again, False
    refresh_derived(session, [m], actor=actor)
    audit.record(session, actor=actor, action="measurement.create", entity="measurement", code=str(m.id),
                 compound_id=compound.id, after={k: v for k, v in audit.snapshot(m).items() if k != "results"})
    session.commit()
    session.refresh(m)
    return m, True


def _display_name(filename: str | None) -> str:
    # Only ever shown to people: keep the last path component, printable characters, 255 at most.
    name = (filename or "").replace("\\", "/").rsplit("/", 1)[-1]
    name = "".join(ch for ch in name if ch.isprintable())
    return name[:255]


def get_measurement(session: Session, measurement_id: int) -> Measurement:
    m = session.get(Measurement, measurement_id)
    if m is None:
        raise NotFound(f"no measurement {measurement_id}")
    return m


def list_measurements(
    session: Session, *, batch: str | None = None, compound: str | None = None, kind: str | None = None,
    limit: int = 100, offset: int = 0,
) -> tuple[list[Measurement], int]:
    query = select(Measurement).join(Batch, Batch.id == Measurement.batch_id).join(Compound, Compound.id == Batch.compound_id)
    count = select(func.count()).select_from(Measurement).join(Batch, Batch.id == Measurement.batch_id).join(
        Compound, Compound.id == Batch.compound_id)
    conditions = [Measurement.archived == False]  # noqa: E712 - SQL expression
    if batch:
        conditions.append(Batch.code == batch)
    if compound:
        conditions.append(Compound.code == compound)
    if kind:
        get_kind(kind)
        conditions.append(Measurement.kind == kind)
    query, count = query.where(*conditions), count.where(*conditions)
    rows = session.exec(query.order_by(Measurement.id.desc()).offset(offset).limit(limit)).all()
    return list(rows), session.exec(count).one()


def refresh_derived(session: Session, changed: Sequence[Measurement], *, actor: str) -> None:
    """The one path after measurements are stored, archived, restored or re-analysed.

    Each kind's derived rows (``Kind.derive``: the barrier of a rate table, the crystal phase
    of a structure) are brought in step with its measurement, then every compound touched
    gets its verdict and its CompoundStats row recomputed. The caller commits.
    """
    compounds: dict[int, Compound] = {}
    for m in changed:
        batch = session.get(Batch, m.batch_id)
        compound = compounds.setdefault(batch.compound_id, session.get(Compound, batch.compound_id))
        kind = KINDS.get(m.kind)
        if kind is not None and kind.derive is not None:
            kind.derive(session, compound=compound, batch=batch, measurement=m, actor=actor)
    session.flush()
    for compound_id in sorted(compounds):
        verdicts.recompute(session, compounds[compound_id])
        stats.refresh(session, compounds[compound_id])


def reanalyse_one(session: Session, m: Measurement) -> Analysed:
    """Analyse a stored measurement again from its raw file, with the current code."""
    raw = session.get(RawFile, m.raw_file_id)
    batch = session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    form = {key: form_value_as_given(m.conditions, key) for key in FORM_FIELDS}
    return analyse(get_kind(m.kind), raw.data, filename=raw.filename, form=form, context=context_for(compound))


@dataclass(frozen=True)
class Change:
    measurement_id: int
    kind: str
    old_version: str
    new_version: str
    changed: dict[str, tuple[Any, Any]]
    error: Optional[str] = None


def _diff(old: Mapping[str, Any], new: Mapping[str, Any], rel: float = 1e-9) -> dict[str, tuple[Any, Any]]:
    out = {}
    for key in sorted(set(old) | set(new)):
        a, b = old.get(key), new.get(key)
        if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
            if abs(a - b) <= rel * max(abs(a), abs(b), 1e-300):
                continue
        elif a == b:
            continue
        out[key] = (a, b)
    return out


def reanalyse(*, session: Session, kind: str | None = None, actor: str = "cli:reanalyze") -> list[Change]:
    """Recompute every stored measurement (of one kind) from its raw file; store and report what changed."""
    query = select(Measurement).order_by(Measurement.id)
    if kind:
        get_kind(kind)
        query = query.where(Measurement.kind == kind)
    changes = []
    touched: list[Measurement] = []
    for m in session.exec(query).all():
        try:
            done = reanalyse_one(session, m)
        except InputError as exc:
            changes.append(Change(m.id, m.kind, m.analysis_version, m.analysis_version, {}, error=str(exc)))
            continue
        touched.append(m)  # read again: its derived rows are refreshed even when nothing moved
        diff = _diff(m.results, done.results)
        if done.verdict != m.verdict:
            diff["verdict"] = (m.verdict, done.verdict)
        if done.flags != m.flags:
            diff["flags"] = ([f["code"] for f in m.flags], [f["code"] for f in done.flags])
        if diff or m.analysis_version != done.kind.version:
            before = {"results": m.results, "verdict": m.verdict, "analysis_version": m.analysis_version}
            changes.append(Change(m.id, m.kind, m.analysis_version, done.kind.version, diff))
            m.results, m.flags, m.verdict = done.results, done.flags, done.verdict
            m.analysis_version, m.analysed_at = done.kind.version, utcnow()
            session.add(m)
            audit.record(session, actor=actor, action="measurement.reanalyse", entity="measurement", code=str(m.id),
                         before=before, after={"results": m.results, "verdict": m.verdict,
                                               "analysis_version": m.analysis_version})
    refresh_derived(session, touched, actor=actor)
    session.commit()
    return changes


def measurement_read(session: Session, m: Measurement) -> dict[str, Any]:
    batch = session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    raw = session.get(RawFile, m.raw_file_id)
    kind = KINDS.get(m.kind)
    return {
        "id": m.id,
        "kind": m.kind,
        "batch": batch.code,
        "compound": compound.code,
        "sha256": m.sha256,
        "filename": raw.filename,
        "size": raw.size,
        "results": m.results,
        "verdict": m.verdict or None,
        "flags": m.flags,
        "analysis_version": m.analysis_version,
        "method": kind.method if kind else "",
        "conditions": m.conditions,
        "temperature_K": m.temperature_K,
        "instrument": m.instrument,
        "operator": m.operator,
        "notes": m.notes,
        "archived": m.archived,
        "created_at": m.created_at.isoformat(),
        "created_by": m.created_by,
    }


RECEIPT_WITHHELD = "withheld (embargoed compound)"


def measurement_as_seen(session: Session, m: Measurement, actor: Optional[Actor]) -> dict[str, Any]:
    """:func:`measurement_read` as ``actor`` may see it. For a measurement of an embargoed compound
    and a caller who may not see its structure (an upload token, ``server/access.py``) it is a
    receipt: id, kind, batch, compound code, SHA-256, size, analysis status (verdict, analysis
    version, flag codes) and when; results, conditions, notes, file name and flag messages are
    withheld, since they can quote or imply the structure (a DSC result carries the molar mass, molar
    over specific enthalpy gives it, a crystal's formula-mismatch flag quotes the registered formula)."""
    body = measurement_read(session, m)
    batch = session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    if access.may_see_structure(actor, compound):
        return body
    return {**body, "results": {}, "conditions": {}, "temperature_K": None, "notes": "", "filename": "",
            "flags": [{"code": f.get("code", ""), "message": RECEIPT_WITHHELD} for f in (m.flags or [])]}


def may_download_raw(session: Session, m: Measurement, actor: Optional[Actor]) -> bool:
    """Raw files of an embargoed compound's measurements are for callers who may see its structure
    (a crystal's CIF, an NMR table: the raw bytes carry the structure or what follows from it)."""
    batch = session.get(Batch, m.batch_id)
    return access.may_see_structure(actor, session.get(Compound, batch.compound_id))


def set_archived(*, session: Session, measurement: Measurement, archived: bool, actor: str) -> Measurement:
    """Archive or restore a measurement; the raw file stays, its derived rows, the verdict and the figures follow."""
    measurement.archived = archived
    session.add(measurement)
    batch = session.get(Batch, measurement.batch_id)
    compound = session.get(Compound, batch.compound_id)
    audit.record(session, actor=actor, action="measurement.archive" if archived else "measurement.restore",
                 entity="measurement", code=str(measurement.id), compound_id=compound.id,
                 before={"archived": not archived}, after={"archived": archived})
    refresh_derived(session, [measurement], actor=actor)
    session.commit()
    session.refresh(measurement)
    return measurement


def read_upload(file: Any, limit: int) -> bytes:
    """The uploaded bytes of ``file`` (an upload with a ``.file``), refusing more than ``limit``
    bytes without reading further."""
    data = file.file.read(limit + 1)
    if len(data) > limit:
        raise TooLarge(f"the file is larger than the limit of {limit / 1048576:.3g} MiB (REMANENCE_MAX_UPLOAD_MB)")
    return data


def measurement_figure(session: Session, m: Measurement) -> Optional[str]:
    """The measurement's figure as Plotly JSON (re-analysed from its raw file), cached per file,
    analysis version and conditions; None for kinds without a figure."""
    kind = KINDS.get(m.kind)
    if kind is None or kind.figure is None:
        return None
    key = (m.id, m.sha256, m.analysis_version, repr(sorted(m.conditions.items())))
    cached = _FIGURES.get(key)
    if cached is None:
        done = reanalyse_one(session, m)
        cached = figure_json(kind.figure(done.parsed, done.result))
        if len(_FIGURES) > 64:
            _FIGURES.pop(next(iter(_FIGURES)))
        _FIGURES[key] = cached
    return cached


_FIGURES: dict[tuple, str] = {}
