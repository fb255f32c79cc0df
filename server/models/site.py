"""Settings an admin changes at run time (kept in the database, audited)."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow


class SiteSetting(SQLModel, table=True):
    key: str = Field(primary_key=True, max_length=60)
    value: Optional[Any] = Field(default=None, sa_type=sa.JSON)
    updated_by: str = Field(default="", max_length=120)
    updated_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
