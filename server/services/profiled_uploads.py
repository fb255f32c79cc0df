"""Uploads read through an import profile, and the dry run of any upload.

A profiled file may hold several blocks (loops of a temperature sweep): each block becomes a
measurement, all sharing the one stored raw file (``Measurement.block`` says which), and two or
more blocks are stated as a series of the sample (``series.state_series``), all in one transaction:
a block that fails to read or analyse leaves nothing behind. The dry run reads and analyses exactly
as the upload would and stores nothing, writes no audit row.
"""

from __future__ import annotations

import dataclasses
import hashlib
from typing import Any, Mapping, Optional, Sequence

from sqlalchemy.exc import IntegrityError
from sqlmodel import Session

from .. import access
from ..access import Actor
from ..budget import AnalysisPool
from ..errors import InputError
from ..ingest.columns import BY_NAME
from ..ingest.profiles import ProfiledRead, profile_from_json, read_profiled
from ..ingest.units import UNIT_PARSE_ERRORS, parse_unit
from ..plots import figure_json
from ..kinds import Context
from ..models import SERIES_VARIABLES, Batch, Compound, Measurement, Sample
from . import audit, import_profiles, samples, series
from .errors import Archived, Duplicate, Forbidden
from .measurements import (Analysed, _live_copy, _read_and_analyse, _store, analyse, context_for, get_kind, measurement_as_seen,
                           record_created,
                           refresh_derived, same_conditions)

#: Rows of the parsed table shown in a preview.
PREVIEW_ROWS = 8


def _check_target(session: Session, batch: Batch, kind_name: str, allowed_kinds: Optional[Sequence[str]]):  # noqa: ANN202
    if batch.archived:
        raise Archived(f"batch {batch.code} is archived; restore it before adding measurements")
    compound = session.get(Compound, batch.compound_id)
    if compound.archived:
        raise Archived(f"compound {compound.code} is archived; restore it before adding measurements")
    kind = get_kind(kind_name)
    if allowed_kinds is not None and kind.name not in allowed_kinds:
        raise Forbidden(f"this token may upload only {', '.join(allowed_kinds)}, not {kind.name}")
    return compound, kind


def resolve_profile(session: Session, *, profile_name: Optional[str], kind_name: Optional[str],
                    bound: str = "") -> tuple[Optional[Any], str]:
    """(profile row or None, kind). A token bound to a profile reads every file through it; naming
    another profile, or a kind the profile does not read, is refused (422 naming the field)."""
    name = (profile_name or "").strip() or bound
    if bound and name != bound:
        raise InputError(f"this token reads files through profile {bound!r} only", field="profile")
    if not name:
        if not kind_name:
            raise InputError("name the kind of measurement (or an import profile)", field="kind")
        return None, kind_name
    row = import_profiles.get_profile(session, name)
    if kind_name and kind_name != row.kind:
        raise InputError(f"profile {name!r} reads {row.kind} files, not {kind_name}", field="kind")
    return row, row.kind


def _read_and_analyse_blocks(kind_name: str, raw: bytes, spec: dict, version: int, filename: Optional[str],
                             form: dict, context: Context, defaults: dict) -> tuple[ProfiledRead, list[tuple]]:
    """The budgeted unit of work of a profiled file (module level, so a child process can be sent it by
    name): read it through the profile ``spec`` (its JSON: a built profile holds pint units, which belong to
    this process's registry), then read each block's conditions and analyse it. The read goes back
    without its profile, for the same reason."""
    read = read_profiled(raw, profile_from_json(spec, version=version))
    varies = read.profile.varies
    if varies and len(read.blocks) > 1 and (form.get(varies) or "").strip():
        raise InputError(f"{varies} varies between the blocks of this file; leave it out of the form", field=varies)
    parts = [_read_and_analyse(kind_name, raw, filename, form, context, defaults, b.table) for b in read.blocks]
    return dataclasses.replace(read, profile=None), parts


def _analyse_blocks(kind, spec: Mapping[str, Any], version: int, raw: bytes, *, filename, form, context,  # noqa: ANN001
                    defaults, budget: Optional[AnalysisPool]) -> tuple[ProfiledRead, list[Analysed]]:
    """Read ``raw`` through the profile ``spec`` (version ``version``) and analyse every block. With ``budget``,
    the read and all the block analyses run as one task in the pool's child, within one CPU-time, memory and
    wall-time budget (:mod:`server.budget`; OverLimit 413 naming the limit past it): a pathological export
    cannot hold the web process while it is cut into blocks and parsed, and a file of many blocks cannot
    multiply its budget."""
    args = (kind.name, raw, dict(spec), version, filename, dict(form), context, dict(defaults or {}))
    read, parts = budget.run(_read_and_analyse_blocks, *args) if budget is not None else _read_and_analyse_blocks(*args)
    read = dataclasses.replace(read, profile=profile_from_json(spec, version=version))
    return read, [Analysed(kind=kind, parsed=p, conditions=c, result=r) for p, c, r in parts]


def _series_variable(varies: Optional[str]) -> Optional[str]:
    return varies if varies in SERIES_VARIABLES else None


