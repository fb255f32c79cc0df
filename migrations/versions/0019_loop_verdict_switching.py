"""the per-loop verdict of a saturated remanent loop is "switching", not "ferroelectric"

Revision ID: 0019
Revises: 0016
Create Date: 2026-12-02 14:00:00

A single loop shows switching at most: whether the compound is ferroelectric is the compound
verdict's question (a polar structure and PUND switching in one phase; IEEE Std 180-1986; Scott,
J. Phys.: Condens. Matter 20, 021001 (2008)). Stored P-E loop measurements whose verdict is
``ferroelectric`` (column ``measurement.verdict`` and the ``verdict`` key of ``measurement.results``)
are rewritten to ``switching``; the downgrade writes ``ferroelectric`` back on every P-E loop that
says ``switching``. Audit snapshots keep what was stored at the time (they are history).
"""
from typing import Sequence, Union

import sqlalchemy as sa
from alembic import op

revision: str = '0019'
down_revision: Union[str, None] = '0016'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

OLD, NEW = "ferroelectric", "switching"

measurement = sa.table("measurement", sa.column("id", sa.Integer), sa.column("kind", sa.String),
                       sa.column("verdict", sa.String), sa.column("results", sa.JSON))


def _rewrite(old: str, new: str) -> None:
    bind = op.get_bind()
    rows = bind.execute(sa.select(measurement.c.id, measurement.c.results)
                        .where(measurement.c.kind == "pe_loop", measurement.c.verdict == old)).all()
    for mid, results in rows:
        values = {"verdict": new}
        if isinstance(results, dict) and results.get("verdict") == old:
            values["results"] = {**results, "verdict": new}
        bind.execute(measurement.update().where(measurement.c.id == mid).values(**values))


def upgrade() -> None:
    _rewrite(OLD, NEW)


def downgrade() -> None:
    _rewrite(NEW, OLD)
