"""The three cookies Remanence sets, and the CSRF token that goes with them.

* ``remanence_session``: the random id of a server-side login session (``services/sessions.py``);
  nothing else, so the cookie names no account and a revoked row ends it at once.
* ``remanence_prelogin``: a random nonce for visitors who are not logged in; their CSRF token is an
  HMAC of it (no database row per anonymous visitor).
* ``remanence_device``: the known-device mark (``security.device_mark``) set at a successful login,
  which lets the right password through a per-account login lock from a browser that logged in before.

All are HttpOnly and SameSite=Lax, Secure when REMANENCE_COOKIE_SECURE is set. Handlers queue cookies
with :func:`queue_cookie`; :class:`CookieMiddleware` writes them on whatever response goes out (a page,
a redirect or an error page).
"""

from __future__ import annotations

import secrets
from typing import Optional

from fastapi import Request
from starlette.responses import Response
from starlette.types import ASGIApp, Message, Receive, Scope, Send
from sqlalchemy.exc import OperationalError
from sqlmodel import Session

from .models import User
from .security import device_mark, device_nonce, mask_token, prelogin_csrf, same_token, unmask_token
from .services import sessions

SESSION_COOKIE = "remanence_session"
PRELOGIN_COOKIE = "remanence_prelogin"
DEVICE_COOKIE = "remanence_device"
DEVICE_DAYS = 180  # common practice for "remember this browser" marks; a password change voids them sooner
PRELOGIN_HOURS = 12

_QUEUE = "remanence.cookies"
_CURRENT = "remanence.session"


def queue_cookie(request: Request, key: str, value: str, *, max_age_s: Optional[int]) -> None:
    """Send ``key=value`` with this request's response; ``max_age_s=0`` deletes the cookie."""
    scratch = Response()
    scratch.set_cookie(key, value, max_age=max_age_s, path="/", httponly=True, samesite="lax",
                       secure=request.app.state.settings.cookie_secure)
    request.scope.setdefault(_QUEUE, {})[key] = scratch.raw_headers[-1]


class CookieMiddleware:
    """Adds the queued ``Set-Cookie`` headers to the response start (pure ASGI, streams untouched)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_cookies(message: Message) -> None:
            if message["type"] == "http.response.start" and scope.get(_QUEUE):
                message = {**message, "headers": [*message.get("headers", []), *scope[_QUEUE].values()]}
            await send(message)

        await self.app(scope, receive, send_with_cookies)


def _session_seconds(request: Request) -> int:
    return int(request.app.state.settings.session_hours * 3600)


#: Requests a page makes by itself on a timer (the menu badge's poll): they do not slide the session's
#: expiry, so a tab left open does not keep its login alive for ever.
UNATTENDED_PATHS = frozenset({"/inbox/badge"})


def current(request: Request) -> Optional[sessions.LiveSession]:
    """The request's live login session (looked up once per request), or None."""
    if _CURRENT in request.scope:
        return request.scope[_CURRENT]
    raw = request.cookies.get(SESSION_COOKIE, "")
    live = None
    if raw:
        try:
            with Session(request.app.state.engine) as db:
                live = sessions.find_live(db, raw, hours=request.app.state.settings.session_hours,
                                          slide=request.url.path not in UNATTENDED_PATHS)
        except OperationalError:
            # The database is busy or down: not logged in for this answer (the 503 page still renders),
            # and the cookie is kept for when it is back.
            return None
        if live is None:
            queue_cookie(request, SESSION_COOKIE, "", max_age_s=0)
        elif live.slid:
            queue_cookie(request, SESSION_COOKIE, raw, max_age_s=_session_seconds(request))
    request.scope[_CURRENT] = live
    return live


def csrf_token(request: Request) -> str:
    """The CSRF token for forms on this response: the session's, or before login the HMAC of the nonce.

    Masked afresh on every call (``security.mask_token``), so compressed pages do not repeat a secret (BREACH).
    """
    live = current(request)
    if live is not None:
        return mask_token(live.csrf_token)
    nonce = request.scope.get("remanence.prelogin") or request.cookies.get(PRELOGIN_COOKIE, "")
    if not nonce or len(nonce) > 64:
        nonce = secrets.token_urlsafe(24)
        queue_cookie(request, PRELOGIN_COOKIE, nonce, max_age_s=PRELOGIN_HOURS * 3600)
    request.scope["remanence.prelogin"] = nonce
    return mask_token(prelogin_csrf(request.app.state.settings.secret_key, nonce))


def csrf_matches(request: Request, sent: Optional[str]) -> bool:
    """Whether ``sent`` is this browser's CSRF token, masked (of its login session, else of its pre-login nonce)."""
    sent = unmask_token(sent)
    live = current(request)
    if live is not None:
        return same_token(sent, live.csrf_token)
    nonce = request.cookies.get(PRELOGIN_COOKIE, "")
    if not nonce or len(nonce) > 64:
        return False
    return same_token(sent, prelogin_csrf(request.app.state.settings.secret_key, nonce))


def client_hint(request: Request) -> str:
    return request.headers.get("user-agent", "")


def client_address(request: Request) -> str:
    return request.client.host if request.client else "unknown"


def device_of(request: Request, user: Optional[User]) -> Optional[str]:
    """The nonce of this browser's known-device mark when ``user`` issued it, else None."""
    if user is None or user.id is None:
        return None
    return device_nonce(request.cookies.get(DEVICE_COOKIE), request.app.state.settings.secret_key, user.id,
                        user.password_hash, max_age_s=DEVICE_DAYS * 86400)


def log_in(request: Request, db: Session, user: User) -> None:
    """Start a fresh session for ``user`` (ending the browser's previous one) and mark the browser as known."""
    previous = current(request)
    if previous is not None:
        sessions.revoke(db, previous.row_id, reason="new login")
    raw, row = sessions.open_session(db, user=user, hours=request.app.state.settings.session_hours,
                                     client=client_hint(request))
    request.scope[_CURRENT] = sessions.LiveSession(row_id=row.id, user_id=user.id, csrf_token=row.csrf_token,
                                                   slid=False)
    queue_cookie(request, SESSION_COOKIE, raw, max_age_s=_session_seconds(request))
    queue_cookie(request, PRELOGIN_COOKIE, "", max_age_s=0)
    queue_cookie(request, DEVICE_COOKIE, device_mark(request.app.state.settings.secret_key, user.id,
                                                     user.password_hash), max_age_s=DEVICE_DAYS * 86400)


def log_out(request: Request, db: Session) -> None:
    live = current(request)
    if live is not None:
        sessions.revoke(db, live.row_id, reason="logout")
    request.scope[_CURRENT] = None
    queue_cookie(request, SESSION_COOKIE, "", max_age_s=0)
