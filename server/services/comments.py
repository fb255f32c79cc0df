"""Comment threads on compounds, batches, samples and measurements.

A comment belongs to one target and, through it, to one compound: the embargo is the compound's
(``access.may_see_structure``), so a caller who may not see an embargoed compound gets none of its
comments, nor those of its batches, samples and measurements (``withheld``). Upload tokens (an
instrument PC's secret) get no comments either: they are people's words and carry people's names.
Every write commits once with its AuditEvent; an edit keeps the old text in the event's ``before``,
and a comment is archived, never deleted.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Optional
from urllib.parse import quote

from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..errors import InputError
from ..models import (COMMENT_TARGETS, Batch, Comment, CommentRead, Compound, Measurement, Sample, User,
                      utcnow)
from ..rich_text import find_mentions, render_markdown
from . import audit, measurements, notifications, registry, samples
from .errors import Forbidden, NotFound

MAX_BODY = 20000
#: Bounded work per request: a thread shows its newest comments up to this many.
THREAD_LIMIT = 500
#: URL segment of each target (API and pages alike).
PLURALS = {"compound": "compounds", "batch": "batches", "sample": "samples", "measurement": "measurements"}


@dataclass(frozen=True)
class Target:
    """What a comment is on: kind, row, the reference people use (code, or measurement id), compound."""

    kind: str
    row: Any
    ref: str
    compound: Compound

    @property
    def post_url(self) -> str:
        return self.route("comments")

    def route(self, what: str) -> str:
        """The URL of what is on this target (``comments``, ``attachments``), pages and API alike."""
        return f"/{PLURALS[self.kind]}/{quote(self.ref)}/{what}"

    @property
    def page_url(self) -> str:
        """The page that shows this thread (batches are shown on their compound's page)."""
        return self.page_at("comments")

    def page_at(self, anchor: str) -> str:
        """The page that shows what is on this target (comments, attachments), at ``anchor``."""
        if self.kind == "compound":
            return f"/compounds/{quote(self.ref)}#{anchor}"
        if self.kind == "batch":
            return f"/compounds/{quote(self.compound.code)}#{anchor}"
        return f"/{PLURALS[self.kind]}/{quote(self.ref)}#{anchor}"


def resolve(session: Session, kind: str, ref: str) -> Target:
    """The target named ``ref`` (a code, or a measurement id); NotFound if there is none."""
    if kind == "compound":
        c = registry.get_compound(session, ref)
        return Target(kind, c, c.code, c)
    if kind == "batch":
        b = registry.get_batch(session, ref)
        return Target(kind, b, b.code, session.get(Compound, b.compound_id))
    if kind == "sample":
        s = samples.get_sample(session, ref)
        b = session.get(Batch, s.batch_id)
        return Target(kind, s, s.code, session.get(Compound, b.compound_id))
    if kind == "measurement":
        if not ref.isdigit() or len(ref) > 10:
            raise NotFound(f"no measurement {ref}")
        m = measurements.get_measurement(session, int(ref))
        b = session.get(Batch, m.batch_id)
        return Target(kind, m, str(m.id), session.get(Compound, b.compound_id))
    raise ValueError(f"unknown comment target {kind!r}")


def may_read(actor: Optional[Actor], target: Target) -> bool:
    return actor is not None and actor.sees_people and access.may_see_structure(actor, target.compound)


def _known_names(session: Session, names: list[str]) -> list[str]:
    """The active accounts among ``names`` (mentions of anyone else stay plain text)."""
    if not names:
        return []
    found = set(session.exec(select(User.username).where(User.username.in_(names), User.active == True)).all())  # noqa: E712
    return [n for n in names if n in found]


def _clean_body(body: str) -> str:
    text = (body or "").replace("\r\n", "\n").strip()
    if not text:
        raise InputError("a comment needs some text", field="body")
    if len(text) > MAX_BODY:
        raise InputError(f"a comment is at most {MAX_BODY} characters", field="body")
    return text


def post_comment(*, session: Session, target: Target, body: str, actor: Actor) -> Comment:
    """Store a comment on ``target``; mentions are resolved to accounts now."""
    if not may_read(actor, target):
        raise NotFound(f"no {target.kind} {target.ref}")
    text = _clean_body(body)
    comment = Comment(target=target.kind, target_id=target.row.id, compound_id=target.compound.id, body=text,
                      created_by=actor.label, author_user_id=actor.user_id,
                      mentions=_known_names(session, find_mentions(text)))
    session.add(comment)
    session.flush()
    audit.record(session, actor=actor.label, action="comment.create", entity="comment", code=str(comment.id),
                 compound_id=target.compound.id, after=audit.snapshot(comment))
    _notify_mentions(session, target, comment, comment.mentions, actor=actor)
    session.commit()
    session.refresh(comment)
    return comment


def _notify_mentions(session: Session, target: Target, comment: Comment, names: list[str], *, actor: Actor) -> None:
    """Exactly the accounts ``names`` (newly) mentioned hear of it; an edit does not repeat old mentions."""
    where = f"measurement {target.ref}" if target.kind == "measurement" else f"{target.kind} {target.ref}"
    notifications.mentioned(session, names=names, compound=target.compound, where=where, url=target.page_url,
                            body=comment.body, actor=actor.label)


def get_comment(session: Session, comment_id: int, *, actor: Optional[Actor]) -> Comment:
    """One comment, as ``actor`` may see it (an embargoed one is not found for those who may not)."""
    comment = session.get(Comment, comment_id)
    if comment is None or not may_read(actor, target_of(session, comment)):
        raise NotFound(f"no comment {comment_id}")
    return comment


def edit_comment(*, session: Session, comment: Comment, body: str, actor: Actor) -> Comment:
    """Replace the text; the audit event keeps the old one, so the history is never lost."""
    if not access.may_change_comment(actor, comment.created_by):
        raise Forbidden("only the comment's author or an admin may edit it")
    if comment.archived:
        raise InputError("an archived comment cannot be edited", field="body")
    text = _clean_body(body)
    if text == comment.body:
        raise InputError("nothing changed", field="body")
    before = audit.snapshot(comment)
    comment.body, comment.edited_at = text, utcnow()
    comment.mentions = _known_names(session, find_mentions(text))
    session.add(comment)
    audit.record(session, actor=actor.label, action="comment.edit", entity="comment", code=str(comment.id),
                 compound_id=comment.compound_id, before=before, after=audit.snapshot(comment))
    added = [n for n in comment.mentions if n not in set(before.get("mentions") or [])]
    _notify_mentions(session, target_of(session, comment), comment, added, actor=actor)
    session.commit()
    session.refresh(comment)
    return comment


def set_archived(*, session: Session, comment: Comment, archived: bool, actor: Actor) -> Comment:
    if not access.may_change_comment(actor, comment.created_by):
        raise Forbidden("only the comment's author or an admin may archive it")
    before = audit.snapshot(comment)
    comment.archived = archived
    session.add(comment)
    audit.record(session, actor=actor.label, action="comment.archive" if archived else "comment.restore",
                 entity="comment", code=str(comment.id), compound_id=comment.compound_id, before=before,
                 after=audit.snapshot(comment))
    session.commit()
    session.refresh(comment)
    return comment


def edit_history(session: Session, comment: Comment) -> list[dict[str, Any]]:
    """Earlier versions of the text, oldest first, from the audit trail."""
    from ..models import AuditEvent

    events = session.exec(select(AuditEvent).where(AuditEvent.entity == "comment", AuditEvent.action == "comment.edit",
                                                   AuditEvent.entity_code == str(comment.id))
                          .order_by(AuditEvent.at, AuditEvent.id)).all()
    return [{"at": e.at, "by": e.actor, "body": (e.before or {}).get("body", "")} for e in events]


def target_of(session: Session, comment: Comment) -> Target:
    row = session.get({"compound": Compound, "batch": Batch, "sample": Sample,
                       "measurement": Measurement}[comment.target], comment.target_id)
    ref = str(row.id) if comment.target == "measurement" else row.code
    return Target(comment.target, row, ref, session.get(Compound, comment.compound_id))


def comment_read(comment: Comment, target: Target) -> CommentRead:
    return CommentRead(id=comment.id, target=comment.target, ref=target.ref, compound=target.compound.code,
                       body=comment.body, html=render_markdown(comment.body, known=comment.mentions),
                       created_by=comment.created_by, mentions=list(comment.mentions), created_at=comment.created_at,
                       edited_at=comment.edited_at, archived=comment.archived)


def thread(session: Session, target: Target, *, actor: Optional[Actor]) -> dict[str, Any]:
    """The live comments on ``target``, oldest first, as ``actor`` may see them."""
    if not may_read(actor, target):
        return {"items": [], "withheld": True}
    rows = session.exec(select(Comment).where(Comment.target == target.kind, Comment.target_id == target.row.id,
                                              Comment.archived == False)  # noqa: E712
                        .order_by(Comment.created_at.desc(), Comment.id.desc()).limit(THREAD_LIMIT)).all()
    return {"items": [comment_read(c, target) for c in reversed(rows)], "withheld": False}


def thread_panel(session: Session, target: Target, *, actor: Optional[Actor], error: str = "",
                 draft: str = "") -> dict[str, Any]:
    """What the comment partial shows: the thread, who may post and change what, the form's URLs."""
    data = thread(session, target, actor=actor)
    may_post = not data["withheld"] and access.allows(actor, access.WRITE)
    items = [{"c": c, "may_change": access.may_change_comment(actor, c.created_by)} for c in data["items"]]
    return {"target": target.kind, "ref": target.ref, "post_url": target.post_url, "comments": items,
            "withheld": data["withheld"], "may_post": may_post, "error": error, "draft": draft,
            "dom_id": f"comments-{target.kind}-{target.ref}"}


__all__ = ["COMMENT_TARGETS", "PLURALS", "Target", "comment_read", "edit_comment", "edit_history", "get_comment",
           "post_comment", "resolve", "set_archived", "thread", "thread_panel"]