def _direction(done: Sequence[Analysed]) -> Optional[str]:
    ts = [d.conditions.temperature_K for d in done]
    if any(t is None for t in ts):
        return None
    steps = [b - a for a, b in zip(ts, ts[1:])]
    if all(s > 0 for s in steps):
        return "heating"
    if all(s < 0 for s in steps):
        return "cooling"
    return None


def upload_profiled(*, session: Session, batch: Batch, sample: Optional[Sample], profile_row: Any, raw: bytes,
                    filename: Optional[str], form: Mapping[str, Optional[str]], actor: Actor,
                    allowed_kinds: Optional[Sequence[str]] = None,
                    budget: Optional[AnalysisPool] = None) -> tuple[dict[str, Any], bool]:
    """Store a file read through a profile: ``({"measurements": [...], "series": ...}, created)``.

    The answer's measurements are as ``actor`` may see them. The same bytes again with the same
    conditions answer the stored measurements (created False); with other conditions, Duplicate (409).
    """
    profile = import_profiles.profile_of(profile_row)
    compound, kind = _check_target(session, batch, profile.kind, allowed_kinds)
    if not raw:
        raise InputError("the file is empty", field="file")
    sha = hashlib.sha256(raw).hexdigest()
    if sample is None:
        sample = samples.default_sample(session, batch)
    defaults = samples.sample_defaults(sample)
    read, done = _analyse_blocks(kind, profile_row.spec, profile_row.version, raw, filename=filename, form=form,
                                 context=context_for(compound, session=session, kind=kind), defaults=defaults, budget=budget)
    if sample is None:
        sample = samples.ensure_default_sample(session, batch, actor=actor.label)
    existing = [_live_copy(session, sample.id, sha, kind.name, i) for i in range(len(done))]
    if any(m is not None for m in existing):
        return _again(session, existing, done, actor), False
    stored: list[Measurement] = []
    for i, d in enumerate(done):
        m = _store(session, batch=batch, sample=sample, done=d, raw=raw, sha=sha, filename=filename,
                   actor=actor.label, profile_name=profile_row.name, profile_version=profile_row.version, block=i)
        stored.append(m)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()  # the same file arrived twice at once; the other request stored it
        again = [_live_copy(session, sample.id, sha, kind.name, i) for i in range(len(done))]
        if any(m is None for m in again):
            raise
        return _again(session, again, done, actor), False
    refresh_derived(session, stored, actor=actor.label)
    record_created(session, compound, stored, actor=actor.label)
    row = None
    variable = _series_variable(profile.varies)
    if len(stored) >= 2 and variable is not None:
        row = series.state_series(session=session, sample=sample, variable=variable,
                                  measurement_ids=[m.id for m in stored],
                                  direction=_direction(done) if variable == "temperature" else None,
                                  notes=f"blocks of one file read through {profile.label}", actor=actor.label,
                                  commit=False)
    session.commit()
    for m in stored:
        session.refresh(m)
    return _answer(session, stored, row, sample, actor), True


def _again(session: Session, existing: Sequence[Optional[Measurement]], done: Sequence[Analysed],
           actor: Actor) -> dict[str, Any]:
    for m, d in zip(existing, done):
        if m is None or not same_conditions(m.conditions, d.conditions, given_only=True):
            some = next(x for x in existing if x is not None)
            raise Duplicate(f"these bytes are stored already as measurement {some.id} with other conditions; to "
                            f"correct its conditions, POST them to /api/v1/measurements/{some.id}/revise",
                            existing=some.id)
    sample = session.get(Sample, existing[0].sample_id)
    ids = {m.id for m in existing}
    stated = next((e for e in series.sample_series(session, sample)
                   if e.get("stated") and set(e.get("measurements") or []) == ids), None) if len(ids) > 1 else None
    return _answer(session, list(existing), None, sample, actor, stated=stated)


def _answer(session: Session, ms: Sequence[Measurement], row: Any, sample: Sample, actor: Actor,
            stated: Optional[dict] = None) -> dict[str, Any]:
    body: dict[str, Any] = {"measurements": [measurement_as_seen(session, m, actor) for m in ms], "series": None}
    if row is not None:
        stated = next((e for e in series.sample_series(session, sample) if e.get("id") == row.id), None)
    if stated is not None:
        batch = session.get(Batch, sample.batch_id)
        if access.may_see_structure(actor, session.get(Compound, batch.compound_id)):
            body["series"] = stated
        else:  # a receipt: fitted values can imply what the embargo withholds
            body["series"] = {"id": stated.get("id"), "variable": stated.get("variable"),
                              "measurements": stated.get("measurements")}
    return body


# --------------------------------------------------------------------------- dry run


def _table_preview(table: Any) -> dict[str, Any]:
    frame = table.frame
    return {"columns": list(frame.columns),
            "units": [_canonical_unit(c) for c in frame.columns],
            "rows_head": frame.head(PREVIEW_ROWS).to_numpy().tolist(),
            "rows_total": int(table.n_rows)}


def _canonical_unit(name: str) -> str:
    q = BY_NAME.get(name)
    return q.unit if q is not None else ""


