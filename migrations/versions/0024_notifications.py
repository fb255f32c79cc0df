"""Notifications: the inbox, follows of compounds and each account's event preferences

Revision ID: 0024
Revises: 0020
Create Date: 2026-12-03 09:42:51.788412
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel
import server.models.types


revision: str = '0024'
down_revision: Union[str, None] = '0020'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    op.create_table('notificationpreference',
    sa.Column('user_id', sa.Integer(), nullable=False),
    sa.Column('muted', sa.JSON(), nullable=False),
    sa.Column('email', sqlmodel.sql.sqltypes.AutoString(length=254), nullable=False),
    sa.Column('email_events', sa.JSON(), nullable=False),
    sa.Column('updated_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['user_id'], ['user.id'], name=op.f('fk_notificationpreference_user_id_user')),
    sa.PrimaryKeyConstraint('user_id', name=op.f('pk_notificationpreference'))
    )
    op.create_table('compoundfollow',
    sa.Column('user_id', sa.Integer(), nullable=False),
    sa.Column('compound_id', sa.Integer(), nullable=False),
    sa.Column('created_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['compound_id'], ['compound.id'], name=op.f('fk_compoundfollow_compound_id_compound')),
    sa.ForeignKeyConstraint(['user_id'], ['user.id'], name=op.f('fk_compoundfollow_user_id_user')),
    sa.PrimaryKeyConstraint('user_id', 'compound_id', name=op.f('pk_compoundfollow'))
    )
    with op.batch_alter_table('compoundfollow', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_compoundfollow_compound_id'), ['compound_id'], unique=False)

    op.create_table('notification',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('user_id', sa.Integer(), nullable=False),
    sa.Column('event', sqlmodel.sql.sqltypes.AutoString(length=20), nullable=False),
    sa.Column('compound_id', sa.Integer(), nullable=True),
    sa.Column('text', sqlmodel.sql.sqltypes.AutoString(length=400), nullable=False),
    sa.Column('url', sqlmodel.sql.sqltypes.AutoString(length=300), nullable=False),
    sa.Column('actor', sqlmodel.sql.sqltypes.AutoString(length=160), nullable=False),
    sa.Column('created_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.Column('read_at', server.models.types.UTCDateTime(timezone=True), nullable=True),
    sa.ForeignKeyConstraint(['compound_id'], ['compound.id'], name=op.f('fk_notification_compound_id_compound')),
    sa.ForeignKeyConstraint(['user_id'], ['user.id'], name=op.f('fk_notification_user_id_user')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_notification'))
    )
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_notification_compound_id'), ['compound_id'], unique=False)
        batch_op.create_index('ix_notification_user_created', ['user_id', 'created_at'], unique=False)
        batch_op.create_index('ix_notification_user_read', ['user_id', 'read_at'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('notification', schema=None) as batch_op:
        batch_op.drop_index('ix_notification_user_read')
        batch_op.drop_index('ix_notification_user_created')
        batch_op.drop_index(batch_op.f('ix_notification_compound_id'))

    op.drop_table('notification')
    with op.batch_alter_table('compoundfollow', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_compoundfollow_compound_id'))

    op.drop_table('compoundfollow')
    op.drop_table('notificationpreference')
