"""The weekly digest: what changed in the registry since a date, for Monday's group meeting.

Sections: new compounds and batches; measurements by kind; verdict changes (old -> new, with the
reason); new conflicts; estimates finished. The same data is printed as a page, as Markdown (to
paste into a group chat or minutes) and as an Atom feed (RFC 4287) for feed readers.

Embargo: on the page and in the Markdown a caller who may not see embargoed structures gets the
code only (no label); the Atom feed always names embargoed compounds by code only, whoever reads
it, since feed readers keep copies outside the registry.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from datetime import date, datetime, time, timedelta, timezone
from typing import Optional
from xml.etree import ElementTree as ET

from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..errors import InputError
from ..kinds import KINDS
from ..models import AuditEvent, Batch, BarrierEstimate, Compound, Measurement
from ..precision import significant
from ..verdict_codes import SHORT

#: Default window: the last seven days.
DEFAULT_DAYS = 7
#: Longest window one request may ask for (bounded work per request).
MAX_DAYS = 366
#: Most rows listed per section (the counts stay exact).
MAX_ROWS = 500
ATOM_NS = "http://www.w3.org/2005/Atom"


@dataclass
class Digest:
    since: date
    until: datetime
    compounds: list[dict] = field(default_factory=list)
    batches: list[dict] = field(default_factory=list)
    measurements_by_kind: list[tuple[str, str, int]] = field(default_factory=list)  # (kind, label, count)
    verdict_changes: list[dict] = field(default_factory=list)
    conflicts: list[dict] = field(default_factory=list)
    estimates: list[dict] = field(default_factory=list)

    @property
    def empty(self) -> bool:
        return not (self.compounds or self.batches or self.measurements_by_kind or self.verdict_changes
                    or self.conflicts or self.estimates)


def parse_since(text: Optional[str], *, today: Optional[date] = None) -> date:
    """``YYYY-MM-DD`` (default: seven days before today, UTC); 422 naming the field otherwise."""
    today = today or datetime.now(timezone.utc).date()
    if not text:
        return today - timedelta(days=DEFAULT_DAYS)
    try:
        since = date.fromisoformat(text)
    except ValueError:
        raise InputError(f"since {text!r} is not a date written YYYY-MM-DD", field="since") from None
    if since > today:
        raise InputError("since lies in the future", field="since")
    if (today - since).days > MAX_DAYS:
        raise InputError(f"since may be at most {MAX_DAYS} days ago", field="since")
    return since


def _name(compound: Compound, actor: Optional[Actor], *, by_code_only: bool) -> str:
    # by code only: as it would be shown to nobody logged in (an embargoed compound keeps its code only)
    shown = access.may_see_structure(None if by_code_only else actor, compound)
    return f"{compound.code} ({compound.label})" if shown and compound.label else compound.code


def build(session: Session, since: date, *, actor: Optional[Actor], by_code_only: bool = False) -> Digest:
    """Everything that changed from ``since`` (00:00 UTC) until now."""
    start = datetime.combine(since, time.min, tzinfo=timezone.utc)
    out = Digest(since=since, until=datetime.now(timezone.utc).replace(microsecond=0))
    compounds = {c.id: c for c in session.exec(select(Compound)).all()}

    def name(cid: int) -> str:
        return _name(compounds[cid], actor, by_code_only=by_code_only)

    for c in session.exec(select(Compound).where(Compound.created_at >= start).order_by(Compound.id)
                          .limit(MAX_ROWS)).all():
        out.compounds.append({"code": c.code, "name": name(c.id), "by": c.created_by, "at": c.created_at})
    for b in session.exec(select(Batch).where(Batch.created_at >= start).order_by(Batch.id).limit(MAX_ROWS)).all():
        out.batches.append({"code": b.code, "compound": compounds[b.compound_id].code, "by": b.created_by,
                            "at": b.created_at})
    counts = Counter(session.exec(select(Measurement.kind).where(Measurement.created_at >= start)).all())
    out.measurements_by_kind = [(k, KINDS[k].label if k in KINDS else k, n) for k, n in sorted(counts.items())]
    events = session.exec(select(AuditEvent).where(AuditEvent.at >= start,
                                                   AuditEvent.action.in_(("verdict.change", "verdict.override",
                                                                          "verdict.clear_override")))
                          .order_by(AuditEvent.at, AuditEvent.id).limit(MAX_ROWS)).all()
    for e in events:
        if e.compound_id not in compounds:
            continue
        before, after = e.before or {}, e.after or {}
        if e.action == "verdict.change":
            old, new, reason = before.get("code"), after.get("code"), after.get("reason", "")
            if old != new:
                out.verdict_changes.append({"compound": name(e.compound_id), "old": old, "new": new,
                                            "reason": reason, "how": "computed", "at": e.at})
            for message in after.get("conflicts") or []:
                if message not in (before.get("conflicts") or []):
                    out.conflicts.append({"compound": name(e.compound_id), "message": message, "at": e.at})
        else:
            old, new = before.get("override_code"), after.get("override_code")
            out.verdict_changes.append({"compound": name(e.compound_id), "old": old, "new": new,
                                        "reason": after.get("override_reason", "") or "override cleared",
                                        "how": "set by hand" if new else "override cleared", "at": e.at})
    for est in session.exec(select(BarrierEstimate).where(BarrierEstimate.created_at >= start,
                                                          BarrierEstimate.job_id.is_not(None))
                            .order_by(BarrierEstimate.id).limit(MAX_ROWS)).all():
        out.estimates.append({"compound": name(est.compound_id), "method": est.method,
                              "dg_kcal_mol": est.dg_kcal_mol, "at": est.created_at})
    return out


def verdict_text(code: Optional[str]) -> str:
    return SHORT.get(code, code or "none") if code else "none"


def lines(d: Digest) -> list[tuple[str, list[str]]]:
    """The digest as (section title, lines of text), in the order people read it."""
    return [
        ("New compounds", [f"{c['name']}, registered by {c['by']}" for c in d.compounds]),
        ("New batches", [f"{b['code']} of {b['compound']}" for b in d.batches]),
        ("Measurements by kind", [f"{label}: {n}" for _, label, n in d.measurements_by_kind]),
        ("Verdict changes", [f"{v['compound']}: {verdict_text(v['old'])} → {verdict_text(v['new'])}"
                             f" ({v['how']}){': ' + v['reason'] if v['reason'] else ''}" for v in d.verdict_changes]),
        ("New conflicts", [f"{c['compound']}: {c['message']}" for c in d.conflicts]),
        ("Estimates finished", [f"{e['compound']}: {e['method']}"
                                + (f", {significant(e['dg_kcal_mol'], 3)} kcal/mol" if e["dg_kcal_mol"] is not None
                                   else "") for e in d.estimates]),
    ]


def markdown(d: Digest) -> str:
    """The digest as Markdown (CommonMark headings and lists)."""
    out = [f"# Remanence digest since {d.since.isoformat()}", "",
           f"Until {d.until.strftime('%Y-%m-%d %H:%M')} UTC.", ""]
    for title, items in lines(d):
        out += [f"## {title}", ""] + ([f"- {_md_escape(t)}" for t in items] or ["- none"]) + [""]
    return "\n".join(out)


def _md_escape(text: str) -> str:
    return "".join("\\" + ch if ch in "\\`*_[]<>#|" else ch for ch in text)


def atom(d: Digest, *, feed_url: str, site_url: str) -> bytes:
    """The digest as an Atom 1.0 feed (RFC 4287): one entry per section with changes."""
    ET.register_namespace("", ATOM_NS)

    def el(parent, tag, text=None, **attrs):
        node = ET.SubElement(parent, f"{{{ATOM_NS}}}{tag}", attrs)
        if text is not None:
            node.text = text
        return node

    stamp = d.until.isoformat().replace("+00:00", "Z")
    feed = ET.Element(f"{{{ATOM_NS}}}feed")
    el(feed, "id", f"{feed_url}?since={d.since.isoformat()}")
    el(feed, "title", f"Remanence digest since {d.since.isoformat()}")
    el(feed, "updated", stamp)
    el(feed, "link", rel="self", href=feed_url)
    el(el(feed, "author"), "name", "Remanence")
    for title, items in lines(d):
        if not items:
            continue
        entry = el(feed, "entry")
        el(entry, "id", f"{feed_url}?since={d.since.isoformat()}#{title.lower().replace(' ', '-')}")
        el(entry, "title", f"{title} ({len(items)})")
        el(entry, "updated", stamp)
        el(entry, "link", href=f"{site_url}/digest?since={d.since.isoformat()}")
        el(entry, "content", "\n".join(items), type="text")
    return ET.tostring(feed, encoding="utf-8", xml_declaration=True)

