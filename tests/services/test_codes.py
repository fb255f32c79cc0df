"""Compound and batch numbers come from an atomic counter (server/services/codes.py)."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from alembic import command
from sqlmodel import Session

from server.db import alembic_config
from server.models import BatchCreate, CompoundCreate
from server.services import codes, registry
from server.services.errors import Duplicate


def _register(session, settings, smiles):
    return registry.register_compound(session=session, settings=settings, data=CompoundCreate(smiles=smiles),
                                      actor="test")


def test_numbers_follow_each_other_and_a_failed_registration_leaves_no_gap(session, settings):
    a = _register(session, settings, "CCO")
    with pytest.raises(Duplicate):
        _register(session, settings, "OCC")  # the same molecule written another way
    b = _register(session, settings, "CCCO")
    assert (a.number, b.number) == (1, 2)
    assert b.code == "RVZ-00002"


def test_batch_numbers_are_per_compound(session, settings):
    a, b = _register(session, settings, "CCO"), _register(session, settings, "CCCO")
    made = [registry.add_batch(session=session, compound=c, data=BatchCreate(chemist="x"), actor="t").code
            for c in (a, a, b, a)]
    assert made == ["RVZ-00001-B01", "RVZ-00001-B02", "RVZ-00002-B01", "RVZ-00001-B03"]


def test_a_refused_registration_takes_no_number(session, settings):
    _register(session, settings, "CCO")
    with pytest.raises(Exception):
        # An unknown scaffold is refused after the structure is parsed; it takes no number.
        registry.register_compound(session=session, settings=settings,
                                   data=CompoundCreate(smiles="CCCO", scaffold="NOPE"), actor="test")
    session.rollback()
    assert _register(session, settings, "CCCCO").number == 2


def test_migration_seeds_the_counters_from_codes_in_use(db_url, session, settings):
    a, b = _register(session, settings, "CCO"), _register(session, settings, "CCCO")
    for _ in range(3):
        registry.add_batch(session=session, compound=b, data=BatchCreate(chemist="x"), actor="t")
    b_code = b.code
    session.close()
    cfg = alembic_config(db_url)
    command.downgrade(cfg, "0005")  # drops the counters, keeps the codes
    command.upgrade(cfg, "head")
    engine = sa.create_engine(db_url)
    try:
        with engine.connect() as conn:
            rows = dict(conn.execute(sa.text("SELECT name, n FROM codecounter")).all())
    finally:
        engine.dispose()
    assert rows == {"compound": 2, codes.batch_series(b_code): 3}
    with Session(session.get_bind()) as s:
        assert _register(s, settings, "CCCCO").code == "RVZ-00003"
        c = registry.get_compound(s, b_code)
        assert registry.add_batch(session=s, compound=c, data=BatchCreate(chemist="x"), actor="t").code.endswith("-B04")
