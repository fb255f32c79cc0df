"""The once-only rebuild of CompoundStats under a new rule (server/services/stats.py), when two servers start
at the same time: the second finds the rule recorded by the first and stops (SQLite and PostgreSQL)."""

from __future__ import annotations

import pytest
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session

from server.models import SiteSetting
from server.services import stats


def _racing(record: bool):
    def refresh_all(session):
        if record:  # the other server recorded the rule between our check and our insert
            with Session(session.get_bind()) as other:
                other.add(SiteSetting(key=stats.RULE_KEY, value=stats.RULE))
                other.commit()
        raise IntegrityError("INSERT INTO sitesetting", {}, Exception("duplicate key"))
    return refresh_all


def test_a_concurrent_rebuild_is_not_an_error(session, monkeypatch):
    assert stats.stored_rule(session) is None
    monkeypatch.setattr(stats, "refresh_all", _racing(record=True))
    assert stats.ensure_current(session) == 0 and stats.stored_rule(session) == stats.RULE


def test_another_integrity_error_is_raised(session, monkeypatch):
    monkeypatch.setattr(stats, "refresh_all", _racing(record=False))
    with pytest.raises(IntegrityError):
        stats.ensure_current(session)
