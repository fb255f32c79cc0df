"""Notification e-mail follows the inbox's groups: an entry's mail is due when its group's window closes
(mail_due_at) and is claimed once by one process (mailed_at); existing entries have no mail pending

Revision ID: 0036
Revises: 0031
Create Date: 2026-12-04 18:20:00.000000
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import server.models.types


revision: str = '0036'
down_revision: Union[str, None] = '0031'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.add_column(sa.Column('mail_due_at', server.models.types.UTCDateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column('mailed_at', server.models.types.UTCDateTime(timezone=True), nullable=True))
        batch_op.create_index('ix_notification_mail_due', ['mail_due_at'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.drop_index('ix_notification_mail_due')
        batch_op.drop_column('mailed_at')
        batch_op.drop_column('mail_due_at')
