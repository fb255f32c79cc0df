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
from ..analysis.pxrd import ReferenceStructure
from ..analysis.results import jsonable
from ..budget import AnalysisPool
from ..errors import InputError, OverLimit
from ..ingest.conditions import FORM_FIELDS, Conditions, form_value_as_given, parse_conditions, with_defaults
from ..kinds import KINDS, Context, Kind
from ..models import Batch, Compound, Measurement, RawFile, Sample, live_measurement, live_parents, not_retired, utcnow
from ..plots import figure_json
from . import audit, import_profiles, notifications, samples, stats, verdicts
from .errors import Archived, Duplicate, Forbidden, NotFound, TooLarge

__all__ = ["FORM_FIELDS", "upload_measurement", "revise_measurement", "reanalyse", "reanalyse_one", "set_archived",
           "refresh_derived", "refresh_batches"]

#: The physical conditions of a measurement: the same bytes posted again with one of these
#: different are a conflict (409), not the same measurement.
_PHYSICAL_KEYS = ("area_cm2", "thickness_um", "mass_mg", "rate_K_min", "temperature_K", "frequency_Hz", "endo",
                  "sweep")
#: Everything a correction may change (``sources`` and the file's other metadata do not count).
_SAME_KEYS = _PHYSICAL_KEYS + ("instrument", "operator", "notes")


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


def context_for(compound: Compound, *, session: Optional[Session] = None, kind: Optional[Kind] = None) -> Context:
    """What the registry knows about the compound; a kind that compares with crystal structures
    (``Kind.needs_structures``) also gets every live CIF registered for the compound."""
    structures: tuple[ReferenceStructure, ...] = ()
    if session is not None and kind is not None and kind.needs_structures:
        rows = session.exec(
            select(Measurement, RawFile).join(RawFile, RawFile.id == Measurement.raw_file_id)
            .join(Batch, Batch.id == Measurement.batch_id)
            .where(Batch.compound_id == compound.id, Measurement.kind == "crystal", live_measurement())
            .order_by(Measurement.id)).all()
        structures = tuple(ReferenceStructure(m.id, _structure_label(m), raw.data) for m, raw in rows)
    return Context(formula=compound.formula, molar_mass_g_mol=compound.mw, smiles=compound.smiles,
                   structures=structures)


def _structure_label(m: Measurement) -> str:
    """``CIF #12 (P 1 21 1, 150 K)``: how a reference structure is named on pages."""
    parts = [p for p in (m.results.get("space_group"),
                         f"{m.results['temperature_K']:.0f} K" if m.results.get("temperature_K") else "") if p]
    return f"CIF #{m.id}" + (f" ({', '.join(parts)})" if parts else "")


def read(kind: Kind, raw: bytes, *, filename: str | None, form: Mapping[str, Optional[str]],
         defaults: Mapping[str, Optional[float]] | None = None, parsed: Any = None) -> tuple[Any, Conditions]:
    """Read one file and its conditions (pure): the form wins over the file's ``# key: value``
    lines, which win over ``defaults`` (the sample's geometry, source ``"sample"``). ``parsed``: the
    table read already (a block read through an import profile)."""
    if not raw:
        raise InputError("the file is empty", field="file")
    if parsed is None:
        parsed = kind.read(raw, filename)
    metadata = parsed.metadata if kind.table else getattr(parsed, "metadata", {}) if kind.reader else {}
    conditions = with_defaults(parse_conditions(form, metadata), defaults or {}, source="sample")
    return parsed, conditions


def analyse(kind: Kind, raw: bytes, *, filename: str | None, form: Mapping[str, Optional[str]], context: Context,
            defaults: Mapping[str, Optional[float]] | None = None, parsed: Any = None,
            budget: Optional[AnalysisPool] = None) -> Analysed:
    """Read and analyse one file (pure: no database). Raises InputError on bad input.

    ``budget``: run the read and the analysis in that pool's child process, within its CPU-time,
    memory and wall-time budget (:mod:`server.budget`; OverLimit 413 past it). Every route that
    takes a file passes one; without it (re-analysing stored files from the command line, a
    stored measurement's figure) the work runs here."""
    args = (kind.name, raw, filename, dict(form), context, dict(defaults or {}), parsed)
    parsed, conditions, result = budget.run(_read_and_analyse, *args) if budget is not None else _read_and_analyse(*args)
    return Analysed(kind=kind, parsed=parsed, conditions=conditions, result=result)


