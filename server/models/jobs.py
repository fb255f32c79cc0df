"""Background jobs (computed estimates), claimed by workers."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow

JOB_STATES = ("queued", "running", "done", "failed", "cancelled")


class Job(SQLModel, table=True):
    # Per-account quotas and fair claiming count an account's jobs by state (server/jobs/queue.py).
    __table_args__ = (sa.Index("ix_job_created_by_state", "created_by", "state"),)

    id: Optional[int] = Field(default=None, primary_key=True)
    kind: str = Field(max_length=40)
    state: str = Field(default="queued", max_length=20, index=True)
    progress: float = 0.0
    message: str = Field(default="", max_length=400)
    params: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    result: Optional[dict[str, Any]] = Field(default=None, sa_type=sa.JSON)
    error: str = Field(default="", sa_type=sa.Text)
    compound_id: Optional[int] = Field(default=None, foreign_key="compound.id", index=True)
    worker: str = Field(default="", max_length=120)
    attempts: int = 0
    cancel_requested: bool = False
    created_by: str = Field(default="", max_length=120)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    started_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    heartbeat_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    finished_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
