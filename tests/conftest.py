"""Test fixtures.

Every test that asks for ``app``, ``client``, ``session`` or ``settings`` runs twice: on a
fresh migrated SQLite file and on PostgreSQL (REMANENCE_TEST_PG_URL, a server URL such as
postgresql+psycopg://postgres@127.0.0.1:5432/postgres). Without that variable the PostgreSQL
runs are skipped, unless REMANENCE_REQUIRE_PG=1 (CI), where a missing or unreachable
PostgreSQL fails them instead.

SQLite: the migrations run once into a template file, copied for each test.
PostgreSQL: one database per test session, migrated once, emptied before each test.
"""

from __future__ import annotations

import contextlib
import os
import re
import shutil
import uuid
from pathlib import Path
from typing import Iterator

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from sqlalchemy.engine import make_url
from sqlmodel import Session

from server import models
from server.app import create_app
from server.db import make_engine, upgrade
from server.settings import Settings

PG_URL = os.environ.get("REMANENCE_TEST_PG_URL", "")
REQUIRE_PG = os.environ.get("REMANENCE_REQUIRE_PG", "") == "1"


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("template") / "template.db"
    upgrade(f"sqlite:///{path}")
    return path


@contextlib.contextmanager
def fresh_pg_database(prefix: str = "remanence_test") -> Iterator[str]:
    """Create a new, empty database on REMANENCE_TEST_PG_URL's server; yields its URL, drops it after.

    Skips without PostgreSQL (fails instead when REMANENCE_REQUIRE_PG=1). Not migrated.
    """
    if not PG_URL:
        if REQUIRE_PG:
            pytest.fail("REMANENCE_REQUIRE_PG=1 but REMANENCE_TEST_PG_URL is not set")
        pytest.skip("PostgreSQL tests need REMANENCE_TEST_PG_URL")
    server_url = make_url(PG_URL)
    name = f"{prefix}_{uuid.uuid4().hex[:10]}"
    admin = sa.create_engine(server_url, isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    except sa.exc.OperationalError as exc:
        admin.dispose()
        if REQUIRE_PG:
            pytest.fail(f"PostgreSQL at {server_url.render_as_string()} unreachable: {exc}")
        pytest.skip(f"PostgreSQL unreachable: {exc}")
    try:
        yield server_url.set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


@pytest.fixture(scope="session")
def pg_database():
    """A freshly created and migrated PostgreSQL database for this test session."""
    with fresh_pg_database() as url:
        upgrade(url)
        yield url


def _empty_pg(url: str) -> None:
    tables = [t.name for t in models.metadata.sorted_tables]
    engine = sa.create_engine(url)
    with engine.begin() as conn:
        conn.execute(sa.text("TRUNCATE " + ", ".join(f'"{t}"' for t in tables) + " RESTART IDENTITY CASCADE"))
    engine.dispose()


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.pg)])
def db_url(request, tmp_path, sqlite_template) -> str:
    if request.param == "sqlite":
        path = tmp_path / "remanence.db"
        shutil.copyfile(sqlite_template, path)
        return f"sqlite:///{path}"
    url = request.getfixturevalue("pg_database")
    _empty_pg(url)
    return url


@pytest.fixture
def settings(db_url, tmp_path) -> Settings:
    return Settings(
        data_dir=tmp_path,
        database_url=db_url,
        secret_key="test-secret-key-not-for-production",
        embedded_worker=False,
        # The bad-input suites send hundreds of refused files with one token; the refused-upload limit has its own
        # tests (tests/trust/test_upload_failures.py), with a small limit and a clock of their own.
        upload_failures=100_000,
    ).resolved()


@pytest.fixture
def app(settings):
    application = create_app(settings)
    yield application
    application.state.engine.dispose()


@pytest.fixture
def client(app):
    with TestClient(app) as c:
        yield c


@pytest.fixture
def anon(app):
    """A second client with no login, beside ``client``."""
    with TestClient(app) as c:
        yield c


@pytest.fixture
def session(app):
    with Session(app.state.engine) as s:
        yield s


@pytest.fixture
def engine_for():
    """Make extra engines for a URL (closed at the end)."""
    made = []

    def _make(url: str):
        e = make_engine(url)
        made.append(e)
        return e

    yield _make
    for e in made:
        e.dispose()


_pg_outcomes = {"passed": 0, "skipped": 0}


def pytest_runtest_logreport(report):
    # PostgreSQL runs are the db_url fixture's "postgresql" parameter, e.g. test_x[postgresql].
    if not re.search(r"[\[-]postgresql[\]-]", report.nodeid):
        return
    if report.when == "call" and report.passed:
        _pg_outcomes["passed"] += 1
    if report.skipped:
        _pg_outcomes["skipped"] += 1


def pytest_sessionfinish(session, exitstatus):
    """In CI (REMANENCE_REQUIRE_PG=1) a run in which no PostgreSQL test passed, or one was skipped, fails."""
    if REQUIRE_PG and session.testscollected and (_pg_outcomes["passed"] == 0 or _pg_outcomes["skipped"]):
        print(f"\nPostgreSQL tests: {_pg_outcomes['passed']} passed, {_pg_outcomes['skipped']} skipped; "
              "CI requires them all to run.")
        session.exitstatus = 1
