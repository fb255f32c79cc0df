"""Attachments are archived and restored (who, when, why in the audit trail); a freeze keeps the images it held (issue 23)

Revision ID: 0029
Revises: 0028
Create Date: 2026-12-03 14:20:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa


revision: str = '0029'
down_revision: Union[str, None] = '0028'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    # Existing attachments are live; existing freezes were made before images were frozen, so they hold none.
    with op.batch_alter_table('attachment', schema=None) as batch_op:
        batch_op.add_column(sa.Column('archived', sa.Boolean(), nullable=False, server_default=sa.false()))
    with op.batch_alter_table('attachment', schema=None) as batch_op:
        batch_op.alter_column('archived', server_default=None)
    with op.batch_alter_table('paperfreezecompound', schema=None) as batch_op:
        batch_op.add_column(sa.Column('attachments', sa.JSON(), nullable=False, server_default='[]'))
    with op.batch_alter_table('paperfreezecompound', schema=None) as batch_op:
        batch_op.alter_column('attachments', server_default=None)


def downgrade() -> None:
    with op.batch_alter_table('paperfreezecompound', schema=None) as batch_op:
        batch_op.drop_column('attachments')
    with op.batch_alter_table('attachment', schema=None) as batch_op:
        batch_op.drop_column('archived')