def _conversions(table: Any) -> list[str]:
    out = []
    for canonical, header in table.source_columns.items():
        unit = table.source_units.get(canonical, "")
        q = BY_NAME[canonical]
        shown = header if header.rstrip().endswith((")", "]")) or not unit else f"{header} ({_short(unit)})"
        out.append(f"{shown} \u2192 {q.header}")
    return out


def _short(unit: str) -> str:
    """A unit pint wrote itself (``nanocoulomb``) in its short form (``nC``)."""
    try:
        return f"{parse_unit(unit):~P}" or unit
    except UNIT_PARSE_ERRORS:
        return unit


def _result_part(d: Analysed) -> dict[str, Any]:
    return {"results": d.results, "verdict": d.verdict or None, "flags": d.flags}


def dry_run(*, session: Session, batch: Batch, sample: Optional[Sample], kind_name: str, profile_row: Any,
            raw: bytes, filename: Optional[str], form: Mapping[str, Optional[str]], actor: Actor,
            allowed_kinds: Optional[Sequence[str]] = None, with_figure: bool = False,
            budget: Optional[AnalysisPool] = None) -> dict[str, Any]:
    """What an upload would store, read and analysed, without storing anything or writing an audit row.

    ``preview`` holds the first block's canonical columns and units, the head of its rows, the row
    count, the conditions as read, each conversion and one entry per block; ``results``, ``verdict``
    and ``flags`` are the first block's (each block entry has its own). ``with_figure``: also the first
    block's figure as Plotly JSON under ``figure`` (the upload page draws it)."""
    compound, kind = _check_target(session, batch, kind_name, allowed_kinds)
    if not raw:
        raise InputError("the file is empty", field="file")
    defaults = samples.sample_defaults(sample if sample is not None else samples.default_sample(session, batch))
    context = context_for(compound, session=session, kind=kind)
    notes: Sequence[str] = ()
    if profile_row is not None:
        read, done = _analyse_blocks(kind, profile_row.spec, profile_row.version, raw, filename=filename, form=form,
                                     context=context, defaults=defaults, budget=budget)
        spans = [(b.first_line, b.last_line) for b in read.blocks]
        notes = read.notes
    else:
        done = [analyse(kind, raw, filename=filename, form=form, context=context, defaults=defaults, budget=budget)]
        spans = [(None, None)]
        notes = getattr(done[0].parsed, "notes", ())
    first = done[0]
    preview: dict[str, Any] = {}
    if kind.table:
        preview.update(_table_preview(first.parsed))
        preview["conversions"] = _conversions(first.parsed)
    else:
        preview.update(columns=[], units=[], rows_head=[], rows_total=0, conversions=[])
    preview["conditions"] = first.conditions.to_dict()
    preview["notes"] = list(notes)
    preview["profile"] = ({"name": profile_row.name, "version": profile_row.version}
                          if profile_row is not None else None)
    preview["blocks"] = [
        {"block": i, "first_line": a, "last_line": b,
         "rows": int(d.parsed.n_rows) if kind.table else None,
         "conditions": d.conditions.to_dict(), **_result_part(d)}
        for i, (d, (a, b)) in enumerate(zip(done, spans))]
    body = {"preview": preview, **_result_part(first)}
    if with_figure and kind.figure is not None:
        body["figure"] = figure_json(kind.figure(first.parsed, first.result))
    if not access.may_see_structure(actor, compound):
        # the same boundary as a stored measurement's receipt (measurements.measurement_as_seen)
        body = {"preview": {**preview, "rows_head": [], "conditions": {}, "blocks": [
            {"block": e["block"], "first_line": e["first_line"], "last_line": e["last_line"], "rows": e["rows"]}
            for e in preview["blocks"]]}, "results": {}, "verdict": first.verdict or None,
            "flags": [{"code": f.get("code", "")} for f in first.flags]}
    return body


def preview_profile(spec: Mapping[str, Any], raw: bytes, *, budget: Optional[AnalysisPool] = None) -> dict[str, Any]:
    """A profile not yet saved tried on a file (the profile editor): checked, read, and each block analysed
    with no registry context (pure: no database, nothing stored)."""
    profile = import_profiles.check_profile(spec)
    kind = get_kind(profile.kind)
    read, done = _analyse_blocks(kind, spec, 1, raw, filename=None, form={}, context=Context(), defaults={},
                                 budget=budget)
    blocks = []
    figure = None
    for i, (b, d) in enumerate(zip(read.blocks, done)):
        if i == 0 and kind.figure is not None:
            figure = figure_json(kind.figure(d.parsed, d.result))
        blocks.append({"block": i, "first_line": b.first_line, "last_line": b.last_line, "rows": int(b.table.n_rows),
                       "conditions": d.conditions.to_dict(), **_result_part(d)})
    first = read.blocks[0].table
    return {"preview": {**_table_preview(first), "conversions": _conversions(first), "blocks": blocks,
                        "notes": list(read.notes), "profile": None, "conditions": blocks[0]["conditions"]},
            "kind": kind.name, "figure": figure}
