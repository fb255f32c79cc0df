"""Migration 0026 (accounts' display name) on SQLite and PostgreSQL: it upgrades a database with accounts,
which keep their rows and get no display name; the column takes one; the downgrade drops only it."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from alembic import command
from sqlmodel import Session, select

from server.db import alembic_config
from server.models import User
from server.services import accounts
from tests.test_migrations import _fresh_database


def _columns(engine) -> set[str]:
    return {c["name"] for c in sa.inspect(engine).get_columns("user")}


@pytest.mark.parametrize("backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.pg)])
def test_0026_upgrades_accounts_and_downgrades(backend, tmp_path):
    url, drop = _fresh_database(backend, tmp_path)
    engine = sa.create_engine(url)
    try:
        cfg = alembic_config(url)
        command.upgrade(cfg, "0025")
        assert "display_name" not in _columns(engine)
        with engine.begin() as conn:  # an account made before the column existed
            conn.execute(sa.text('INSERT INTO "user" (username, password_hash, role, active, created_at) '
                                 "VALUES ('ana', 'x', 'member', :t, CURRENT_TIMESTAMP)"), {"t": True})
        command.upgrade(cfg, "head")
        command.check(cfg)
        with Session(engine) as s:
            ana = s.exec(select(User)).one()
            assert (ana.username, ana.display_name) == ("ana", None)
            accounts.set_display_name(session=s, username="ana", display_name="  Dr.  A. Example ", actor="t")
            assert s.exec(select(User)).one().display_name == "Dr. A. Example"
        command.downgrade(cfg, "0025")
        assert "display_name" not in _columns(engine)
        with engine.connect() as conn:
            assert conn.execute(sa.text('SELECT username FROM "user"')).scalars().all() == ["ana"]
    finally:
        engine.dispose()
        if drop:
            drop()
