"""Indexes for the registry's sorts, so keyset pages seek instead of sorting the table (issue 21, target 3)

Revision ID: 0028
Revises: 0027
Create Date: 2026-12-03 14:15:00
"""
from typing import Sequence, Union

from alembic import op


revision: str = '0028'
down_revision: Union[str, None] = '0027'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

STATS_COLUMNS = ('n_batches', 'n_measurements', 'barrier_measured_kcal_mol', 'barrier_computed_kcal_mol',
                 'pr_max_uC_cm2', 'ec_kV_cm', 't_peak_K')
COMPOUND_INDEXES = (('ix_compound_mw_number', ['mw', 'number']), ('ix_compound_label_number', ['label', 'number']),
                    ('ix_compound_created_at_number', ['created_at', 'number']))


def upgrade() -> None:
    for column in STATS_COLUMNS:
        op.create_index(op.f(f'ix_compoundstats_{column}'), 'compoundstats', [column], unique=False)
    for name, columns in COMPOUND_INDEXES:
        op.create_index(name, 'compound', columns, unique=False)


def downgrade() -> None:
    for name, _ in reversed(COMPOUND_INDEXES):
        op.drop_index(name, table_name='compound')
    for column in reversed(STATS_COLUMNS):
        op.drop_index(op.f(f'ix_compoundstats_{column}'), table_name='compoundstats')
