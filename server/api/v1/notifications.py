"""The caller's notifications, follows and event preferences (accounts only; tokens have no inbox).

``GET /api/v1/notifications`` lists newest first; ``POST /api/v1/notifications/{id}/read`` marks one read
(``{"read": false}`` marks it unread again); ``POST /api/v1/notifications/read-all``; ``GET``/``PUT
/api/v1/notifications/preferences``; ``PUT``/``DELETE /api/v1/compounds/{code}/follow``.
"""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Body, Query
from pydantic import BaseModel, Field

from ...deps import Account, Offset, RowId, SessionDep
from ...models import NotificationPage, NotificationReadMark
from ...services import notifications, registry
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["notifications"])


class ReadIn(BaseModel):
    read: bool = True


class EventChoice(BaseModel):
    event: str
    label: str = ""
    inbox: bool = True
    email: bool = False


class PreferencesIO(BaseModel):
    email: str = Field("", description="address for e-mailed events; empty: none")
    events: list[EventChoice]


class FollowOut(BaseModel):
    compound: str
    following: bool


class MarkedOut(BaseModel):
    marked: int
    unread: int


@router.get("/notifications", response_model=NotificationPage, responses=AUTH_ERRORS)
def list_notifications(session: SessionDep, actor: Account, unread: bool = Query(False, description="only unread"),
                       limit: int = Query(50, ge=1, le=notifications.PAGE_LIMIT), offset: Offset = 0
                       ) -> NotificationPage:
    """The caller's notifications, newest first, with the unread count (only those whose compound the
    caller may see)."""
    return NotificationPage(items=notifications.inbox(session, actor, unread_only=unread, limit=limit, offset=offset),
                            unread=notifications.unread_count(session, actor))


@router.post("/notifications/read-all", response_model=MarkedOut, responses=AUTH_ERRORS)
def read_all(session: SessionDep, actor: Account) -> MarkedOut:
    marked = notifications.mark_all_read(session, actor)
    return MarkedOut(marked=marked, unread=notifications.unread_count(session, actor))


@router.post("/notifications/{notification_id}/read", response_model=NotificationReadMark,
             responses={**AUTH_ERRORS, **NOT_FOUND})
def read_one(notification_id: RowId, session: SessionDep, actor: Account,
             data: Optional[ReadIn] = Body(None)) -> NotificationReadMark:
    """Mark one of the caller's notifications read (no body), or unread again (``{"read": false}``)."""
    n = notifications.mark_read(session, actor, notification_id, read=data.read if data else True)
    return NotificationReadMark(id=n.id, read=n.read_at is not None, unread=notifications.unread_count(session, actor))


@router.get("/notifications/preferences", response_model=PreferencesIO, responses=AUTH_ERRORS)
def get_preferences(session: SessionDep, actor: Account) -> PreferencesIO:
    return PreferencesIO(**notifications.preferences(session, actor))


@router.put("/notifications/preferences", response_model=PreferencesIO, responses={**AUTH_ERRORS, **INPUT_ERRORS})
def put_preferences(data: PreferencesIO, session: SessionDep, actor: Account) -> PreferencesIO:
    """Which events reach the inbox and which also go by e-mail; events not listed are left out of both."""
    out = notifications.set_preferences(session=session, actor=actor,
                                        inbox_events=[e.event for e in data.events if e.inbox],
                                        email_events=[e.event for e in data.events if e.email], email=data.email)
    return PreferencesIO(**out)


def _follow(session, code: str, actor, follow: bool) -> FollowOut:  # noqa: ANN001
    compound = registry.get_compound(session, code)
    notifications.set_following(session=session, actor=actor, compound=compound, follow=follow)
    return FollowOut(compound=compound.code, following=follow)


@router.put("/compounds/{code}/follow", response_model=FollowOut, responses={**AUTH_ERRORS, **NOT_FOUND})
def follow(code: str, session: SessionDep, actor: Account) -> FollowOut:
    """Follow a compound: hear of its new measurements, verdict changes and conflicts."""
    return _follow(session, code, actor, True)


@router.delete("/compounds/{code}/follow", response_model=FollowOut, responses={**AUTH_ERRORS, **NOT_FOUND})
def unfollow(code: str, session: SessionDep, actor: Account) -> FollowOut:
    return _follow(session, code, actor, False)
