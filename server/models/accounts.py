"""People and instrument tokens."""

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
    failed_logins: int = 0
    locked_until: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)


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
    revoked_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