def _read_and_analyse(kind_name: str, raw: bytes, filename: str | None, form: dict, context: Context,
                      defaults: dict, parsed: Any) -> tuple[Any, Conditions, Any]:
    """The budgeted unit of work (module level, so a child process can be sent it by name)."""
    kind = KINDS[kind_name]
    parsed, conditions = read(kind, raw, filename=filename, form=form, defaults=defaults, parsed=parsed)
    return parsed, conditions, kind.analyse(parsed, conditions, context)


def same_conditions(stored: Mapping[str, Any], new: Conditions, *, given_only: bool = False) -> bool:
    """Whether stored conditions (``Conditions.to_dict()``) equal ``new`` in every value.

    ``given_only``: compare only the physical conditions ``new`` gives (a re-post that leaves
    out what was typed the first time, or types only who measured it, is the same measurement).
    """
    fresh = new.to_dict()
    for key in _PHYSICAL_KEYS if given_only else _SAME_KEYS:
        a, b = stored.get(key), fresh.get(key)
        if given_only and (b is None or (key == "endo" and new.sources.get("endo") is None)):
            continue
        if isinstance(a, (int, float)) and isinstance(b, (int, float)):
            if abs(a - b) > 1e-9 * max(abs(a), abs(b)):
                return False
        elif (a or None) != (b or None):
            return False
    return True


def _live_copy(session: Session, sample_id: int, sha: str, kind: str, block: int = 0) -> Optional[Measurement]:
    return session.exec(select(Measurement).where(Measurement.sample_id == sample_id, Measurement.sha256 == sha,
                                                  Measurement.kind == kind, Measurement.block == block,
                                                  not_retired())).first()  # the rows of the live-copy index


def _same_or_conflict(existing: Measurement, conditions: Conditions) -> Measurement:
    if same_conditions(existing.conditions, conditions, given_only=True):
        return existing
    raise Duplicate(
        f"these bytes are stored already as measurement {existing.id} with other conditions; to correct "
        f"its conditions, POST them to /api/v1/measurements/{existing.id}/revise", existing=existing.id)


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
    sample: Optional[Sample] = None,
    budget: Optional[AnalysisPool] = None,
) -> tuple[Measurement, bool]:
    """Store and analyse an instrument file for a sample of a batch; returns (measurement, created).

    Without ``sample`` the file goes to the batch's default sample, created on first use. Area
    and thickness the upload does not give come from the sample. The same bytes posted again
    to the same sample with the same conditions return the stored measurement (created False);
    with other conditions they are refused (Duplicate, 409: corrections go through
    :func:`revise_measurement`). Bytes whose only copies are archived or superseded are stored anew.
    ``budget``: the pool the file is analysed in (:func:`analyse`); OverLimit 413 past its budget.
    """
    if batch.archived:
        raise Archived(f"batch {batch.code} is archived; restore it before adding measurements")
    compound = session.get(Compound, batch.compound_id)
    if compound.archived:
        raise Archived(f"compound {compound.code} is archived; restore it before adding measurements")
    kind = get_kind(kind_name)
    if allowed_kinds is not None and kind.name not in allowed_kinds:
        raise Forbidden(f"this token may upload only {', '.join(allowed_kinds)}, not {kind.name}")
    sha = hashlib.sha256(raw).hexdigest()
    if sample is None:
        sample = samples.default_sample(session, batch)
    defaults = samples.sample_defaults(sample)
    if sample is not None:
        existing = _live_copy(session, sample.id, sha, kind.name)
        if existing is not None:
            _, conditions = read(kind, raw, filename=filename, form=form, defaults=defaults)
            return _same_or_conflict(existing, conditions), False
    context = context_for(compound, session=session, kind=kind)
    done = analyse(kind, raw, filename=filename, form=form, context=context, defaults=defaults, budget=budget)

    if sample is None:
        sample = samples.ensure_default_sample(session, batch, actor=actor)  # first: it may roll back a lost race
        existing = _live_copy(session, sample.id, sha, kind.name)
        if existing is not None:
            return _same_or_conflict(existing, done.conditions), False
    m = _store(session, batch=batch, sample=sample, done=done, raw=raw, sha=sha, filename=filename, actor=actor)
    try:
        session.flush()
    except IntegrityError:
        # The same file arrived twice at once; the other request stored it first.
        session.rollback()
        again = _live_copy(session, sample.id, sha, kind.name)
        if again is None:
            raise
        return _same_or_conflict(again, done.conditions), False
    refresh_derived(session, [m], actor=actor)
    record_created(session, compound, [m], actor=actor)
    session.commit()
    session.refresh(m)
    return m, True


