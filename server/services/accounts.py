"""Accounts and instrument tokens."""

from __future__ import annotations

from datetime import timedelta
from typing import Optional, Sequence

from sqlmodel import Session, select

from ..errors import InputError
from ..models import ROLES, SCOPES, ApiToken, User, utcnow
from ..security import hash_password, hash_token, needs_rehash, new_token, verify_password
from . import audit
from .errors import Duplicate, NotFound

MAX_FAILED_LOGINS = 5
LOCKOUT = timedelta(minutes=5)


def create_user(*, session: Session, username: str, password: str, role: str, actor: str) -> User:
    username = username.strip()
    if not username or len(username) > 80 or not username.replace("_", "").replace("-", "").replace(".", "").isalnum():
        raise InputError("user names are 1-80 letters, digits, '.', '-' or '_'", field="username")
    if role not in ROLES:
        raise InputError(f"role must be one of {', '.join(ROLES)}", field="role")
    if len(password) < 8:
        raise InputError("passwords need at least 8 characters", field="password")
    if session.exec(select(User).where(User.username == username)).first():
        raise Duplicate(f"user {username!r} exists already", existing=username)
    user = User(username=username, password_hash=hash_password(password), role=role)
    session.add(user)
    session.flush()
    audit.record(session, actor=actor, action="user.create", entity="user", code=username, after=audit.snapshot(user))
    session.commit()
    session.refresh(user)
    return user


def authenticate(*, session: Session, username: str, password: str) -> Optional[User]:
    """The user when the password is right; None otherwise. Repeated failures lock the account briefly."""
    user = session.exec(select(User).where(User.username == username.strip())).first()
    now = utcnow()
    if user is None or not user.active:
        return None
    if user.locked_until is not None and user.locked_until > now:
        return None
    if not verify_password(user.password_hash, password):
        user.failed_logins += 1
        if user.failed_logins >= MAX_FAILED_LOGINS:
            user.locked_until = now + LOCKOUT
            user.failed_logins = 0
        session.add(user)
        session.commit()
        return None
    user.failed_logins = 0
    user.locked_until = None
    if needs_rehash(user.password_hash):
        user.password_hash = hash_password(password)
    session.add(user)
    session.commit()
    session.refresh(user)
    return user


def create_token(
    *, session: Session, name: str, scope: str, actor: str, kinds: Optional[Sequence[str]] = None
) -> tuple[ApiToken, str]:
    """Create a token; returns the row and the secret, which is never stored and shown only once."""
    if scope not in SCOPES:
        raise InputError(f"scope must be one of {', '.join(SCOPES)}", field="scope")
    name = name.strip()
    if not name:
        raise InputError("give the token a name (e.g. the instrument it belongs to)", field="name")
    if kinds and scope != "upload":
        raise InputError("only upload tokens can be limited to measurement kinds", field="kinds")
    secret = new_token()
    token = ApiToken(
        name=name,
        token_hash=hash_token(secret),
        prefix=secret[:10],
        scope=scope,
        kinds=list(kinds) if kinds else None,
        created_by=actor,
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


def set_active(*, session: Session, username: str, active: bool, actor: str) -> User:
    user = session.exec(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user {username}")
    before = {"active": user.active}
    user.active = active
    session.add(user)
    audit.record(session, actor=actor, action="user.activate" if active else "user.deactivate", entity="user",
                 code=username, before=before, after={"active": active})
    session.commit()
    session.refresh(user)
    return user


def user_read(user: User) -> dict:
    return {"username": user.username, "role": user.role, "active": user.active,
            "created_at": user.created_at.isoformat(), "locked": bool(user.locked_until and user.locked_until > utcnow())}


def token_read(token: ApiToken) -> dict:
    return {"id": token.id, "name": token.name, "prefix": token.prefix, "scope": token.scope, "kinds": token.kinds,
            "created_by": token.created_by, "created_at": token.created_at.isoformat(),
            "last_used_at": token.last_used_at.isoformat() if token.last_used_at else None,
            "revoked_at": token.revoked_at.isoformat() if token.revoked_at else None}


def list_users(session: Session) -> list[User]:
    return list(session.exec(select(User).order_by(User.username)).all())


def list_tokens(session: Session) -> list[ApiToken]:
    return list(session.exec(select(ApiToken).order_by(ApiToken.id.desc())).all())
