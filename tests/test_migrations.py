"""The migration chain is the only source of the schema: it must match the models exactly."""

from __future__ import annotations

import sqlalchemy as sa
from alembic import command
from alembic.script import ScriptDirectory

from server import models
from server.db import alembic_config


def test_autogenerate_finds_no_drift(db_url):
    # alembic check raises when autogenerate would emit any operation (tables, columns, types, indexes).
    command.check(alembic_config(db_url))


def test_single_head_and_every_table_created(db_url):
    script = ScriptDirectory.from_config(alembic_config(db_url))
    assert len(script.get_heads()) == 1
    engine = sa.create_engine(db_url)
    try:
        names = set(sa.inspect(engine).get_table_names())
    finally:
        engine.dispose()
    assert {t.name for t in models.metadata.sorted_tables} <= names
    assert "alembic_version" in names


def test_downgrade_to_base_and_up_again(tmp_path):
    url = f"sqlite:///{tmp_path / 'cycle.db'}"
    cfg = alembic_config(url)
    command.upgrade(cfg, "head")
    command.downgrade(cfg, "base")
    command.upgrade(cfg, "head")
    command.check(cfg)
