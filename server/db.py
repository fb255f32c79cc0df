"""Database engines and migrations.

One engine per :class:`~server.settings.Settings`, made by :func:`make_engine` and kept on
the app (never a module-level global), so each test can have its own database.
SQLite runs in WAL mode with a busy timeout and enforced foreign keys; PostgreSQL
through psycopg 3. The schema is only ever created by Alembic (:func:`upgrade`).
"""

from __future__ import annotations


from alembic import command
from alembic.config import Config
from sqlalchemy import event
from sqlalchemy.engine import Engine, make_url
from sqlmodel import create_engine

from .package_files import migrations_dir
from .private_files import private_sqlite

SQLITE_BUSY_TIMEOUT_MS = 15_000


def make_engine(database_url: str, *, echo: bool = False, busy_ms: int = SQLITE_BUSY_TIMEOUT_MS) -> Engine:
    url = make_url(database_url)
    if url.get_backend_name() == "sqlite":
        if url.database and url.database != ":memory:" and not url.database.startswith("file:"):
            private_sqlite(url.database)
        engine = create_engine(
            database_url,
            echo=echo,
            connect_args={"check_same_thread": False, "timeout": busy_ms / 1000},
        )

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_conn, _record):  # noqa: ANN001 - DB-API objects
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute(f"PRAGMA busy_timeout={int(busy_ms)}")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA synchronous=NORMAL")
            cur.close()

        return engine
    return create_engine(database_url, echo=echo, pool_pre_ping=True, pool_size=10, max_overflow=10)


def alembic_config(database_url: str) -> Config:
    """Alembic configuration pointing at this project's migrations and the given database."""
    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_dir()))
    cfg.set_main_option("sqlalchemy.url", database_url.replace("%", "%%"))
    cfg.attributes["configure_logger"] = False
    return cfg


def upgrade(database_url: str, revision: str = "head") -> None:
    """Create or upgrade the schema by running the migrations."""
    url = make_url(database_url)
    if url.get_backend_name() == "sqlite" and url.database and url.database != ":memory:":
        private_sqlite(url.database)
    command.upgrade(alembic_config(database_url), revision)
