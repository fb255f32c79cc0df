"""NMR conditions on barriers: spectrometer frequency, nucleus, solvent

Revision ID: 0011
Revises: 0009
Create Date: 2026-12-02 03:30:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel


revision: str = '0011'
down_revision: Union[str, None] = '0009'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('barrierestimate') as batch:
        batch.add_column(sa.Column('spectrometer_MHz', sa.Float(), nullable=True))
        batch.add_column(sa.Column('nucleus', sqlmodel.sql.sqltypes.AutoString(length=10), nullable=False,
                                   server_default=''))
        batch.add_column(sa.Column('solvent', sqlmodel.sql.sqltypes.AutoString(length=80), nullable=False,
                                   server_default=''))


def downgrade() -> None:
    with op.batch_alter_table('barrierestimate') as batch:
        batch.drop_column('solvent')
        batch.drop_column('nucleus')
        batch.drop_column('spectrometer_MHz')
