"""a batch's identity confirmation; a compound's identity status

Revision ID: 0016
Revises: 0022
Create Date: 2026-12-02 14:05:00

``batch`` gains ``identity_confirmed`` (false for every existing batch: nobody has confirmed one yet),
``identity_confirmed_at``, ``identity_confirmed_by`` and ``identity_note``; ``compoundstats`` gains
``identity_status`` (indexed, for the registry filter), filled here as server/services/stats.py computes
it: "unconfirmed" for a compound with live batches, else "no batches".
"""
from typing import Sequence, Union

import sqlalchemy as sa

import server.models.types
from alembic import op

revision: str = '0016'
down_revision: Union[str, None] = '0022'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('batch', schema=None) as batch_op:
        batch_op.add_column(sa.Column('identity_confirmed', sa.Boolean(), nullable=False, server_default=sa.false()))
        batch_op.add_column(sa.Column('identity_confirmed_at', server.models.types.UTCDateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column('identity_confirmed_by', sa.String(length=120), nullable=False,
                                      server_default=''))
        batch_op.add_column(sa.Column('identity_note', sa.Text(), nullable=False, server_default=''))
    with op.batch_alter_table('compoundstats', schema=None) as batch_op:
        batch_op.add_column(sa.Column('identity_status', sa.String(length=20), nullable=False,
                                      server_default='no batches'))
        batch_op.create_index(batch_op.f('ix_compoundstats_identity_status'), ['identity_status'], unique=False)
    if op.get_context().as_sql:
        return
    batch = sa.table("batch", sa.column("compound_id", sa.Integer), sa.column("archived", sa.Boolean))
    stats = sa.table("compoundstats", sa.column("compound_id", sa.Integer), sa.column("identity_status", sa.String))
    with_batches = sa.select(batch.c.compound_id).where(batch.c.archived == sa.false())
    op.get_bind().execute(stats.update().where(stats.c.compound_id.in_(with_batches))
                          .values(identity_status="unconfirmed"))


def downgrade() -> None:
    with op.batch_alter_table('compoundstats', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_compoundstats_identity_status'))
        batch_op.drop_column('identity_status')
    with op.batch_alter_table('batch', schema=None) as batch_op:
        batch_op.drop_column('identity_note')
        batch_op.drop_column('identity_confirmed_by')
        batch_op.drop_column('identity_confirmed_at')
        batch_op.drop_column('identity_confirmed')
