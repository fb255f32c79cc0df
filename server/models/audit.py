"""Audit trail: one append-only row per write."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow


class AuditEvent(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime, index=True)
    actor: str = Field(max_length=160)  # "user:alice" or "token:7 (xrd-pc)"
    action: str = Field(max_length=60)  # e.g. compound.create
    entity: str = Field(max_length=40)
    entity_code: str = Field(default="", max_length=60, index=True)
    compound_id: Optional[int] = Field(default=None, index=True)
    before: Optional[dict[str, Any]] = Field(default=None, sa_type=sa.JSON)
    after: Optional[dict[str, Any]] = Field(default=None, sa_type=sa.JSON)