def record_created(session: Session, compound: Compound, stored: Sequence[Measurement], *, actor: str,
                   supersedes: Optional[int] = None) -> None:
    """The one place a stored measurement is announced: its ``measurement.create`` AuditEvent (results
    left out: they are on the row) and the notification of the compound's registrant and followers."""
    for m in stored:
        after = {k: v for k, v in audit.snapshot(m).items() if k != "results"}
        if supersedes is not None:
            after["supersedes"] = supersedes
        audit.record(session, actor=actor, action="measurement.create", entity="measurement", code=str(m.id),
                     compound_id=compound.id, after=after)
    notifications.measurements_stored(session, compound, stored, actor=actor)


def _store(session: Session, *, batch: Batch, sample: Sample, done: Analysed, raw: bytes, sha: str,
           filename: str | None, actor: str, supersedes: Optional[int] = None, profile_name: str = "",
           profile_version: Optional[int] = None, block: int = 0,
           correction: Optional[dict[str, Any]] = None) -> Measurement:
    """Add the raw file (once per checksum) and the measurement to the session (not flushed)."""
    rawfile = session.exec(select(RawFile).where(RawFile.sha256 == sha)).first()
    if rawfile is None:
        rawfile = RawFile(sha256=sha, size=len(raw), filename=_display_name(filename), data=raw,
                          content_type=done.kind.content_type)
        session.add(rawfile)
        session.flush()
    c = done.conditions
    m = Measurement(
        batch_id=batch.id,
        sample_id=sample.id,
        kind=done.kind.name,
        raw_file_id=rawfile.id,
        sha256=sha,
        conditions=jsonable(c.to_dict()),
        results=done.results,
        flags=done.flags,
        verdict=done.verdict,
        analysis_version=done.kind.version,
        temperature_K=c.temperature_K,
        instrument=c.instrument or "",
        operator=c.operator or "",
        notes=c.notes or "",
        supersedes_id=supersedes,
        correction=correction,
        created_by=actor,
        profile_name=profile_name,
        profile_version=profile_version,
        block=block,
    )
    session.add(m)
    return m


def stored_table(session: Session, m: Measurement, raw: bytes) -> Any:
    """A measurement's table read again as it was first read: through its import profile version and
    block, or None (the kind's own reader)."""
    if not m.profile_name:
        return None
    return import_profiles.stored_block(session, name=m.profile_name, version=m.profile_version, block=m.block,
                                        raw=raw).table


#: ``revise_measurement(correction=KEEP)``: the old measurement's edit goes over unchanged.
KEEP = object()


def newest_of(session: Session, m: Measurement) -> Measurement:
    """The end of a chain of corrections."""
    seen = 0
    while m.superseded_by_id is not None and seen < 1000:
        m = session.get(Measurement, m.superseded_by_id)
        seen += 1
    return m


