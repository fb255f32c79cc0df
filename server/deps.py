"""FastAPI dependencies as ``Annotated`` aliases: database session, the calling actor, scopes.

Who may do what (one table, enforced here and nowhere else):

| actor                  | read | see embargoed structures | upload measurements | other writes | admin |
|------------------------|------|--------------------------|---------------------|--------------|-------|
| user, role viewer      | yes  | yes                      | no                  | no           | no    |
| user, role member      | yes  | yes                      | yes                 | yes          | no    |
| user, role admin       | yes  | yes                      | yes                 | yes          | yes   |
| token, scope read      | yes  | yes                      | no                  | no           | no    |
| token, scope upload    | yes  | no                       | yes (its kinds)     | no           | no    |
| token, scope write     | yes  | yes                      | yes                 | yes          | no    |
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Annotated, Optional

from fastapi import Depends, HTTPException, Path, Query, Request
from sqlmodel import Session, select

from .bounds import MAX_ROW_ID
from .models import ApiToken, User, utcnow
from .security import hash_token, same_token
from .settings import Settings


def get_settings_dep(request: Request) -> Settings:
    return request.app.state.settings


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]


def get_session(request: Request) -> Iterator[Session]:
    with Session(request.app.state.engine) as session:
        yield session


SessionDep = Annotated[Session, Depends(get_session)]


@dataclass(frozen=True)
class Actor:
    kind: str  # "user" | "token"
    name: str
    role: Optional[str] = None
    scope: Optional[str] = None
    kinds: Optional[tuple[str, ...]] = None
    user_id: Optional[int] = None
    token_id: Optional[int] = None
    via_cookie: bool = False

    @property
    def label(self) -> str:
        if self.kind == "user":
            return f"user:{self.name}"
        return f"token:{self.token_id} ({self.name})"

    @property
    def can_write(self) -> bool:
        return self.role in ("admin", "member") or self.scope == "write"

    @property
    def is_admin(self) -> bool:
        return self.role == "admin"

    @property
    def can_see_embargoed(self) -> bool:
        return self.kind == "user" or self.scope in ("read", "write")

    def can_upload(self, kind: str | None = None) -> bool:
        if self.can_write:
            return True
        if self.scope == "upload":
            return self.kinds is None or kind is None or kind in self.kinds
        return False


def _token_actor(session: Session, raw: str) -> Actor:
    token = session.exec(select(ApiToken).where(ApiToken.token_hash == hash_token(raw))).first()
    if token is None or token.revoked_at is not None:
        raise HTTPException(401, "invalid or revoked token", headers={"WWW-Authenticate": "Bearer"})
    now = utcnow()
    # last_used_at is for people ("when did this PC last post?"): a minute's resolution is enough, and it
    # keeps reads from writing on every request.
    if token.last_used_at is None or (now - token.last_used_at).total_seconds() > 60:
        token.last_used_at = now
        session.add(token)
        session.commit()
    return Actor(
        kind="token",
        name=token.name,
        scope=token.scope,
        kinds=tuple(token.kinds) if token.kinds else None,
        token_id=token.id,
    )


def optional_actor(request: Request, session: SessionDep) -> Optional[Actor]:
    """The caller: a bearer token, else the logged-in user of the session cookie, else None."""
    auth = request.headers.get("authorization", "")
    if auth:
        scheme, _, raw = auth.partition(" ")
        if scheme.lower() != "bearer" or not raw.strip():
            raise HTTPException(401, "use 'Authorization: Bearer <token>'", headers={"WWW-Authenticate": "Bearer"})
        return _token_actor(session, raw.strip())
    uid = request.session.get("uid") if "session" in request.scope else None
    if uid is None:
        return None
    user = session.get(User, uid)
    if user is None or not user.active or request.session.get("pw") != user.password_hash[-16:]:
        request.session.clear()
        return None
    return Actor(kind="user", name=user.username, role=user.role, user_id=user.id, via_cookie=True)


OptionalActor = Annotated[Optional[Actor], Depends(optional_actor)]


async def check_csrf(request: Request, actor: Optional[Actor]) -> None:
    """Unsafe requests authenticated by the session cookie must echo the session's CSRF token,
    in the ``X-CSRF-Token`` header (htmx, scripts) or the ``csrf_token`` form field (plain forms)."""
    if actor is None or not actor.via_cookie or request.method in ("GET", "HEAD", "OPTIONS"):
        return
    sent = request.headers.get("x-csrf-token")
    ctype = request.headers.get("content-type", "")
    if not sent and ctype.startswith(("application/x-www-form-urlencoded", "multipart/form-data")):
        form = await request.form()
        value = form.get("csrf_token")
        sent = value if isinstance(value, str) else None
    if not same_token(sent, request.session.get("csrf")):
        raise HTTPException(403, "missing or wrong CSRF token; reload the page and try again")


def require_reader(request: Request, actor: OptionalActor) -> Actor:
    if actor is None:
        raise HTTPException(401, "log in or send a token", headers={"WWW-Authenticate": "Bearer"})
    return actor


async def require_writer(request: Request, actor: OptionalActor) -> Actor:
    actor = require_reader(request, actor)
    if not actor.can_write:
        raise HTTPException(403, f"{actor.label} may not change the registry (needs a member account or a write token)")
    await check_csrf(request, actor)
    return actor


async def require_uploader(request: Request, actor: OptionalActor) -> Actor:
    actor = require_reader(request, actor)
    if not actor.can_upload():
        raise HTTPException(403, f"{actor.label} may not upload measurements")
    await check_csrf(request, actor)
    return actor


async def require_admin(request: Request, actor: OptionalActor) -> Actor:
    actor = require_reader(request, actor)
    if not actor.is_admin:
        raise HTTPException(403, "only an admin may do this")
    await check_csrf(request, actor)
    return actor


Reader = Annotated[Actor, Depends(require_reader)]
Writer = Annotated[Actor, Depends(require_writer)]
Uploader = Annotated[Actor, Depends(require_uploader)]
Admin = Annotated[Actor, Depends(require_admin)]


def is_htmx(request: Request) -> bool:
    return request.headers.get("hx-request") == "true" and request.headers.get("hx-boosted") != "true"


HtmxRequest = Annotated[bool, Depends(is_htmx)]


# Row ids and offsets fit a 32-bit signed integer on every back end (server/bounds.py); larger numbers
# are refused as input errors (422) before they reach the database.
MAX_ID = MAX_ROW_ID
RowId = Annotated[int, Path(ge=1, le=MAX_ID, description="row id")]
Offset = Annotated[int, Query(ge=0, le=MAX_ID, description="rows to skip")]
