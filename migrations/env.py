"""Alembic environment: the metadata comes from server.models; the URL from the Alembic
config (set by server.db.alembic_config) or, when run as the `alembic` command, from the
project settings (REMANENCE_DATABASE_URL)."""

from __future__ import annotations

from alembic import context
from sqlalchemy import engine_from_config, pool

from server import models
from server.settings import Settings

config = context.config
target_metadata = models.metadata

# Tables made by migrations but kept out of the SQLModel metadata on purpose, so that
# autogenerate (and `alembic check`) neither reflects nor proposes to drop them:
# compound_structure (migration 0004) holds RDKit cartridge types (mol, bfp) and exists
# only on PostgreSQL with the cartridge; the models must not require it.
CARTRIDGE_ONLY_TABLES = frozenset({"compound_structure"})


def include_name(name, type_, parent_names) -> bool:
    # Before reflection: keeps SQLAlchemy from reflecting the unknown mol/bfp column types.
    return not (type_ == "table" and name in CARTRIDGE_ONLY_TABLES)


def include_object(obj, name, type_, reflected, compare_to) -> bool:
    if type_ == "table":
        return name not in CARTRIDGE_ONLY_TABLES
    table = getattr(obj, "table", None)
    return table is None or table.name not in CARTRIDGE_ONLY_TABLES


def _url() -> str:
    url = config.get_main_option("sqlalchemy.url")
    return url or Settings.from_env().database_url


def run_migrations_offline() -> None:
    context.configure(url=_url(), target_metadata=target_metadata, literal_binds=True, render_as_batch=True,
                      include_name=include_name, include_object=include_object)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    section = config.get_section(config.config_ini_section) or {}
    section["sqlalchemy.url"] = _url()
    connectable = engine_from_config(section, prefix="sqlalchemy.", poolclass=pool.NullPool)
    with connectable.connect() as connection:
        context.configure(
            connection=connection,
            target_metadata=target_metadata,
            render_as_batch=connection.dialect.name == "sqlite",
            compare_type=True,
            include_name=include_name,
            include_object=include_object,
        )
        with context.begin_transaction():
            context.run_migrations()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
