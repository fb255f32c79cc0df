"""Migration 0024 (notifications, follows, preferences) on SQLite and PostgreSQL: it upgrades a populated
0020 database, its tables take rows, its downgrade removes them and leaves the registry's rows alone."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from alembic import command
from sqlmodel import Session, select

from server.db import alembic_config
from server.models import Compound, CompoundCreate, CompoundFollow, Notification, NotificationPreference, User
from server.services import accounts, notifications, registry
from server.settings import Settings
from tests.test_migrations import _fresh_database

NEW_TABLES = {"notification", "compoundfollow", "notificationpreference"}


@pytest.mark.parametrize("backend", ["sqlite", pytest.param("postgresql", marks=pytest.mark.pg)])
def test_0024_upgrades_a_populated_database_and_downgrades(backend, tmp_path):
    url, drop = _fresh_database(backend, tmp_path)
    engine = sa.create_engine(url)
    try:
        cfg = alembic_config(url)
        command.upgrade(cfg, "0020")
        assert not NEW_TABLES & set(sa.inspect(engine).get_table_names())
        command.upgrade(cfg, "head")
        command.check(cfg)
        assert NEW_TABLES <= set(sa.inspect(engine).get_table_names())
        settings = Settings(data_dir=tmp_path, database_url=url, secret_key="test", embedded_worker=False).resolved()
        with Session(engine) as s:
            ana = accounts.create_user(session=s, username="ana", password="correct-horse-battery", role="member",
                                 actor="t")
            accounts.create_user(session=s, username="ben", password="correct-horse-battery", role="member",
                                 actor="t")
            c = registry.register_compound(session=s, settings=settings, actor="user:ana",
                                           data=CompoundCreate(smiles="c1ccc2ccccc2c1"))
            s.add(CompoundFollow(user_id=ana.id, compound_id=c.id))
            s.add(NotificationPreference(user_id=ana.id, muted=["estimate"], email="ana@lab.example",
                                         email_events=["mention"]))
            notifications.mentioned(s, names=["ana"], compound=c, where=f"compound {c.code}",
                                    url=f"/compounds/{c.code}", body="see @ana", actor="user:ben")
            s.commit()
            assert [n.event for n in s.exec(select(Notification)).all()] == ["mention"]
            code = c.code
        command.downgrade(cfg, "0020")
        assert not NEW_TABLES & set(sa.inspect(engine).get_table_names())
        with engine.connect() as conn:
            assert conn.execute(sa.text('SELECT count(*) FROM "user"')).scalar() == 2
            assert conn.execute(sa.text("SELECT count(*) FROM compound")).scalar() == 1
        command.upgrade(cfg, "head")
        command.check(cfg)
        with Session(engine) as s:
            assert s.exec(select(Notification)).all() == [] and len(s.exec(select(User)).all()) == 2
            assert s.exec(select(Compound)).one().code == code
    finally:
        engine.dispose()
        if drop:
            drop()
