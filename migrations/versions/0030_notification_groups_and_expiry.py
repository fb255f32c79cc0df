"""Notification groups and expiry: an entry counts the like events it groups (count, last_at, parts);
existing entries become single events (count 1, last_at = created_at, no parts)

Revision ID: 0030
Revises: 0029
Create Date: 2026-12-03 14:11:11.375076
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel
import server.models.types


revision: str = '0030'
down_revision: Union[str, None] = '0029'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.add_column(sa.Column('count', sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column('last_at', server.models.types.UTCDateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column('parts', sa.JSON(), nullable=True))
    op.execute("UPDATE notification SET count = 1, last_at = created_at, parts = '[]'")
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.alter_column('count', existing_type=sa.Integer(), nullable=False)
        batch_op.alter_column('last_at', existing_type=server.models.types.UTCDateTime(timezone=True), nullable=False)
        batch_op.alter_column('parts', existing_type=sa.JSON(), nullable=False)
        batch_op.drop_index(batch_op.f('ix_notification_user_created'))
        batch_op.create_index('ix_notification_last', ['last_at'], unique=False)
        batch_op.create_index('ix_notification_user_last', ['user_id', 'last_at'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.drop_index('ix_notification_user_last')
        batch_op.drop_index('ix_notification_last')
        batch_op.create_index(batch_op.f('ix_notification_user_created'), ['user_id', 'created_at'], unique=False)
        batch_op.drop_column('parts')
        batch_op.drop_column('last_at')
        batch_op.drop_column('count')
