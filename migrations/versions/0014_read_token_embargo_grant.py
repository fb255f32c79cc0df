"""Read tokens may be granted to see embargoed compounds (off by default)

Revision ID: 0014
Revises: 0013
Create Date: 2026-12-02 04:55:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa


revision: str = '0014'
down_revision: Union[str, None] = '0013'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('apitoken') as batch:
        batch.add_column(sa.Column('sees_embargoed', sa.Boolean(), nullable=False, server_default=sa.false()))


def downgrade() -> None:
    with op.batch_alter_table('apitoken') as batch:
        batch.drop_column('sees_embargoed')
