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


def _fresh_database(kind: str, tmp_path):
    """An empty database of its own: a SQLite file, or a new PostgreSQL database (skipped without one)."""
    import os
    import uuid

    import pytest
    from sqlalchemy.engine import make_url

    if kind == "sqlite":
        return f"sqlite:///{tmp_path / 'populated.db'}", None
    pg = os.environ.get("REMANENCE_TEST_PG_URL", "")
    if not pg:
        if os.environ.get("REMANENCE_REQUIRE_PG") == "1":
            pytest.fail("REMANENCE_REQUIRE_PG=1 but REMANENCE_TEST_PG_URL is not set")
        pytest.skip("PostgreSQL tests need REMANENCE_TEST_PG_URL")
    name = f"remanence_mig_{uuid.uuid4().hex[:10]}"
    admin = sa.create_engine(make_url(pg), isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f'CREATE DATABASE "{name}"'))

    def drop():
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()

    return make_url(pg).set(database=name).render_as_string(hide_password=False), drop


import pytest as _pytest  # noqa: E402


@_pytest.mark.parametrize("backend", ["sqlite", _pytest.param("postgresql", marks=_pytest.mark.pg)])
def test_samples_migration_files_existing_measurements_under_default_samples(backend, tmp_path):
    """0013 on a populated database: every batch with measurements gets <batch>-S01 holding them all."""
    from sqlmodel import Session, select

    from server.ingest.table import to_csv_bytes
    from server.models import BatchCreate, CompoundCreate, Measurement, Sample
    from server.services import measurements, registry
    from server.settings import Settings
    from server.synth.ferro import miller_loop

    url, drop = _fresh_database(backend, tmp_path)
    try:
        cfg = alembic_config(url)
        command.upgrade(cfg, "head")
        settings = Settings(data_dir=tmp_path, database_url=url, secret_key="test", embedded_worker=False).resolved()
        engine = sa.create_engine(url)
        with Session(engine) as s:
            # An invented hexa-methoxy benzene (C12H18O6), two batches with loops and one without.
            c = registry.register_compound(session=s, settings=settings, actor="t",
                                           data=CompoundCreate(smiles="COc1c(OC)c(OC)c(OC)c(OC)c1OC"))
            b1, b2, b3 = (registry.add_batch(session=s, compound=c, data=BatchCreate(chemist="lab"), actor="t")
                          for _ in range(3))
            for i, b in enumerate((b1, b1, b2)):
                # Miller et al. 1990 tanh loop, a different Pr each time so the bytes differ.
                raw = to_csv_bytes(miller_loop(10, 7 + i * 0.1, 50, 300), {"temperature": "300 K"})
                measurements.upload_measurement(session=s, batch=b, kind_name="pe_loop", raw=raw, filename="l.csv",
                                                form={"frequency": "100 Hz"}, actor="t")
            codes = {b.id: b.code for b in (b1, b2, b3)}
        # Back to the schema before samples existed, with the rows still there, and up again.
        command.downgrade(cfg, "0009")
        with engine.connect() as conn:
            assert conn.execute(sa.text("SELECT count(*) FROM measurement")).scalar() == 3
        command.upgrade(cfg, "head")
        command.check(cfg)
        with Session(engine) as s:
            samples = s.exec(select(Sample)).all()
            assert sorted(x.code for x in samples) == sorted([f"{codes[b1.id]}-S01", f"{codes[b2.id]}-S01"])
            assert all(x.is_default and x.seq == 1 for x in samples)
            by_id = {x.id: x for x in samples}
            for m in s.exec(select(Measurement)).all():
                assert by_id[m.sample_id].batch_id == m.batch_id
        engine.dispose()
    finally:
        if drop:
            drop()
