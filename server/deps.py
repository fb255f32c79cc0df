"""FastAPI dependencies as ``Annotated`` aliases: database session, the calling actor, what it needs.

Who may do what is decided in ``server/access.py`` (the access table is there); the dependencies
here find the caller (token or session cookie), check CSRF, and turn the access module's answer
into a 401/403 for the API or a login redirect/403 page for the web.

Upload tokens also get every answer with account, token and worker names hidden (``Actor.sees_people``,
``services.accounts.hide_people``).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Annotated, Optional

from fastapi import Depends, HTTPException, Path, Query, Request
from sqlalchemy.exc import OperationalError
from sqlmodel import Session, select

from . import access
from .access import Actor
from .bounds import MAX_ROW_ID
from .models import ApiToken, User, utcnow
from . import cookies
from .security import hash_token
from .settings import Settings


def get_settings_dep(request: Request) -> Settings:
    return request.app.state.settings


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]


def get_session(request: Request) -> Iterator[Session]:
    with Session(request.app.state.engine) as session:
        yield session


SessionDep = Annotated[Session, Depends(get_session)]


def _token_actor(session: Session, raw: str) -> Actor:
    token = session.exec(select(ApiToken).where(ApiToken.token_hash == hash_token(raw))).first()
    if token is None or token.revoked_at is not None:
        raise HTTPException(401, "invalid or revoked token", headers={"WWW-Authenticate": "Bearer"})
    now = utcnow()
    if token.expires_at is not None and token.expires_at <= now:
        raise HTTPException(401, "token expired", headers={"WWW-Authenticate": "Bearer"})
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
        embargo_grant=bool(token.sees_embargoed),
        profile=token.profile or "",
        token_id=token.id,
    )


def optional_actor(request: Request, session: SessionDep) -> Optional[Actor]:
    """The caller: a bearer token, else the logged-in user of the session cookie, else None."""
    actor = _find_actor(request, session)
    request.state.actor = actor
    return actor


def _find_actor(request: Request, session: Session) -> Optional[Actor]:
    auth = request.headers.get("authorization", "")
    if auth:
        scheme, _, raw = auth.partition(" ")
        if scheme.lower() != "bearer" or not raw.strip():
            raise HTTPException(401, "use 'Authorization: Bearer <token>'", headers={"WWW-Authenticate": "Bearer"})
        return _token_actor(session, raw.strip())
    live = cookies.current(request)
    if live is None:
        return None
    user = session.get(User, live.user_id)
    if user is None or not user.active:
        return None
    return Actor(kind="user", name=user.username, role=user.role, user_id=user.id, via_cookie=True)


OptionalActor = Annotated[Optional[Actor], Depends(optional_actor)]


_UNRESOLVED = object()


def current_actor(request: Request) -> Optional[Actor]:
    """The caller, for code outside a route's dependencies (error pages): the actor the route
    resolved, else found now from the request's token or cookie (a bad token counts as nobody)."""
    found = getattr(request.state, "actor", _UNRESOLVED)
    if found is not _UNRESOLVED:
        return found
    try:
        with Session(request.app.state.engine) as session:
            return optional_actor(request, session)
    except (HTTPException, OperationalError):  # a bad token, or the database is down: show the visitor's menu
        request.state.actor = None
        return None


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
    if not cookies.csrf_matches(request, sent):
        raise HTTPException(403, "missing or wrong CSRF token; reload the page and try again")


def require_reader(request: Request, actor: OptionalActor) -> Actor:
    if not access.allows(actor, access.READ):
        raise HTTPException(401, "log in or send a token", headers={"WWW-Authenticate": "Bearer"})
    return actor


async def _require(request: Request, actor: Optional[Actor], need: str) -> Actor:
    actor = require_reader(request, actor)
    if not access.allows(actor, need):
        raise HTTPException(403, access.API_REFUSALS[need].format(label=actor.label))
    await check_csrf(request, actor)
    return actor


async def require_writer(request: Request, actor: OptionalActor) -> Actor:
    return await _require(request, actor, access.WRITE)


async def require_uploader(request: Request, actor: OptionalActor) -> Actor:
    return await _require(request, actor, access.UPLOAD)


async def require_admin(request: Request, actor: OptionalActor) -> Actor:
    return await _require(request, actor, access.ADMIN)


async def require_account(request: Request, actor: OptionalActor) -> Actor:
    """A logged-in account of any role, for its own inbox, follows and preferences (CSRF on writes)."""
    actor = require_reader(request, actor)
    if not access.has_inbox(actor):
        raise HTTPException(403, access.NO_INBOX)
    await check_csrf(request, actor)
    return actor


Reader = Annotated[Actor, Depends(require_reader)]
Account = Annotated[Actor, Depends(require_account)]
Writer = Annotated[Actor, Depends(require_writer)]
Uploader = Annotated[Actor, Depends(require_uploader)]
Admin = Annotated[Actor, Depends(require_admin)]


# --- pages: the same decisions, answered for people ---------------------------------------------


def page_actor(request: Request, actor: OptionalActor) -> Actor:
    """A logged-in caller (or a token) for a page; nobody -> the login form, then back here."""
    if not access.allows(actor, access.READ):
        raise access.NotLoggedIn(request.url.path + (f"?{request.url.query}" if request.url.query else ""))
    return actor


async def _page_require(request: Request, actor: Actor, need: str) -> Actor:
    if not access.allows(actor, need):
        raise access.Refused(access.PAGE_REFUSALS[need])
    await check_csrf(request, actor)
    return actor


async def page_writer(request: Request, actor: Annotated[Actor, Depends(page_actor)]) -> Actor:
    return await _page_require(request, actor, access.WRITE)


async def page_admin(request: Request, actor: Annotated[Actor, Depends(page_actor)]) -> Actor:
    """An admin, for a page (GET) or a form post (POST, with its CSRF token)."""
    return await _page_require(request, actor, access.ADMIN)


async def page_account(request: Request, actor: Annotated[Actor, Depends(page_actor)]) -> Actor:
    """A logged-in account for its inbox page and form posts (with their CSRF token)."""
    if not access.has_inbox(actor):
        raise access.Refused("Notifications belong to accounts; log in with yours to see your inbox.")
    await check_csrf(request, actor)
    return actor


PageActor = Annotated[Actor, Depends(page_actor)]
PageAccount = Annotated[Actor, Depends(page_account)]
PageWriter = Annotated[Actor, Depends(page_writer)]
PageAdmin = Annotated[Actor, Depends(page_admin)]


# Row ids and offsets fit a 32-bit signed integer on every back end (server/bounds.py); larger numbers
# are refused as input errors (422) before they reach the database.
MAX_ID = MAX_ROW_ID
RowId = Annotated[int, Path(ge=1, le=MAX_ID, description="row id")]
Offset = Annotated[int, Query(ge=0, le=MAX_ID, description="rows to skip")]
