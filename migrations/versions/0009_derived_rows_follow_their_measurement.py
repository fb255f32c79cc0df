"""derived rows follow their measurement: crystalphase.archived; archived measurements' rows archived

Revision ID: 0009
Revises: 0006
Create Date: 2026-12-02 03:40:00

A crystal phase now carries ``archived`` like the barrier rows do. Rows derived from a
measurement that is already archived (the crystal phase of a structure, the barrier of a
rate table) are archived with it, which repairs data written before derived rows followed
their measurement.
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa


revision: str = '0009'
down_revision: Union[str, None] = '0006'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('crystalphase', schema=None) as batch_op:
        batch_op.add_column(sa.Column('archived', sa.Boolean(), nullable=False, server_default=sa.false()))
    with op.batch_alter_table('crystalphase', schema=None) as batch_op:
        batch_op.alter_column('archived', server_default=None)
    archived_ids = "SELECT id FROM measurement WHERE archived = :yes"
    for table in ('crystalphase', 'barrierestimate'):
        op.execute(sa.text(f"UPDATE {table} SET archived = :yes WHERE measurement_id IN ({archived_ids})")
                   .bindparams(yes=True))


def downgrade() -> None:
    with op.batch_alter_table('crystalphase', schema=None) as batch_op:
        batch_op.drop_column('archived')
