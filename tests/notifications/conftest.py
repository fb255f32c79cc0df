"""The two accounts every notification test talks through: alice on the test's client, bob on a client
of his own (each with its own login cookie)."""
from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from tests.notifications.test_notifications import Person


@pytest.fixture
def alice(client, session):
    return Person(client, session, "alice")


@pytest.fixture
def bob(app, session):
    with TestClient(app) as c:
        yield Person(c, session, "bob")
