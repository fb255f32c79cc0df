"""The two accounts every notification test talks through: alice on the test's client, bob on a client
of his own (each with its own login cookie)."""
from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest
from fastapi.testclient import TestClient

from server.services import notifications
from tests.notifications.test_notifications import Person

T0 = datetime(2026, 12, 3, 14, 2, 0, tzinfo=timezone.utc)


@pytest.fixture
def clock(monkeypatch):
    """The notifications' clock: each reading 40 s after the one before, from 14:02 UTC."""
    state = {"now": T0, "step": timedelta(seconds=40)}

    def now() -> datetime:
        state["now"] += state["step"]
        return state["now"]

    monkeypatch.setattr(notifications, "utcnow", now)
    return state


@pytest.fixture
def alice(client, session):
    return Person(client, session, "alice")


@pytest.fixture
def bob(app, session):
    with TestClient(app) as c:
        yield Person(c, session, "bob")