def revise_measurement(
    *,
    session: Session,
    measurement: Measurement,
    form: Mapping[str, Optional[str]],
    actor: str,
    raw: Optional[bytes] = None,
    filename: Optional[str] = None,
    budget: Optional[AnalysisPool] = None,
    correction: Any = KEEP,
    action: str = "measurement.revise",
) -> Measurement:
    """Correct a measurement: a new measurement with the changed conditions (and optionally a
    replacement file) that ``supersedes`` the old one; the old one keeps its rows and raw file,
    gets ``superseded_by``, and drops out of lists, figures, stats and verdicts.

    Conditions not given keep the values typed on the old upload; the file's own lines are read
    again, and the sample's geometry fills what neither gives. ``correction``: a person's edit of the
    analysis to store on the new measurement (:mod:`server.services.corrections`); by default the old
    one's edit goes over with the same file and is dropped with a replacement file, whose analysis differs.

    Raises
    ------
    Duplicate
        409: the measurement was corrected already (names the newest), or a replacement file is
        already stored live for the sample.
    InputError
        422: nothing changes, or the new conditions or file are bad. Nothing is stored then.
    """
    m = measurement
    if m.superseded_by_id is not None:
        newest = newest_of(session, m)
        raise Duplicate(f"measurement {m.id} was corrected already; revise the newest, measurement {newest.id}",
                        existing=newest.id)
    kind = get_kind(m.kind)
    sample = session.get(Sample, m.sample_id)
    batch = session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    old_raw = session.get(RawFile, m.raw_file_id)
    merged: dict[str, Optional[str]] = {key: form_value_as_given(m.conditions, key) for key in FORM_FIELDS}
    merged.update({k: v for k, v in form.items() if k in FORM_FIELDS and v is not None and str(v).strip()})
    data = raw if raw is not None else old_raw.data
    name = filename if raw is not None else old_raw.filename
    sha = hashlib.sha256(data).hexdigest()
    done = analyse(kind, data, filename=name, form=merged, context=context_for(compound, session=session, kind=kind),
                   defaults=samples.sample_defaults(sample), parsed=stored_table(session, m, data), budget=budget)
    if correction is KEEP:
        correction = m.correction if sha == m.sha256 else None
    if sha == m.sha256 and same_conditions(m.conditions, done.conditions) and correction == m.correction:
        raise InputError("the revision changes nothing: give a condition that differs from the stored one, "
                         "or a replacement file", field="conditions")
    if sha != m.sha256:
        other = _live_copy(session, sample.id, sha, kind.name, m.block)
        if other is not None:
            raise Duplicate(f"the replacement file is stored already for this sample as measurement {other.id}",
                            existing=other.id)
    before = {"conditions": m.conditions, "sha256": m.sha256, "results": m.results, "correction": m.correction}
    # The live-copy index allows one live row per bytes: the old row leaves it (pointing at
    # itself for the moment) before the new one is inserted, all in this one transaction.
    m.superseded_by_id = m.id
    session.add(m)
    session.flush()
    new = _store(session, batch=batch, sample=sample, done=done, raw=data, sha=sha, filename=name, actor=actor,
                 supersedes=m.id, profile_name=m.profile_name, profile_version=m.profile_version, block=m.block,
                 correction=correction)
    session.flush()
    m.superseded_by_id = new.id
    session.add(m)
    refresh_derived(session, [m, new], actor=actor)
    audit.record(session, actor=actor, action=action, entity="measurement", code=str(m.id),
                 compound_id=compound.id, before=before,
                 after={"superseded_by": new.id, "conditions": new.conditions, "sha256": new.sha256,
                        "results": new.results, "correction": new.correction})
    record_created(session, compound, [new], actor=actor, supersedes=m.id)
    session.commit()
    session.refresh(new)
    return new


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
    sample: str | None = None, include_superseded: bool = False, limit: int = 100, offset: int = 0,
) -> tuple[list[Measurement], int]:
    query = select(Measurement).join(Batch, Batch.id == Measurement.batch_id).join(Compound, Compound.id == Batch.compound_id)
    count = select(func.count()).select_from(Measurement).join(Batch, Batch.id == Measurement.batch_id).join(
        Compound, Compound.id == Batch.compound_id)
    # live rows only (models.live_measurement), superseded ones too when asked for
    conditions = [Measurement.archived == False, live_parents()]  # noqa: E712 - SQL expression
    if not include_superseded:
        conditions.append(Measurement.superseded_by_id.is_(None))
    if sample:
        conditions.append(Measurement.sample_id == samples.get_sample(session, sample).id)
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


