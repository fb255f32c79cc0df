"""the compound's dielectric-relaxation activation energy in compoundstats

Revision ID: 0027
Revises: 0026
Create Date: 2026-12-03 14:30:00

``compoundstats`` gains ``relax_ea_kcal_mol``, ``relax_ea_err_kcal_mol``, ``relax_ea_apparent`` and
``relax_ea_measurement_id`` (server/kinds/dielectric_spectrum.py fills them). They are left empty here:
the stats rule moved to ``stats/3`` with them, so ``remanence init`` / ``serve`` rebuild every row once
(server/services/stats.ensure_current).
"""
from typing import Sequence, Union

import sqlalchemy as sa
from alembic import op

revision: str = '0027'
down_revision: Union[str, None] = '0026'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('compoundstats', schema=None) as batch_op:
        batch_op.add_column(sa.Column('relax_ea_kcal_mol', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('relax_ea_err_kcal_mol', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('relax_ea_apparent', sa.Boolean(), nullable=True))
        batch_op.add_column(sa.Column('relax_ea_measurement_id', sa.Integer(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('compoundstats', schema=None) as batch_op:
        batch_op.drop_column('relax_ea_measurement_id')
        batch_op.drop_column('relax_ea_apparent')
        batch_op.drop_column('relax_ea_err_kcal_mol')
        batch_op.drop_column('relax_ea_kcal_mol')
