"""Notifications: each account's inbox, the compounds it follows, and which events it wants."""

from __future__ import annotations

from datetime import datetime
from typing import Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow


class Notification(SQLModel, table=True):
    """One entry in one account's inbox. ``compound_id`` is the embargo's unit: the inbox shows a
    notification only while its reader may see that compound (``server/access.py``).

    An entry may stand for a burst of like events (``services/notifications.py``, grouped when they are
    written): ``count`` things (measurements, verdict changes...) from the events listed in ``parts``,
    the first at ``created_at`` and the latest at ``last_at``. A single event has ``count`` 1 (or the
    measurements of its upload) and no ``parts``."""

    # The inbox lists an account's entries by their latest event; the badge counts its unread ones;
    # the prune removes old ones by their latest event.
    __table_args__ = (sa.Index("ix_notification_user_read", "user_id", "read_at"),
                      sa.Index("ix_notification_user_last", "user_id", "last_at"),
                      sa.Index("ix_notification_last", "last_at"),
                      sa.Index("ix_notification_mail_due", "mail_due_at"))

    id: Optional[int] = Field(default=None, primary_key=True)
    user_id: int = Field(foreign_key="user.id")
    event: str = Field(max_length=20)  # one of services.notifications.EVENTS
    compound_id: Optional[int] = Field(default=None, foreign_key="compound.id", index=True)
    text: str = Field(max_length=400)
    url: str = Field(default="", max_length=300)
    actor: str = Field(default="", max_length=160)  # who caused it (an actor label), "" for the system
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    read_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    count: int = Field(default=1)
    last_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    # the events of a group, oldest first: {"text", "url", "created_at" (ISO), "count", "actor"}
    parts: list[dict] = Field(default_factory=list, sa_type=sa.JSON)
    # E-mail of the entry (migration 0036): due once its group's window has closed (at once for an
    # event that never groups), None when its reader chose no e-mail for it; ``mailed_at`` is set when
    # one process claims it for sending, and a claimed entry is never joined again.
    mail_due_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    mailed_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)


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


class NotificationPart(SQLModel):
    text: str
    url: str
    created_at: datetime
    count: int = Field(description="things this one event brought (the measurements of one upload)")


class NotificationGroup(SQLModel):
    first_at: datetime
    last_at: datetime
    events: int = Field(description="how many events the entry groups")
    items: list[NotificationPart] = Field(description="the grouped events, oldest first")


class NotificationRead(SQLModel):
    id: int
    event: str
    compound: Optional[str] = Field(description="the compound's code, when the event is about one")
    text: str
    url: str
    created_at: datetime = Field(description="when the (first) event happened")
    read: bool
    count: int = Field(1, description="things the entry stands for (measurements stored, verdict changes...)")
    group: Optional[NotificationGroup] = Field(None, description="set when the entry groups a burst of like "
                                                                 "events; null for a single event")


class NotificationPage(SQLModel):
    items: list[NotificationRead]
    unread: int = Field(description="unread notifications the caller may see, in all (not only this page)")


class NotificationReadMark(SQLModel):
    id: int
    read: bool
    unread: int
