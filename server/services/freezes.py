"""Paper freezes: the data behind a paper, frozen under a name ("bowl-chains manuscript").

A freeze copies, for each chosen compound, its verdict at that moment and every live measurement
(id, kind, batch, sample, raw-file SHA-256 and id, analysis version, results, verdict, flag codes)
into ``paperfreezecompound`` rows that nothing ever updates. Re-analysis, corrections and archiving
change the live rows only, so :func:`differences` can say, per frozen compound, what moved since:
results re-computed (by key: frozen, current, change, relative change), analysis versions, measurements
retired or added, and the verdict. Raw files are immutable, so the frozen bytes stay available.
The images on the compound, its batches, samples and measurements that were not archived at freeze
time are recorded too (id, target, raw file and SHA-256, caption and metadata): archiving one later
changes neither the record nor the pack, and :func:`differences` lists it as archived since.

Embargo: a caller who may not see an embargoed compound gets its code only (``withheld``), and its
pack is refused, as for the compound's own report pack.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import zipfile
from datetime import datetime, timezone
from typing import Any, Optional
from urllib.parse import parse_qs, urlsplit

from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..errors import InputError
from ..kinds import KINDS
from ..models import (Attachment, Batch, Compound, Measurement, PaperFreeze, PaperFreezeCompound, RawFile, Sample,
                      is_live, live_measurement)
from . import attachments, audit, report_pack, verdicts, views
from .accounts import hide_people
from .errors import Duplicate, Forbidden, NotFound

#: Bounded work per request: compounds per freeze, measurements frozen per compound.
MAX_COMPOUNDS = 200
MAX_MEASUREMENTS = 2000
PACK_VERSION = "freeze-pack/2"  # 2: frozen attachments (attachments/, "frozen_attachments")
_DOI = re.compile(r"^10\.\d{4,9}/[^\s]+$")
_DEPOSITION = re.compile(r"^[A-Za-z][A-Za-z -]{1,20} ?[0-9][0-9A-Za-z._-]{2,30}$")  # "CCDC 2345678", "ICSD 12345"
#: Relative changes below this are the noise of re-running floating-point code, not a change.
REL_TOLERANCE = 1e-9


def _frozen_measurement(session: Session, m: Measurement) -> dict[str, Any]:
    batch = session.get(Batch, m.batch_id)
    sample = session.get(Sample, m.sample_id)
    return {"id": m.id, "kind": m.kind, "batch": batch.code, "sample": sample.code, "sha256": m.sha256,
            "raw_file": m.raw_file_id, "analysis_version": m.analysis_version, "results": m.results,
            "verdict": m.verdict, "flags": [f.get("code") for f in m.flags], "temperature_K": m.temperature_K,
            "analysed_at": m.analysed_at.isoformat()}


def _verdict_now(compound: Compound) -> dict[str, Any]:
    return {"effective": verdicts.effective_code(compound), "computed": compound.verdict_code,
            "override": compound.override_code, "reasons": compound.verdict}


def _live(session: Session, compound: Compound) -> list[Measurement]:
    return list(session.exec(select(Measurement).join(Batch, Batch.id == Measurement.batch_id)
                             .where(Batch.compound_id == compound.id, live_measurement())
                             .order_by(Measurement.id).limit(MAX_MEASUREMENTS + 1)).all())


def codes_of_view(session: Session, view: str, *, actor: Actor) -> list[str]:
    """The codes of the compounds a registry view shows ``actor`` now, on every page of it, in its order.

    ``view`` is the view's link (``/compounds?chain_kind=alkoxy&c_min=4``, with or without the host) or
    its query string: views are links (``services.views``), so the link a member copies from the registry
    is the saved view. Its filters and sort are kept, its paging is not (a freeze takes the whole view)."""
    text = (view or "").strip()
    query = urlsplit(text).query if "?" in text or text.startswith(("/", "http:", "https:")) else text
    params = {k: v for k, v in parse_qs(query, keep_blank_values=False).items() if k not in ("page", "size")}
    try:
        q = views.parse_view(params)
    except InputError as exc:
        raise InputError(f"the view's {exc.field or 'query'}: {exc.message}", field="view") from None
    result = views.query_view(session, q, actor=actor, paged=False)
    if result.total == 0:
        raise InputError("the view shows no compounds", field="view")
    if result.total > MAX_COMPOUNDS:
        raise InputError(f"the view shows {result.total} compounds; a freeze takes at most {MAX_COMPOUNDS}",
                         field="view")
    return [r.compound.code for r in result.rows]


def create_freeze(*, session: Session, name: str, codes: list[str], actor: Actor, view: str = "") -> PaperFreeze:
    """Freeze ``codes`` (or, with ``view``, the compounds that view shows ``actor`` now) under ``name``: one
    transaction, one audit event (which keeps the view)."""
    name = (name or "").strip()
    if not name:
        raise InputError("a freeze needs a name", field="name")
    wanted = list(dict.fromkeys(c.strip() for c in codes if c and c.strip()))
    if view.strip():
        if wanted:
            raise InputError("give compound codes or a view, not both", field="view")
        wanted = codes_of_view(session, view, actor=actor)
    if not wanted:
        raise InputError("choose at least one compound, or a view", field="compounds")
    if len(wanted) > MAX_COMPOUNDS:
        raise InputError(f"at most {MAX_COMPOUNDS} compounds per freeze", field="compounds")
    if session.exec(select(PaperFreeze).where(PaperFreeze.name == name)).first():
        raise Duplicate(f"a freeze named {name!r} exists already", existing=name)
    found = {c.code: c for c in session.exec(select(Compound).where(Compound.code.in_(wanted))).all()}
    missing = [c for c in wanted if c not in found]
    if missing:
        raise InputError(f"no compound {', '.join(missing)}", field="compounds")
    freeze = PaperFreeze(name=name, created_by=actor.label)
    session.add(freeze)
    session.flush()
    counts, image_counts = {}, {}
    for code in wanted:
        compound = found[code]
        rows = _live(session, compound)
        if len(rows) > MAX_MEASUREMENTS:
            raise InputError(f"{code} has more than {MAX_MEASUREMENTS} live measurements", field="compounds")
        images = [attachments.record_of(*found_image) for found_image in attachments.live_of_compound(session, compound.id)]
        session.add(PaperFreezeCompound(freeze_id=freeze.id, compound_id=compound.id, verdict=_verdict_now(compound),
                                        measurements=[_frozen_measurement(session, m) for m in rows],
                                        attachments=images))
        counts[code] = len(rows)
        image_counts[code] = len(images)
    audit.record(session, actor=actor.label, action="freeze.create", entity="freeze", code=str(freeze.id),
                 after={"name": name, "measurements": counts, "attachments": image_counts,
                        **({"view": view.strip()} if view.strip() else {})})
    try:
        session.commit()
    except IntegrityError:  # a concurrent freeze took the name between the check and the commit
        session.rollback()
        raise Duplicate(f"a freeze named {name!r} exists already", existing=name) from None
    session.refresh(freeze)
    return freeze


def get_freeze(session: Session, freeze_id: int) -> PaperFreeze:
    freeze = session.get(PaperFreeze, freeze_id)
    if freeze is None:
        raise NotFound(f"no freeze {freeze_id}")
    return freeze


def list_freezes(session: Session, *, limit: int = 200) -> list[PaperFreeze]:
    return list(session.exec(select(PaperFreeze).order_by(PaperFreeze.created_at.desc(), PaperFreeze.id.desc())
                             .limit(limit)).all())


def set_publication(*, session: Session, freeze: PaperFreeze, dataset_doi: Optional[str],
                    depositions: Optional[list[dict[str, Any]]], actor: Actor) -> PaperFreeze:
    """Add the dataset DOI and the deposition numbers of structures once the paper is out."""
    before = audit.snapshot(freeze)
    if dataset_doi is not None:
        doi = dataset_doi.strip().removeprefix("https://doi.org/").removeprefix("doi:")
        if doi and not _DOI.match(doi):
            raise InputError(f"{dataset_doi!r} is not a DOI (10.<registrant>/<suffix>)", field="dataset_doi")
        freeze.dataset_doi = doi
    if depositions is not None:
        frozen_ids = {m["id"] for row in _rows(session, freeze) for m in row.measurements}
        clean = []
        for i, d in enumerate(depositions):
            number = str(d.get("number", "")).strip() if isinstance(d, dict) else ""
            if not _DEPOSITION.match(number):
                raise InputError(f"deposition {i + 1}: {number!r} is not a deposition number like 'CCDC 2345678'",
                                 field="depositions")
            mid = d.get("measurement")
            if mid is not None and mid not in frozen_ids:
                raise InputError(f"deposition {i + 1}: measurement {mid} is not in this freeze", field="depositions")
            clean.append({"number": number, "measurement": mid})
        freeze.depositions = clean
    session.add(freeze)
    audit.record(session, actor=actor.label, action="freeze.publication", entity="freeze", code=str(freeze.id),
                 before=before, after=audit.snapshot(freeze))
    session.commit()
    session.refresh(freeze)
    return freeze


def _rows(session: Session, freeze: PaperFreeze) -> list[PaperFreezeCompound]:
    return list(session.exec(select(PaperFreezeCompound).where(PaperFreezeCompound.freeze_id == freeze.id)
                             .order_by(PaperFreezeCompound.id)).all())


# --- what moved since ------------------------------------------------------------------------


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def result_changes(kind: str, frozen: dict[str, Any], current: dict[str, Any]) -> list[dict[str, Any]]:
    """Per result key that moved: label and unit (from the kind), frozen and current values, and for
    numbers the change and the relative change (None where the frozen value is zero or missing)."""
    keys = {rk.key: rk for rk in KINDS[kind].results} if kind in KINDS else {}
    out = []
    for key in sorted(set(frozen) | set(current)):
        a, b = frozen.get(key), current.get(key)
        if _number(a) and _number(b):
            if abs(a - b) <= REL_TOLERANCE * max(abs(a), abs(b), 1e-300):
                continue
            delta = b - a
            out.append({"key": key, "label": keys[key].label if key in keys else key,
                        "unit": keys[key].unit if key in keys else "", "frozen": a, "current": b, "change": delta,
                        "relative": delta / abs(a) if a else None})
        elif a != b:
            out.append({"key": key, "label": keys[key].label if key in keys else key,
                        "unit": keys[key].unit if key in keys else "", "frozen": a, "current": b, "change": None,
                        "relative": None})
    return out


def compare_compound(session: Session, row: PaperFreezeCompound) -> dict[str, Any]:
    """The frozen record of one compound against the live rows now."""
    compound = session.get(Compound, row.compound_id)
    items, frozen_ids = [], set()
    for fm in row.measurements:
        frozen_ids.add(fm["id"])
        m = session.get(Measurement, fm["id"])
        state = "live" if is_live(session, m) else "retired"
        changes = result_changes(fm["kind"], fm["results"], m.results)
        version_moved = m.analysis_version != fm["analysis_version"]
        verdict_moved = m.verdict != fm["verdict"]
        if changes or version_moved or verdict_moved or state != "live":
            items.append({"id": fm["id"], "kind": fm["kind"], "state": state, "superseded_by": m.superseded_by_id,
                          "frozen_version": fm["analysis_version"], "current_version": m.analysis_version,
                          "frozen_verdict": fm["verdict"], "current_verdict": m.verdict, "changes": changes})
    added = [m.id for m in _live(session, compound) if m.id not in frozen_ids]
    verdict_then, verdict_now = row.verdict.get("effective"), verdicts.effective_code(compound)
    rels = [abs(c["relative"]) for it in items for c in it["changes"] if c["relative"] is not None]
    frozen_images = [a["id"] for a in row.attachments]
    archived_images = [a.id for a in session.exec(select(Attachment).where(Attachment.id.in_(frozen_images),
                                                                          Attachment.archived == True))  # noqa: E712
                       .all()] if frozen_images else []
    return {"compound": compound.code, "differs": bool(items or added or verdict_then != verdict_now),
            "measurements": items, "added": added, "frozen_count": len(row.measurements),
            "attachments_archived_since": sorted(archived_images), "frozen_attachments": len(frozen_images),
            "verdict": {"frozen": verdict_then, "current": verdict_now},
            "largest_relative_change": max(rels) if rels else None}


def _compound_entry(session: Session, row: PaperFreezeCompound, actor: Optional[Actor], *, with_diff: bool):
    compound = session.get(Compound, row.compound_id)
    if not access.may_see_structure(actor, compound):
        return {"compound": compound.code, "withheld": True}
    entry = {"compound": compound.code, "withheld": False, "verdict": row.verdict, "measurements": row.measurements,
             "attachments": hide_people(row.attachments, sees_people=actor is not None and actor.sees_people)}
    if with_diff:
        entry["differences"] = compare_compound(session, row)
    return entry


def freeze_read(session: Session, freeze: PaperFreeze, *, actor: Optional[Actor], with_diff: bool = True) -> dict:
    """The freeze as ``actor`` may see it: the frozen record and, per compound, what moved since."""
    return {"id": freeze.id, "name": freeze.name, "created_by": freeze.created_by,
            "created_at": freeze.created_at.isoformat(), "dataset_doi": freeze.dataset_doi,
            "depositions": freeze.depositions,
            "compounds": [_compound_entry(session, r, actor, with_diff=with_diff) for r in _rows(session, freeze)]}


def freezes_of_compound(session: Session, compound: Compound, *, actor: Optional[Actor]) -> list[dict[str, Any]]:
    """For the compound page: every freeze holding ``compound`` and whether its results moved since."""
    if not access.may_see_structure(actor, compound):
        return []
    rows = session.exec(select(PaperFreezeCompound, PaperFreeze)
                        .join(PaperFreeze, PaperFreeze.id == PaperFreezeCompound.freeze_id)
                        .where(PaperFreezeCompound.compound_id == compound.id)
                        .order_by(PaperFreeze.created_at.desc(), PaperFreeze.id.desc()).limit(50)).all()
    return [{"id": f.id, "name": f.name, "created_at": f.created_at, "dataset_doi": f.dataset_doi,
             **compare_compound(session, row)} for row, f in rows]


# --- export ----------------------------------------------------------------------------------


def freeze_pack(session: Session, freeze: PaperFreeze, *, actor: Optional[Actor]) -> bytes:
    """The freeze as one zip: ``freeze.json`` (the frozen record), ``differences.json`` (what moved
    since), the frozen raw files byte for byte (``raw/<id>-<name>``), the images frozen with it byte for
    byte (``attachments/<id>-<name>``; their SHA-256, caption and metadata in ``frozen_attachments``), each compound's current report
    pack under ``current/<code>/``, and ``manifest.json`` with every file's SHA-256 and size."""
    rows = _rows(session, freeze)
    for r in rows:
        compound = session.get(Compound, r.compound_id)
        if not access.may_see_structure(actor, compound):
            raise Forbidden(f"{compound.code} is embargoed: this freeze's pack goes only to members")
    record = freeze_read(session, freeze, actor=actor, with_diff=False)
    files: dict[str, bytes] = {
        "freeze.json": json.dumps(record, indent=2, sort_keys=True).encode(),
        "differences.json": json.dumps([compare_compound(session, r) for r in rows], indent=2, sort_keys=True).encode(),
    }
    for r in rows:
        for fm in r.measurements:
            raw = session.get(RawFile, fm["raw_file"])
            name = re.sub(r"[^A-Za-z0-9._-]", "_", raw.filename or fm["kind"])[:80]
            files[f"raw/{fm['id']}-{name}"] = raw.data
        for fa in r.attachments:  # the images as frozen: their bytes are immutable rawfile rows
            files[attachments.pack_path(fa)] = session.get(RawFile, fa["raw_file"]).data
        compound = session.get(Compound, r.compound_id)
        with zipfile.ZipFile(io.BytesIO(report_pack.report_pack(session, compound, actor=actor))) as inner:
            for info in inner.infolist():
                files[f"current/{info.filename}"] = inner.read(info)  # its paths start with the code
    manifest = {"pack": PACK_VERSION, "freeze": freeze.id, "name": freeze.name,
                "generated_at": datetime.now(timezone.utc).replace(microsecond=0).isoformat(),
                "dataset_doi": freeze.dataset_doi, "depositions": freeze.depositions,
                "frozen_measurements": [{"id": fm["id"], "compound": session.get(Compound, r.compound_id).code,
                                         "sha256": fm["sha256"], "analysis_version": fm["analysis_version"]}
                                        for r in rows for fm in r.measurements],
                "frozen_attachments": [{**fa, "compound": session.get(Compound, r.compound_id).code,
                                        "path": attachments.pack_path(fa)}
                                       for r in rows for fa in hide_people(
                                           r.attachments, sees_people=actor is not None and actor.sees_people)],
                "files": [{"path": p, "sha256": hashlib.sha256(b).hexdigest(), "size": len(b)}
                          for p, b in sorted(files.items())]}
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as z:
        for path, data in sorted(files.items()):
            z.writestr(path, data)
        z.writestr("manifest.json", json.dumps(manifest, indent=2))
    return buf.getvalue()
