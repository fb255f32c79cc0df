"""Browser login sessions, kept on the server.

A login creates a :class:`~server.models.WebSession` row; the browser's cookie holds only the random
session id (32 bytes from ``secrets``), and the row stores its SHA-256. A request is logged in while its
row is unrevoked, unexpired and its account active. Each use slides ``expires_at`` to
``last_seen_at + REMANENCE_SESSION_HOURS`` (written at most once a minute, so reads do not write on every
request). Logout revokes the one row; a password change and a deactivation revoke every row of the account.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from typing import Optional

import sqlalchemy as sa
from sqlmodel import Session, select

from ..models import User, WebSession, utcnow
from ..security import hash_token, new_csrf_token, new_session_id

SLIDE_EVERY = timedelta(minutes=1)
CLIENT_CHARS = 200
KEEP_ENDED = timedelta(days=30)  # ended rows stay this long (who was logged in from where), then go


@dataclass(frozen=True)
class LiveSession:
    """What a request needs of its session (detached from any database session)."""

    row_id: int
    user_id: int
    csrf_token: str
    slid: bool  # expires_at moved forward on this request: the cookie's lifetime is renewed too


def open_session(db: Session, *, user: User, hours: float, client: str = "") -> tuple[str, WebSession]:
    """A new session for ``user``; returns the raw id (for the cookie, never stored) and the row."""
    raw = new_session_id()
    now = utcnow()
    row = WebSession(id_hash=hash_token(raw), user_id=user.id, csrf_token=new_csrf_token(),
                     client=client[:CLIENT_CHARS], created_at=now, last_seen_at=now,
                     expires_at=now + timedelta(hours=hours))
    db.add(row)
    db.execute(sa.delete(WebSession).where(WebSession.expires_at < now - KEEP_ENDED))
    db.commit()
    db.refresh(row)
    return raw, row


def find_live(db: Session, raw: str, *, hours: float, slide: bool = True) -> Optional[LiveSession]:
    """The live session whose id is ``raw`` (sliding its expiry unless ``slide`` is false: a request
    the page makes by itself, such as the menu badge's poll, is not the person using it), or None."""
    if not raw or len(raw) > 100:
        return None
    now = utcnow()
    found = db.exec(
        select(WebSession, User.active).join(User, User.id == WebSession.user_id)
        .where(WebSession.id_hash == hash_token(raw), WebSession.revoked_at.is_(None))
    ).first()
    if found is None:
        return None
    row, active = found
    if not active or row.expires_at <= now:
        return None
    slid = slide and now - row.last_seen_at >= SLIDE_EVERY
    if slid:
        db.execute(sa.update(WebSession).where(WebSession.id == row.id, WebSession.revoked_at.is_(None))
                   .values(last_seen_at=now, expires_at=now + timedelta(hours=hours)))
        db.commit()
    return LiveSession(row_id=row.id, user_id=row.user_id, csrf_token=row.csrf_token, slid=slid)


def revoke(db: Session, row_id: int, *, reason: str) -> None:
    db.execute(sa.update(WebSession).where(WebSession.id == row_id, WebSession.revoked_at.is_(None))
               .values(revoked_at=utcnow(), revoke_reason=reason[:40]))
    db.commit()


def revoke_all(db: Session, user_id: int, *, reason: str) -> int:
    """Revoke every live session of an account (in the caller's transaction: the caller commits)."""
    result = db.execute(sa.update(WebSession).where(WebSession.user_id == user_id, WebSession.revoked_at.is_(None))
                        .values(revoked_at=utcnow(), revoke_reason=reason[:40]))
    return int(result.rowcount or 0)


def list_live(db: Session, user_id: int) -> list[WebSession]:
    now = utcnow()
    return list(db.exec(select(WebSession).where(WebSession.user_id == user_id, WebSession.revoked_at.is_(None),
                                                 WebSession.expires_at > now)
                        .order_by(WebSession.last_seen_at.desc())).all())
