"""verdict code that claims no proof: proven_ferroelectric -> polar_switching_supported

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02 03:30:00

A screening registry gathers evidence; it proves nothing. The top verdict code and its label are
renamed in every stored place they occur: the computed code and the override on each compound, the
stored verdict document (code and label) and the before/after snapshots of audit events (where an
override or a compound snapshot recorded the code). Only exact string values are rewritten, so free
text (reasons, notes) is left as written. Downgrade writes the old code and label back.

The strings are spelled out here rather than imported: a migration must keep meaning what it meant
when it was written, whatever the application's vocabulary later becomes.
"""
from typing import Any, Sequence, Union

from alembic import op
import sqlalchemy as sa


revision: str = '0006'
down_revision: Union[str, None] = '0005'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

OLD_CODE, NEW_CODE = "proven_ferroelectric", "polar_switching_supported"
OLD_LABEL, NEW_LABEL = "Ferroelectric: a polar phase that switches", "Evidence supports a polar phase that switches"
CHUNK = 500

compound = sa.table("compound", sa.column("id", sa.Integer), sa.column("verdict_code", sa.String),
                    sa.column("override_code", sa.String), sa.column("verdict", sa.JSON))
auditevent = sa.table("auditevent", sa.column("id", sa.Integer), sa.column("before", sa.JSON),
                      sa.column("after", sa.JSON))


def _swap(value: Any, mapping: dict[str, str]) -> Any:
    """``value`` with every string that is exactly a key of ``mapping`` replaced (dicts and lists walked)."""
    if isinstance(value, str):
        return mapping.get(value, value)
    if isinstance(value, dict):
        return {k: _swap(v, mapping) for k, v in value.items()}
    if isinstance(value, list):
        return [_swap(v, mapping) for v in value]
    return value


def _rewrite(old_code: str, new_code: str, old_label: str, new_label: str) -> None:
    bind = op.get_bind()
    mapping = {old_code: new_code, old_label: new_label}
    bind.execute(compound.update().where(compound.c.verdict_code == old_code).values(verdict_code=new_code))
    bind.execute(compound.update().where(compound.c.override_code == old_code).values(override_code=new_code))
    for table, columns in ((compound, ("verdict",)), (auditevent, ("before", "after"))):
        mentions = sa.or_(*(sa.cast(table.c[c], sa.Text).like(f"%{old_code}%") for c in columns))
        last_id = 0
        while True:  # bounded chunks, in id order, so a large audit log is not loaded at once
            rows = bind.execute(sa.select(table.c.id, *(table.c[c] for c in columns))
                                .where(mentions, table.c.id > last_id).order_by(table.c.id).limit(CHUNK)).all()
            if not rows:
                break
            for row in rows:
                values = {c: _swap(row._mapping[c], mapping) for c in columns}
                bind.execute(table.update().where(table.c.id == row.id).values(**values))
            last_id = rows[-1].id


def upgrade() -> None:
    _rewrite(OLD_CODE, NEW_CODE, OLD_LABEL, NEW_LABEL)


def downgrade() -> None:
    _rewrite(NEW_CODE, OLD_CODE, NEW_LABEL, OLD_LABEL)
