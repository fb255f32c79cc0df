"""the conditions of a compound's largest Pr: temperature, field amplitude, the loop

Revision ID: 0023
Revises: 0021
Create Date: 2026-12-02 13:40:00

``compoundstats`` gains ``pr_max_t_K``, ``pr_max_emax_kV_cm`` and ``pr_max_measurement_id``, filled
here for existing rows from the loop that gave ``pr_max_uC_cm2`` (the live ``pe_loop`` measurement
judged ferroelectric (the name of a saturated switching loop until migration 0019, which runs after
this one) with the largest Pr, the first of equals), as server/kinds/pe_loop.py does for
new measurements.
"""
from typing import Sequence, Union

import sqlalchemy as sa
from alembic import op

revision: str = '0023'
down_revision: Union[str, None] = '0021'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    with op.batch_alter_table('compoundstats', schema=None) as batch_op:
        batch_op.add_column(sa.Column('pr_max_t_K', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('pr_max_emax_kV_cm', sa.Float(), nullable=True))
        batch_op.add_column(sa.Column('pr_max_measurement_id', sa.Integer(), nullable=True))
    if op.get_context().as_sql:
        return
    measurement = sa.table("measurement", sa.column("id", sa.Integer), sa.column("batch_id", sa.Integer),
                           sa.column("kind", sa.String), sa.column("verdict", sa.String),
                           sa.column("archived", sa.Boolean), sa.column("superseded_by_id", sa.Integer),
                           sa.column("temperature_K", sa.Float), sa.column("results", sa.JSON))
    batch = sa.table("batch", sa.column("id", sa.Integer), sa.column("compound_id", sa.Integer))
    stats = sa.table("compoundstats", sa.column("compound_id", sa.Integer), sa.column("pr_max_t_K", sa.Float),
                     sa.column("pr_max_emax_kV_cm", sa.Float), sa.column("pr_max_measurement_id", sa.Integer))
    bind = op.get_bind()
    rows = bind.execute(
        sa.select(batch.c.compound_id, measurement.c.id, measurement.c.temperature_K, measurement.c.results)
        .join(batch, batch.c.id == measurement.c.batch_id)
        .where(measurement.c.kind == "pe_loop", measurement.c.verdict == "ferroelectric",
               measurement.c.archived == sa.false(), measurement.c.superseded_by_id.is_(None))
        .order_by(measurement.c.id)).all()
    best: dict[int, tuple] = {}
    for compound_id, mid, t_K, results in rows:
        pr = (results or {}).get("pr_uC_cm2") or 0
        if compound_id not in best or pr > best[compound_id][0]:
            best[compound_id] = (pr, mid, t_K, (results or {}).get("emax_kV_cm"))
    for compound_id, (_, mid, t_K, emax) in best.items():
        bind.execute(stats.update().where(stats.c.compound_id == compound_id)
                     .values(pr_max_t_K=t_K, pr_max_emax_kV_cm=emax, pr_max_measurement_id=mid))


def downgrade() -> None:
    with op.batch_alter_table('compoundstats', schema=None) as batch_op:
        batch_op.drop_column('pr_max_measurement_id')
        batch_op.drop_column('pr_max_emax_kV_cm')
        batch_op.drop_column('pr_max_t_K')
