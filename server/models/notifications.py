"""Notifications: each account's inbox, the compounds it follows, and which events it wants."""

from __future__ import annotations

from datetime import datetime
from typing import Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow


class Notification(SQLModel, table=True):
    """One line in one account's inbox. ``compound_id`` is the embargo's unit: the inbox shows a
    notification only while its reader may see that compound (``server/access.py``)."""

    # The inbox lists an account's newest first; the badge counts its unread ones.
    __table_args__ = (sa.Index("ix_notification_user_read", "user_id", "read_at"),
                      sa.Index("ix_notification_user_created", "user_id", "created_at"))

    id: Optional[int] = Field(default=None, primary_key=True)
    user_id: int = Field(foreign_key="user.id")
    event: str = Field(max_length=20)  # one of services.notifications.EVENTS
    compound_id: Optional[int] = Field(default=None, foreign_key="compound.id", index=True)
    text: str = Field(max_length=400)
    url: str = Field(default="", max_length=300)
    actor: str = Field(default="", max_length=160)  # who caused it (an actor label), "" for the system
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    read_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)


class CompoundFollow(SQLModel, table=True):
    """An account follows a compound: it hears of new measurements, verdict changes and conflicts."""

    user_id: int = Field(foreign_key="user.id", primary_key=True)
    compound_id: int = Field(foreign_key="compound.id", primary_key=True, index=True)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)


class NotificationPreference(SQLModel, table=True):
    """What one account wants: events left out of its inbox, and which events also go by e-mail to
    ``email`` (only when the server has SMTP configured). No row: every event in the inbox, no e-mail."""

    user_id: int = Field(foreign_key="user.id", primary_key=True)
    muted: list[str] = Field(default_factory=list, sa_type=sa.JSON)
    email: str = Field(default="", max_length=254)
    email_events: list[str] = Field(default_factory=list, sa_type=sa.JSON)
    updated_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)


class NotificationRead(SQLModel):
    id: int
    event: str
    compound: Optional[str] = Field(description="the compound's code, when the event is about one")
    text: str
    url: str
    created_at: datetime
    read: bool


class NotificationPage(SQLModel):
    items: list[NotificationRead]
    unread: int = Field(description="unread notifications the caller may see, in all (not only this page)")


class NotificationReadMark(SQLModel):
    id: int
    read: bool
    unread: int