def newest(ms: Sequence[Measurement]) -> Optional[Measurement]:
    """The most recently stored of ``ms`` (by ``created_at``, then id), whatever order they come in.

    Lists of measurements come newest-first (:func:`list_measurements`) or oldest-first (a compound's
    plots), so "the latest" is never taken by position.
    """
    return max(ms, key=lambda m: (m.created_at, m.id)) if ms else None


def refresh_derived(session: Session, changed: Sequence[Measurement], *, actor: str,
                    compounds_too: Sequence[Compound] = ()) -> None:
    """The one path after measurements are stored, archived, restored or re-analysed, or stop or
    start counting because their batch or compound was archived or restored.

    Each kind's derived rows (``Kind.derive``: the barrier of a rate table, the crystal phase
    of a structure) are brought in step with its measurement, then every compound touched (and
    each of ``compounds_too``) gets its verdict and its CompoundStats row recomputed. The caller commits.
    """
    compounds: dict[int, Compound] = {c.id: c for c in compounds_too}
    for m in changed:
        batch = session.get(Batch, m.batch_id)
        compound = compounds.setdefault(batch.compound_id, session.get(Compound, batch.compound_id))
        kind = KINDS.get(m.kind)
        if kind is not None and kind.derive is not None:
            kind.derive(session, compound=compound, batch=batch, measurement=m, actor=actor)
    session.flush()
    for compound_id in sorted(compounds):
        verdicts.recompute(session, compounds[compound_id], actor=actor)
        stats.refresh(session, compounds[compound_id])


def reanalyse_one(session: Session, m: Measurement) -> Analysed:
    """Analyse a stored measurement again from its raw file, with the current code."""
    raw = session.get(RawFile, m.raw_file_id)
    batch = session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    form = {key: form_value_as_given(m.conditions, key) for key in FORM_FIELDS}
    defaults = samples.sample_defaults(session.get(Sample, m.sample_id))
    kind = get_kind(m.kind)
    return analyse(kind, raw.data, filename=raw.filename, form=form,
                   context=context_for(compound, session=session, kind=kind), defaults=defaults,
                   parsed=stored_table(session, m, raw.data))


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
        except (InputError, OverLimit) as exc:
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
        "sample": session.get(Sample, m.sample_id).code,
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
        "supersedes": m.supersedes_id,
        "superseded_by": m.superseded_by_id,
        "correction": m.correction,
        "created_at": m.created_at.isoformat(),
        "created_by": m.created_by,
        "profile": m.profile_name or None,
        "profile_version": m.profile_version,
        "block": m.block,
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
    return {**body, "results": {}, "conditions": {}, "temperature_K": None, "notes": "", "filename": "", "correction": None,
            "flags": [{"code": f.get("code", ""), "message": RECEIPT_WITHHELD} for f in (m.flags or [])]}


def may_download_raw(session: Session, m: Measurement, actor: Optional[Actor]) -> bool:
    """Raw files of an embargoed compound's measurements are for callers who may see its structure
    (a crystal's CIF, an NMR table: the raw bytes carry the structure or what follows from it)."""
    batch = session.get(Batch, m.batch_id)
    return access.may_see_structure(actor, session.get(Compound, batch.compound_id))


def refresh_batches(session: Session, compound: Compound, batch_ids: Sequence[int], *, actor: str) -> None:
    """After batches of ``compound`` (or the compound itself) were archived or restored: their
    measurements' derived rows, the verdict and the stats follow (:func:`refresh_derived`; the rule
    is ``models.live_measurement``). The caller commits."""
    ms = session.exec(select(Measurement).where(Measurement.batch_id.in_(list(batch_ids)))
                      .order_by(Measurement.id)).all() if batch_ids else []
    refresh_derived(session, ms, actor=actor, compounds_too=[compound])


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
