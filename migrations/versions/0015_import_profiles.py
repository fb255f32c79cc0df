"""Import profiles (versioned), measurements that name the profile and block they were read with, tokens bound
to a profile; the live-copy index counts the block, so one file may give several measurements

Revision ID: 0015
Revises: 0023
Create Date: 2026-12-02 13:33:07
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel
import server.models.types


revision: str = '0015'
down_revision: Union[str, None] = '0023'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    op.create_table('importprofile',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sqlmodel.sql.sqltypes.AutoString(length=60), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('kind', sqlmodel.sql.sqltypes.AutoString(length=30), nullable=False),
    sa.Column('spec', sa.JSON(), nullable=False),
    sa.Column('created_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.Column('created_by', sqlmodel.sql.sqltypes.AutoString(length=120), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_importprofile')),
    sa.UniqueConstraint('name', 'version', name='uq_importprofile_name_version')
    )
    with op.batch_alter_table('importprofile', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_importprofile_name'), ['name'], unique=False)

    with op.batch_alter_table('apitoken', schema=None) as batch_op:
        batch_op.add_column(sa.Column('profile', sqlmodel.sql.sqltypes.AutoString(length=60), nullable=False, server_default=''))

    with op.batch_alter_table('measurement', schema=None) as batch_op:
        batch_op.add_column(sa.Column('profile_name', sqlmodel.sql.sqltypes.AutoString(length=60), nullable=False, server_default=''))
        batch_op.add_column(sa.Column('profile_version', sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column('block', sa.Integer(), nullable=False, server_default='0'))
        batch_op.drop_index('uq_measurement_live_sample_sha_kind', sqlite_where=sa.text('NOT archived AND superseded_by_id IS NULL'), postgresql_where=sa.text('NOT archived AND superseded_by_id IS NULL'))
        batch_op.create_index('uq_measurement_live_sample_sha_kind', ['sample_id', 'sha256', 'kind', 'block'], unique=True, sqlite_where=sa.text('NOT archived AND superseded_by_id IS NULL'), postgresql_where=sa.text('NOT archived AND superseded_by_id IS NULL'))



def downgrade() -> None:
    with op.batch_alter_table('measurement', schema=None) as batch_op:
        batch_op.drop_index('uq_measurement_live_sample_sha_kind', sqlite_where=sa.text('NOT archived AND superseded_by_id IS NULL'), postgresql_where=sa.text('NOT archived AND superseded_by_id IS NULL'))
        batch_op.create_index('uq_measurement_live_sample_sha_kind', ['sample_id', 'sha256', 'kind'], unique=True, sqlite_where=sa.text('NOT archived AND superseded_by_id IS NULL'), postgresql_where=sa.text('NOT archived AND superseded_by_id IS NULL'))
        batch_op.drop_column('block')
        batch_op.drop_column('profile_version')
        batch_op.drop_column('profile_name')

    with op.batch_alter_table('apitoken', schema=None) as batch_op:
        batch_op.drop_column('profile')

    with op.batch_alter_table('importprofile', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_importprofile_name'))

    op.drop_table('importprofile')
