"""Accounts and instrument tokens."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from typing import Callable, Optional, Sequence

import re
from typing import Any

import sqlalchemy as sa
from pydantic import BaseModel
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import object_session
from sqlmodel import Session, select

from .. import access
from ..errors import InputError
from ..models import ROLES, SCOPES, ApiToken, LoginThrottle, User, UTCDateTime, utcnow
from ..security import hash_password, hash_token, needs_rehash, new_token, verify_dummy, verify_password
from . import audit, import_profiles, sessions
from .errors import Duplicate, NotFound

# Login throttling (see authenticate): attempts per window, per user name and per client address.
THROTTLE_WINDOW = timedelta(minutes=5)
ACCOUNT_ATTEMPTS = 5
CLIENT_ATTEMPTS = 30


def _check_password(password: str) -> None:
    if len(password) < 8:
        raise InputError("passwords need at least 8 characters", field="password")
    if len(password) > 1000:
        raise InputError("passwords are at most 1000 characters", field="password")


#: The longest display name (the batch form's chemist field takes 120 characters too).
DISPLAY_NAME_MAX = 120


def clean_display_name(text: Optional[str]) -> Optional[str]:
    """A display name as stored: spaces trimmed and runs of them made one; empty means none."""
    name = " ".join((text or "").split())
    if len(name) > DISPLAY_NAME_MAX:
        raise InputError(f"display names are at most {DISPLAY_NAME_MAX} characters", field="display_name")
    return name or None


def create_user(*, session: Session, username: str, password: str, role: str, actor: str,
                display_name: Optional[str] = None) -> User:
    username = username.strip()
    display = clean_display_name(display_name)
    if not username or len(username) > 80 or not username.replace("_", "").replace("-", "").replace(".", "").isalnum():
        raise InputError("user names are 1-80 letters, digits, '.', '-' or '_'", field="username")
    if role not in ROLES:
        raise InputError(f"role must be one of {', '.join(ROLES)}", field="role")
    _check_password(password)
    if session.exec(select(User).where(User.username == username)).first():
        raise Duplicate(f"user {username!r} exists already", existing=username)
    user = User(username=username, password_hash=hash_password(password), role=role, display_name=display)
    session.add(user)
    session.flush()
    audit.record(session, actor=actor, action="user.create", entity="user", code=username, after=audit.snapshot(user))
    session.commit()
    session.refresh(user)
    return user


@dataclass(frozen=True)
class LoginOutcome:
    """``user`` when the password was right; else ``throttled`` says whether it was even checked."""

    user: Optional[User] = None
    throttled: bool = False
    retry_after_s: int = 0


def _insert_ignore(session: Session, key: str, now) -> None:  # noqa: ANN001
    dialect = session.get_bind().dialect.name
    insert = sqlite_insert if dialect == "sqlite" else pg_insert
    session.execute(insert(LoginThrottle).values(key=key, attempts=0, window_started_at=now)
                    .on_conflict_do_nothing(index_elements=["key"]))


def _claim(session: Session, key: str, limit: int) -> tuple[bool, int]:
    """Count one attempt against ``key`` atomically; returns (allowed, seconds until the window ends).

    One ``UPDATE ... RETURNING`` both starts a new window when the old one is over and adds the attempt,
    so parallel requests each see their own count: never more than ``limit`` get past it per window."""
    now = utcnow()
    fresh = LoginThrottle.window_started_at < now - THROTTLE_WINDOW
    stamp = sa.literal(now, UTCDateTime())
    stmt = (sa.update(LoginThrottle).where(LoginThrottle.key == key)
            .values(attempts=sa.case((fresh, 1), else_=LoginThrottle.attempts + 1),
                    window_started_at=sa.case((fresh, stamp), else_=LoginThrottle.window_started_at))
            .returning(LoginThrottle.attempts, LoginThrottle.window_started_at))
    for _ in range(3):  # a concurrent prune may delete the row between the insert and the update
        _insert_ignore(session, key, now)
        row = session.execute(stmt).first()
        session.commit()
        if row is not None:
            attempts, started = row
            left = int((started + THROTTLE_WINDOW - now).total_seconds()) + 1
            return attempts <= limit, max(left, 1)
    raise RuntimeError(f"could not count a login attempt for {key!r}")


def _account_key(username: str) -> str:
    return f"account:{username[:100]}"


def _refund(session: Session, key: str) -> None:
    session.execute(sa.update(LoginThrottle).where(LoginThrottle.key == key, LoginThrottle.attempts > 0)
                    .values(attempts=LoginThrottle.attempts - 1))


def authenticate(*, session: Session, username: str, password: str, client: str = "unknown",
                 device: Optional[Callable[[User], Optional[str]]] = None) -> LoginOutcome:
    """Check a login, throttled, at the cost of one Argon2id verification whatever the name.

    Limits per window of ``THROTTLE_WINDOW`` (numbers are common practice, not from a standard):
    ``ACCOUNT_ATTEMPTS`` per user name from unknown browsers, ``CLIENT_ATTEMPTS`` per client address, and
    ``ACCOUNT_ATTEMPTS`` per known-device mark (``device(user)`` gives the mark's nonce when this browser
    logged in to this account before): a known browser is not held by the per-account lock that strangers'
    guesses set, so nobody can keep an account locked from outside. Attempts are claimed before the password
    is checked (atomic UPDATE ... RETURNING), so parallel guesses cannot get past the count. A right password
    gives the client (or the device) its attempt back; from an unknown browser it also clears the name's count.
    """
    username = username.strip()
    user = session.exec(select(User).where(User.username == username)).first() if username else None
    nonce = device(user) if (device is not None and user is not None) else None
    keys = [f"device:{nonce}"] if nonce else [f"client:{client[:100]}", _account_key(username)]
    limits = [ACCOUNT_ATTEMPTS] if nonce else [CLIENT_ATTEMPTS, ACCOUNT_ATTEMPTS]
    for key, limit in zip(keys, limits):
        allowed, retry = _claim(session, key, limit)
        if not allowed:
            return LoginOutcome(throttled=True, retry_after_s=retry)
    if user is None or not user.active:
        verify_dummy(password)
        return LoginOutcome()
    if not verify_password(user.password_hash, password):
        return LoginOutcome()
    _refund(session, keys[0])  # the client's or the device's attempt back
    if not nonce:  # from a known browser, strangers' count on the name stays: they get no fresh guesses
        session.execute(sa.delete(LoginThrottle).where(LoginThrottle.key == _account_key(username)))
    session.execute(sa.delete(LoginThrottle).where(LoginThrottle.window_started_at < utcnow() - THROTTLE_WINDOW))
    if needs_rehash(user.password_hash):
        user.password_hash = hash_password(password)
        session.add(user)
    session.commit()
    session.refresh(user)
    return LoginOutcome(user=user)


def is_locked(session: Session, username: str) -> bool:
    """Whether strangers' guesses have used up this name's attempts in the current window."""
    row = session.get(LoginThrottle, _account_key(username))
    return bool(row and row.attempts >= ACCOUNT_ATTEMPTS and row.window_started_at > utcnow() - THROTTLE_WINDOW)


def set_password(*, session: Session, username: str, password: str, actor: str) -> User:
    """Change a password; every session of the account ends and its known-device marks stop counting."""
    user = session.exec(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user {username}")
    _check_password(password)
    user.password_hash = hash_password(password)
    session.add(user)
    ended = sessions.revoke_all(session, user.id, reason="password change")
    audit.record(session, actor=actor, action="user.password", entity="user", code=username,
                 after={"sessions_ended": ended})
    session.commit()
    session.refresh(user)
    return user


LIFETIME_UNITS = {"h": timedelta(hours=1), "d": timedelta(days=1), "w": timedelta(weeks=1)}
MAX_TOKEN_LIFETIME = timedelta(days=3660)


def parse_lifetime(text: Optional[str], *, field: str = "expires") -> Optional[timedelta]:
    """``"90d"``, ``"12h"``, ``"8w"`` -> a timedelta; empty or ``"never"`` -> None (no expiry)."""
    value = (text or "").strip().lower()
    if value in ("", "never"):
        return None
    number, unit = value[:-1], value[-1:]
    if unit not in LIFETIME_UNITS or not number.isdigit() or len(number) > 6 or int(number) == 0:
        raise InputError(f"{text!r} is not a lifetime: give a whole number and h, d or w (e.g. 90d), or never",
                         field=field)
    lifetime = int(number) * LIFETIME_UNITS[unit]
    if lifetime > MAX_TOKEN_LIFETIME:
        raise InputError("a token lifetime is at most 3660 days (or never)", field=field)
    return lifetime


def create_token(
    *, session: Session, name: str, scope: str, actor: str, kinds: Optional[Sequence[str]] = None,
    expires_in: Optional[timedelta] = None, sees_embargoed: bool = False, profile: Optional[str] = None,
) -> tuple[ApiToken, str]:
    """Create a token; returns the row and the secret, which is never stored and shown only once.
    ``expires_in`` (see :func:`parse_lifetime`) makes it answer 401 "token expired" after that long."""
    if scope not in SCOPES:
        raise InputError(f"scope must be one of {', '.join(SCOPES)}", field="scope")
    name = name.strip()
    if not name:
        raise InputError("give the token a name (e.g. the instrument it belongs to)", field="name")
    if kinds and scope != "upload":
        raise InputError("only upload tokens can be limited to measurement kinds", field="kinds")
    if sees_embargoed and scope != "read":
        # Write tokens see embargoed compounds anyway; upload tokens never do (server/access.py).
        raise InputError("only read tokens take the embargoed grant", field="sees_embargoed")
    profile = (profile or "").strip()
    if profile:
        if scope not in ("upload", "write"):
            raise InputError("only tokens that upload can be bound to an import profile", field="profile")
        try:
            import_profiles.get_profile(session, profile)
        except NotFound:
            raise InputError(f"no import profile {profile!r}", field="profile") from None
    secret = new_token()
    token = ApiToken(
        profile=profile,
        name=name,
        token_hash=hash_token(secret),
        prefix=secret[:10],
        scope=scope,
        kinds=list(kinds) if kinds else None,
        sees_embargoed=bool(sees_embargoed),
        created_by=actor,
        expires_at=utcnow() + expires_in if expires_in is not None else None,
    )
    session.add(token)
    session.flush()
    audit.record(session, actor=actor, action="token.create", entity="token", code=str(token.id), after=audit.snapshot(token))
    session.commit()
    session.refresh(token)
    return token, secret


def revoke_token(*, session: Session, token_id: int, actor: str) -> ApiToken:
    token = session.get(ApiToken, token_id)
    if token is None:
        raise NotFound(f"no token {token_id}")
    if token.revoked_at is None:
        before = audit.snapshot(token)
        token.revoked_at = utcnow()
        session.add(token)
        audit.record(session, actor=actor, action="token.revoke", entity="token", code=str(token.id), before=before,
                     after=audit.snapshot(token))
        session.commit()
        session.refresh(token)
    return token


def set_display_name(*, session: Session, username: str, display_name: Optional[str], actor: str) -> User:
    """Change (or, with an empty text, clear) an account's display name; audited."""
    display = clean_display_name(display_name)
    user = session.exec(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user {username!r}")
    before = {"display_name": user.display_name}
    user.display_name = display
    session.add(user)
    audit.record(session, actor=actor, action="user.display_name", entity="user", code=username,
                 before=before, after={"display_name": display})
    session.commit()
    session.refresh(user)
    return user


def account_of(session: Session, actor: Any) -> Optional[User]:
    """The account behind ``actor``; None for a token."""
    return session.get(User, actor.user_id) if access.has_inbox(actor) else None


def signing_name(session: Session, actor: Any) -> str:
    """How ``actor`` signs a record it makes (the batch form's chemist): the account's display name,
    else its login name; a token signs with its own name."""
    user = account_of(session, actor)
    return (user.display_name or user.username) if user is not None else actor.name


def set_active(*, session: Session, username: str, active: bool, actor: str) -> User:
    user = session.exec(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user {username}")
    before = {"active": user.active}
    user.active = active
    session.add(user)
    if not active:
        sessions.revoke_all(session, user.id, reason="deactivated")
    audit.record(session, actor=actor, action="user.activate" if active else "user.deactivate", entity="user",
                 code=username, before=before, after={"active": active})
    session.commit()
    session.refresh(user)
    return user


def user_read(user: User) -> dict:
    """The API shape of an account; ``locked``: strangers' guesses hold its per-account login lock now
    (see :func:`is_locked`; a known browser still gets in)."""
    db = object_session(user)
    return {"username": user.username, "display_name": user.display_name, "role": user.role, "active": user.active,
            "created_at": user.created_at.isoformat(), "locked": bool(db and is_locked(db, user.username))}


def token_read(token: ApiToken) -> dict:
    return {"id": token.id, "name": token.name, "prefix": token.prefix, "scope": token.scope, "kinds": token.kinds,
            "sees_embargoed": access.token_sees_embargoed(token.scope, token.sees_embargoed),
            "profile": token.profile or None,
            "created_by": token.created_by, "created_at": token.created_at.isoformat(),
            "last_used_at": token.last_used_at.isoformat() if token.last_used_at else None,
            "expires_at": token.expires_at.isoformat() if token.expires_at else None,
            "revoked_at": token.revoked_at.isoformat() if token.revoked_at else None}


def list_users(session: Session) -> list[User]:
    return list(session.exec(select(User).order_by(User.username)).all())


def list_tokens(session: Session) -> list[ApiToken]:
    return list(session.exec(select(ApiToken).order_by(ApiToken.id.desc())).all())


# Who did what is for people of the group: an upload token (the instrument PC's) gets answers with the names
# of accounts, tokens and workers replaced. Fields that hold an actor label, and the free-text fields that
# may quote one ("cancelled by user:ana"). Labels are "user:<name>", "token:<id> (<name>)", "worker:<name>".
PEOPLE_FIELDS = frozenset({"created_by", "by", "actor", "updated_by", "worker", "workers", "assignee", "entered_by"})
QUOTING_FIELDS = frozenset({"message"})
HIDDEN_NAME = "(hidden)"
_LABEL = re.compile(r"\b(?:user|token|worker):(?:\d+ \([^)]*\)|\S+)")


def hide_people(value: Any, *, sees_people: bool) -> Any:
    """``value`` (dicts, lists, pydantic models, nested) with actor names hidden unless ``sees_people``."""
    if sees_people:
        return value
    return _hidden(value)


def shown_name(label: str, viewer: Any) -> str:
    """For pages: an actor label as ``viewer`` (an Actor, or None for a visitor) may see it."""
    return label if (viewer is not None and viewer.sees_people) or not label else HIDDEN_NAME


def shown_text(text: str, viewer: Any) -> str:
    """For pages: free text with any quoted actor label hidden unless ``viewer`` may see names."""
    return text if (viewer is not None and viewer.sees_people) or not text else _LABEL.sub(HIDDEN_NAME, text)


def _hidden(value: Any, key: str | None = None) -> Any:
    if key in PEOPLE_FIELDS and value not in (None, "", [], {}):
        return [HIDDEN_NAME for _ in value] if isinstance(value, list) else HIDDEN_NAME
    if key in QUOTING_FIELDS and isinstance(value, str):
        return _LABEL.sub(HIDDEN_NAME, value)
    if isinstance(value, BaseModel):
        return value.model_copy(update={k: _hidden(getattr(value, k), k) for k in type(value).model_fields})
    if isinstance(value, dict):
        return {k: _hidden(v, k) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return type(value)(_hidden(v) for v in value)
    return value
