"""Accounts and instrument tokens (admins only)."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter
from pydantic import BaseModel, Field

from ...deps import Admin, RowId, SessionDep
from ...services import accounts
from .responses import AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND, Closed

router = APIRouter(tags=["admin"])


class UserIn(BaseModel):
    username: str = Field(min_length=1, max_length=80)
    password: str = Field(min_length=8, max_length=1000)
    role: str = Field("member", description="admin, member or viewer")
    display_name: Optional[str] = Field(None, max_length=120,
                                        description='how the person signs records, e.g. "Dr. A. Example"')


class TokenIn(BaseModel):
    name: str = Field(min_length=1, max_length=120, description="e.g. the instrument PC it belongs to")
    scope: str = Field(description="upload, write or read")
    kinds: Optional[list[str]] = Field(None, description="upload tokens: the measurement kinds allowed")
    sees_embargoed: bool = Field(False, description="read tokens: may see embargoed compounds")
    profile: Optional[str] = Field(None, max_length=60,
                                   description="upload tokens: read every file through this import profile")
    expires: Optional[str] = Field(None, max_length=20,
                                   description="lifetime such as 90d, 12h or 8w; empty or never: no expiry")


class UserOut(Closed):
    """An account as admins see it (``accounts.user_read``)."""

    username: str
    display_name: Optional[str]
    role: str
    active: bool
    created_at: str = Field(description="ISO 8601, UTC")
    locked: bool = Field(description="strangers' guesses hold the per-account login lock now")


class UserPage(Closed):
    items: list[UserOut]
    total: int


class TokenOut(Closed):
    """A token as admins see it (``accounts.token_read``); never its secret."""

    id: int
    name: str
    prefix: str = Field(description="the secret's first characters, to tell tokens apart")
    scope: str
    kinds: Optional[list[str]]
    sees_embargoed: bool
    profile: Optional[str]
    created_by: str
    created_at: str = Field(description="ISO 8601, UTC")
    last_used_at: Optional[str]
    expires_at: Optional[str]
    revoked_at: Optional[str]


class NewTokenOut(TokenOut):
    token: str = Field(description="the secret, shown this once")


class TokenPage(Closed):
    items: list[TokenOut]
    total: int


@router.get("/users", responses=AUTH_ERRORS)
def list_users(session: SessionDep, actor: Admin) -> UserPage:
    items = [accounts.user_read(u) for u in accounts.list_users(session)]
    return {"items": items, "total": len(items)}


@router.post("/users", status_code=201, responses={**AUTH_ERRORS, **INPUT_ERRORS, **DUPLICATE})
def add_user(data: UserIn, session: SessionDep, actor: Admin) -> UserOut:
    user = accounts.create_user(session=session, username=data.username, password=data.password, role=data.role,
                                display_name=data.display_name, actor=actor.label)
    return accounts.user_read(user)


@router.post("/users/{username}/deactivate", responses={**AUTH_ERRORS, **NOT_FOUND})
def deactivate_user(username: str, session: SessionDep, actor: Admin) -> UserOut:
    return accounts.user_read(accounts.set_active(session=session, username=username, active=False, actor=actor.label))


@router.get("/tokens", responses=AUTH_ERRORS)
def list_tokens(session: SessionDep, actor: Admin) -> TokenPage:
    items = [accounts.token_read(t) for t in accounts.list_tokens(session)]
    return {"items": items, "total": len(items)}


@router.post("/tokens", status_code=201, responses={**AUTH_ERRORS, **INPUT_ERRORS})
def create_token(data: TokenIn, session: SessionDep, actor: Admin) -> NewTokenOut:
    """The secret is in `token`, shown this once; only its hash is stored."""
    from ...kinds import KINDS
    from ...errors import InputError

    for k in data.kinds or []:
        if k not in KINDS:
            raise InputError(f"unknown kind {k!r}; use {', '.join(KINDS)}", field="kinds")
    token, secret = accounts.create_token(session=session, name=data.name, scope=data.scope, kinds=data.kinds,
                                          expires_in=accounts.parse_lifetime(data.expires), actor=actor.label,
                                          sees_embargoed=data.sees_embargoed, profile=data.profile)
    return {**accounts.token_read(token), "token": secret}


@router.post("/tokens/{token_id}/revoke", responses={**AUTH_ERRORS, **NOT_FOUND})
def revoke_token(token_id: RowId, session: SessionDep, actor: Admin) -> TokenOut:
    return accounts.token_read(accounts.revoke_token(session=session, token_id=token_id, actor=actor.label))
