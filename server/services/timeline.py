"""A compound's lab timeline: batches made, samples prepared, measurements with their kind and key
result, verdict changes and other recorded changes, newest first, in one list.

Batches are placed on the day they were made (``made_on``) when the chemist gave it, else when they
were registered. Measurements come as :func:`compound_page.measurements_as_seen` gives them, so a
caller who may not see an embargoed compound gets receipts without results; verdict changes then show
their codes only (the reasons quote values derived from the structure; ``server/access.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime, time, timezone
from typing import Any, Optional

from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..kinds import KINDS
from ..models import AuditEvent, Compound
from ..verdict_codes import SHORT
from . import registry, samples
from .compound_page import measurements_as_seen

#: Audit actions the lab entries already stand for (a batch, sample or measurement appears once).
SHOWN_AS_ENTRIES = frozenset({"batch.create", "sample.create", "measurement.create"})
VERDICT_ACTIONS = frozenset({"verdict.change", "verdict.override", "verdict.clear_override"})
MAX_RECORDS = 200


@dataclass(frozen=True)
class Entry:
    """One line of the timeline. ``what``: batch, sample, measurement, verdict or record.

    ``day_only``: ``at`` is a calendar day (a batch's ``made_on``), shown without a time.
    ``measurement``: the measurement as seen (for its key result) when ``what`` is measurement.
    """

    at: datetime
    what: str
    title: str
    detail: str = ""
    href: str = ""
    by: str = ""
    day_only: bool = False
    archived: bool = False
    measurement: Optional[dict[str, Any]] = field(default=None, compare=False)


def _day(d: date) -> datetime:
    return datetime.combine(d, time.min, tzinfo=timezone.utc)


def _aware(t: datetime) -> datetime:
    return t if t.tzinfo else t.replace(tzinfo=timezone.utc)


def _verdict_entry(e: AuditEvent, *, withheld: bool) -> Entry:
    before, after = e.before or {}, e.after or {}
    if e.action == "verdict.change":
        title = f"verdict {SHORT.get(before.get('code'), before.get('code') or 'none')} → {SHORT.get(after.get('code'), after.get('code'))}"
        detail = "" if withheld else (after.get("reason") or "")
    elif e.action == "verdict.override":
        title = f"verdict overridden: {SHORT.get(after.get('override_code'), after.get('override_code'))}"
        detail = "" if withheld else (after.get("override_reason") or "")
    else:
        title, detail = "verdict override cleared", ""
    return Entry(at=_aware(e.at), what="verdict", title=title, detail=detail, by=e.actor)


def _record_entry(e: AuditEvent) -> Entry:
    changed = sorted(k for k, v in (e.after or {}).items()
                     if e.before and (e.before or {}).get(k) != v and k not in ("updated_at", "verdict", "verdict_at"))
    return Entry(at=_aware(e.at), what="record", title=e.action.replace(".", " "),
                 detail=", ".join(changed), by=e.actor)


def lab_timeline(session: Session, compound: Compound, *, actor: Optional[Actor]) -> list[Entry]:
    """Every entry of ``compound``'s timeline, newest first (ties: the later-recorded first)."""
    withheld = not access.may_see_structure(actor, compound)
    entries: list[Entry] = []
    for b in registry.batches_of(session, compound):
        made = f"made on {b.made_on.isoformat()}" if b.made_on else "date made not given"
        state = "" if b.state == "made" else f", {b.state.replace('_', ' ')}"
        entries.append(Entry(at=_day(b.made_on) if b.made_on else _aware(b.created_at), what="batch",
                             title=f"batch {b.code}", detail=made + state, href=f"/batches/{b.code}",
                             by=b.chemist or b.created_by, day_only=b.made_on is not None, archived=b.archived))
    for s, _ in samples.samples_of_compound(session, compound):
        form = s.form.replace("_", " ") if s.form else "specimen not described"
        entries.append(Entry(at=_aware(s.created_at), what="sample", title=f"sample {s.code}", detail=form,
                             href=f"/samples/{s.code}", by=s.created_by, archived=s.archived))
    for m in measurements_as_seen(session, compound, actor=actor):
        kind = KINDS.get(m["kind"])
        entries.append(Entry(at=_aware(datetime.fromisoformat(m["created_at"])), what="measurement",
                             title=kind.label if kind else m["kind"], detail=f"on {m['sample']}",
                             href=f"/measurements/{m['id']}", by=m["created_by"], measurement=m))
    events = session.exec(select(AuditEvent).where(AuditEvent.compound_id == compound.id,
                                                   AuditEvent.action.not_in(SHOWN_AS_ENTRIES))
                          .order_by(AuditEvent.at.desc(), AuditEvent.id.desc()).limit(MAX_RECORDS)).all()
    for e in events:
        entries.append(_verdict_entry(e, withheld=withheld) if e.action in VERDICT_ACTIONS else _record_entry(e))
    order = {"record": 0, "verdict": 1, "measurement": 2, "sample": 3, "batch": 4}  # at one instant: effects first
    return sorted(entries, key=lambda x: (x.at, -order[x.what]), reverse=True)
