"""Index job(created_by, state): per-account job quotas and fair claiming count by it

Revision ID: 0020
Revises: 0019
Create Date: 2026-12-02 14:10:00
"""
from typing import Sequence, Union

from alembic import op


revision: str = '0020'
down_revision: Union[str, None] = '0019'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    op.create_index('ix_job_created_by_state', 'job', ['created_by', 'state'])


def downgrade() -> None:
    op.drop_index('ix_job_created_by_state', table_name='job')
