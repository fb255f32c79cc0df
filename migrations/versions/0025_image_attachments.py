"""Image attachments on compounds, batches, samples and measurements (issue 23, item 2)

Revision ID: 0025
Revises: 0024
Create Date: 2026-12-03 09:54:21.918745
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel
import server.models.types


revision: str = '0025'
down_revision: Union[str, None] = '0024'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    op.create_table('attachment',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('target', sqlmodel.sql.sqltypes.AutoString(length=20), nullable=False),
    sa.Column('target_id', sa.Integer(), nullable=False),
    sa.Column('compound_id', sa.Integer(), nullable=False),
    sa.Column('raw_file_id', sa.Integer(), nullable=False),
    sa.Column('sha256', sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
    sa.Column('image_format', sqlmodel.sql.sqltypes.AutoString(length=10), nullable=False),
    sa.Column('width_px', sa.Integer(), nullable=False),
    sa.Column('height_px', sa.Integer(), nullable=False),
    sa.Column('thumbnail', sa.LargeBinary(), nullable=False),
    sa.Column('thumb_width_px', sa.Integer(), nullable=False),
    sa.Column('thumb_height_px', sa.Integer(), nullable=False),
    sa.Column('caption', sqlmodel.sql.sqltypes.AutoString(length=2000), nullable=False),
    sa.Column('magnification', sa.Float(), nullable=True),
    sa.Column('scale_bar_um', sa.Float(), nullable=True),
    sa.Column('polariser_crossed', sa.Boolean(), nullable=True),
    sa.Column('t_K', sa.Float(), nullable=True),
    sa.Column('created_by', sqlmodel.sql.sqltypes.AutoString(length=160), nullable=False),
    sa.Column('created_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.ForeignKeyConstraint(['compound_id'], ['compound.id'], name=op.f('fk_attachment_compound_id_compound')),
    sa.ForeignKeyConstraint(['raw_file_id'], ['rawfile.id'], name=op.f('fk_attachment_raw_file_id_rawfile')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_attachment'))
    )
    with op.batch_alter_table('attachment', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_attachment_compound_id'), ['compound_id'], unique=False)
        batch_op.create_index('ix_attachment_target', ['target', 'target_id'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('attachment', schema=None) as batch_op:
        batch_op.drop_index('ix_attachment_target')
        batch_op.drop_index(batch_op.f('ix_attachment_compound_id'))

    op.drop_table('attachment')
