"""People, their login sessions and login throttles, and instrument tokens."""

from __future__ import annotations

from datetime import datetime
from typing import Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow

ROLES = ("admin", "member", "viewer")
SCOPES = ("read", "upload", "write")


class User(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    username: str = Field(max_length=80, unique=True, index=True)
    password_hash: str = Field(max_length=255)
    role: str = Field(default="member", max_length=20)
    active: bool = True
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    # How the person signs lab records ("Dr. A. Example"); None: the login name stands in.
    display_name: Optional[str] = Field(default=None, max_length=120)


class ApiToken(SQLModel, table=True):
    """A scoped token for an instrument PC or a script; only its SHA-256 is stored."""

    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(max_length=120)
    token_hash: str = Field(max_length=64, unique=True, index=True)
    prefix: str = Field(max_length=16)
    scope: str = Field(max_length=20)
    kinds: Optional[list[str]] = Field(default=None, sa_type=sa.JSON)  # upload tokens: allowed kinds, None = all
    created_by: str = Field(default="", max_length=120)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    last_used_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    expires_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)  # None: never expires
    # Read tokens only: may see embargoed compounds (server/access.py); off unless an admin grants it.
    sees_embargoed: bool = Field(default=False)
    # Upload tokens may be bound to an import profile: the instrument PC posts its files unchanged.
    profile: str = Field(default="", max_length=60)
    revoked_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)


class WebSession(SQLModel, table=True):
    """A browser login, kept on the server. The cookie holds only a random id; the row stores its SHA-256,
    so a copy of the database does not hand out live sessions. Logout, a password change and deactivation
    set ``revoked_at``; ``expires_at`` slides forward with use (REMANENCE_SESSION_HOURS)."""

    id: Optional[int] = Field(default=None, primary_key=True)
    id_hash: str = Field(max_length=64, unique=True, index=True)
    user_id: int = Field(foreign_key="user.id", index=True)
    csrf_token: str = Field(max_length=64)
    client: str = Field(default="", max_length=200)  # the browser's User-Agent, cut short: for people reading it
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    last_seen_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    expires_at: datetime = Field(sa_type=UTCDateTime)
    revoked_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    revoke_reason: str = Field(default="", max_length=40)


class LoginThrottle(SQLModel, table=True):
    """Login attempts counted per key in a fixed window: ``account:<name>`` (every name, registered or not,
    so a lock tells nothing about which names exist) and ``client:<address>``. Attempts are claimed with one
    atomic UPDATE before the password is checked, so parallel guesses cannot overtake the count."""

    key: str = Field(primary_key=True, max_length=120)
    attempts: int = 0
    window_started_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime, index=True)
