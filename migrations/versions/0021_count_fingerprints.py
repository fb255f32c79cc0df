"""similarity on Morgan count fingerprints (PostgreSQL cartridge table only)

Revision ID: 0021
Revises: 0014
Create Date: 2026-12-02 13:30:00

Bit-vector Morgan fingerprints give Tanimoto 1.0 between homologues (the C6, C8, C10 and C12
members of one series differ only in how many identical CH2 environments they carry), so the
cartridge table ``compound_structure`` swaps its ``mfp bfp`` column for ``mcfp sfp``: the unfolded
Morgan count fingerprint ``morgan_fp(m, 2)``, the same vector the in-process index computes
(server.chem.search.fingerprint). Filled from the stored molecules, with a GiST index.

A no-op on SQLite, and on PostgreSQL without the table (no cartridge: search runs in process,
and ``remanence init`` builds the table with the new column once the cartridge works).
"""
from typing import Sequence, Union

import sqlalchemy as sa
from alembic import op

revision: str = '0021'
down_revision: Union[str, None] = '0014'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def _has_table() -> bool:
    bind = op.get_bind()
    if bind.dialect.name != "postgresql":
        return False
    if op.get_context().as_sql:
        return True
    return bind.execute(sa.text("SELECT to_regclass('compound_structure')")).scalar_one() is not None


def upgrade() -> None:
    if not _has_table():
        return
    op.execute("ALTER TABLE compound_structure DROP COLUMN IF EXISTS mfp")  # its GiST index goes with it
    op.execute("ALTER TABLE compound_structure ADD COLUMN mcfp sfp")
    op.execute("UPDATE compound_structure SET mcfp = morgan_fp(m, 2)")
    op.execute("CREATE INDEX ix_compound_structure_mcfp ON compound_structure USING gist (mcfp)")


def downgrade() -> None:
    if not _has_table():
        return
    op.execute("ALTER TABLE compound_structure DROP COLUMN IF EXISTS mcfp")
    op.execute("ALTER TABLE compound_structure ADD COLUMN mfp bfp")
    op.execute("SELECT set_config('rdkit.morgan_fp_size', '512', true)")
    op.execute("UPDATE compound_structure SET mfp = morganbv_fp(m, 2)")
    op.execute("CREATE INDEX ix_compound_structure_mfp ON compound_structure USING gist (mfp)")
