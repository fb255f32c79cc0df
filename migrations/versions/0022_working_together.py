"""Working together: comment threads and paper freezes (issue 23)

Revision ID: 0022
Revises: 0017
Create Date: 2026-12-02 13:37:23.336526
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa
import sqlmodel
import server.models.types


revision: str = '0022'
down_revision: Union[str, None] = '0017'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:

    op.create_table('comment',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('target', sqlmodel.sql.sqltypes.AutoString(length=20), nullable=False),
    sa.Column('target_id', sa.Integer(), nullable=False),
    sa.Column('compound_id', sa.Integer(), nullable=False),
    sa.Column('body', sa.Text(), nullable=False),
    sa.Column('created_by', sqlmodel.sql.sqltypes.AutoString(length=160), nullable=False),
    sa.Column('author_user_id', sa.Integer(), nullable=True),
    sa.Column('mentions', sa.JSON(), nullable=False),
    sa.Column('created_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.Column('edited_at', server.models.types.UTCDateTime(timezone=True), nullable=True),
    sa.Column('archived', sa.Boolean(), nullable=False),
    sa.ForeignKeyConstraint(['author_user_id'], ['user.id'], name=op.f('fk_comment_author_user_id_user')),
    sa.ForeignKeyConstraint(['compound_id'], ['compound.id'], name=op.f('fk_comment_compound_id_compound')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_comment'))
    )
    with op.batch_alter_table('comment', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_comment_compound_id'), ['compound_id'], unique=False)
        batch_op.create_index('ix_comment_target', ['target', 'target_id'], unique=False)

    op.create_table('paperfreeze',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False),
    sa.Column('created_by', sqlmodel.sql.sqltypes.AutoString(length=160), nullable=False),
    sa.Column('created_at', server.models.types.UTCDateTime(timezone=True), nullable=False),
    sa.Column('dataset_doi', sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False),
    sa.Column('depositions', sa.JSON(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_paperfreeze')),
    sa.UniqueConstraint('name', name=op.f('uq_paperfreeze_name'))
    )
    op.create_table('paperfreezecompound',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('freeze_id', sa.Integer(), nullable=False),
    sa.Column('compound_id', sa.Integer(), nullable=False),
    sa.Column('verdict', sa.JSON(), nullable=False),
    sa.Column('measurements', sa.JSON(), nullable=False),
    sa.ForeignKeyConstraint(['compound_id'], ['compound.id'], name=op.f('fk_paperfreezecompound_compound_id_compound')),
    sa.ForeignKeyConstraint(['freeze_id'], ['paperfreeze.id'], name=op.f('fk_paperfreezecompound_freeze_id_paperfreeze')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_paperfreezecompound')),
    sa.UniqueConstraint('freeze_id', 'compound_id', name='uq_paperfreezecompound')
    )
    with op.batch_alter_table('paperfreezecompound', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_paperfreezecompound_compound_id'), ['compound_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_paperfreezecompound_freeze_id'), ['freeze_id'], unique=False)


def downgrade() -> None:

    with op.batch_alter_table('comment', schema=None) as batch_op:
        batch_op.drop_index('ix_comment_target')
        batch_op.drop_index(batch_op.f('ix_comment_compound_id'))

    op.drop_table('comment')

    with op.batch_alter_table('paperfreezecompound', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_paperfreezecompound_freeze_id'))
        batch_op.drop_index(batch_op.f('ix_paperfreezecompound_compound_id'))

    op.drop_table('paperfreezecompound')
    op.drop_table('paperfreeze')
