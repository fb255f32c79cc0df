"""structure search: RDKit cartridge table (PostgreSQL only)

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02 10:00:00

On PostgreSQL: ``CREATE EXTENSION IF NOT EXISTS rdkit`` and the table
``compound_structure (compound_id -> compound.id, m mol, mfp bfp)`` with GiST indexes on
``m`` and ``mfp``, filled from ``compound.smiles``. It is not an SQLModel table (the models
must not need the cartridge); migrations/env.py keeps autogenerate off it.

When the server has no usable cartridge (package postgresql-15-rdkit missing, or
``CREATE EXTENSION`` refused), the step is skipped with a warning and structure search
runs in process (server.services.search.backend says which). After installing or fixing
the cartridge (``remanence setup postgres``), ``remanence init`` builds the table with the
same statements (server.services.search.enable_cartridge).

A no-op on SQLite.
"""
import logging
from typing import Sequence, Union

import sqlalchemy as sa
from alembic import op

revision: str = '0004'
down_revision: Union[str, None] = '0003'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

log = logging.getLogger("remanence.migrations")

# The cartridge default rdkit.morgan_fp_size (512), pinned here so
# the backfilled fingerprints match the in-process ones whatever the database default is.
MORGAN_FP_SIZE = 512


def _create_extension(bind) -> bool:
    if op.get_context().as_sql:  # offline (--sql): nothing to ask the server, write the statement
        op.execute("CREATE EXTENSION IF NOT EXISTS rdkit")
        return True
    if bind.execute(sa.text("SELECT 1 FROM pg_available_extensions WHERE name = 'rdkit'")).first() is None:
        log.warning("RDKit cartridge not installed on this PostgreSQL server (Debian package "
                    "postgresql-15-rdkit): compound_structure not created, structure search runs in process")
        return False
    savepoint = bind.begin_nested()
    try:
        bind.execute(sa.text("CREATE EXTENSION IF NOT EXISTS rdkit"))
    except sa.exc.DBAPIError as exc:
        savepoint.rollback()
        log.warning("CREATE EXTENSION rdkit failed (%s): compound_structure not created, "
                    "structure search runs in process", str(exc.orig).strip())
        return False
    savepoint.commit()
    return True


def upgrade() -> None:
    bind = op.get_bind()
    if bind.dialect.name != "postgresql" or not _create_extension(bind):
        return
    op.execute(
        "CREATE TABLE compound_structure ("
        " compound_id integer NOT NULL,"
        " m mol,"
        " mfp bfp,"
        " CONSTRAINT pk_compound_structure PRIMARY KEY (compound_id),"
        " CONSTRAINT fk_compound_structure_compound_id_compound FOREIGN KEY (compound_id) REFERENCES compound (id)"
        ")"
    )
    op.execute("CREATE INDEX ix_compound_structure_m ON compound_structure USING gist (m)")
    op.execute("CREATE INDEX ix_compound_structure_mfp ON compound_structure USING gist (mfp)")
    op.execute(f"SELECT set_config('rdkit.morgan_fp_size', '{MORGAN_FP_SIZE}', true)")
    op.execute(
        "INSERT INTO compound_structure (compound_id, m, mfp) "
        "SELECT s.id, s.m, morganbv_fp(s.m, 2) "
        "FROM (SELECT id, mol_from_smiles(smiles::cstring) AS m FROM compound) AS s"
    )


def downgrade() -> None:
    # The extension stays: other objects of the database may use it.
    if op.get_bind().dialect.name == "postgresql":
        op.execute("DROP TABLE IF EXISTS compound_structure")
