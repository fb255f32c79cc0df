"""Code series: compound numbers and batch numbers, allocated atomically.

One statement reads and advances a series: ``INSERT ... ON CONFLICT (name) DO UPDATE SET
n = n + 1 RETURNING n`` (an "upsert", SQLite 3.35+ and PostgreSQL 9.5+). It runs inside the
transaction that stores the new compound or batch, so

* the counter row stays write-locked until that transaction ends: a concurrent registration
  waits for it (PostgreSQL row lock; SQLite's single writer, within the busy timeout) and then
  reads the advanced value, never the same one;
* a registration that fails later (a duplicate structure, an input error) rolls its increment
  back with everything else, so failed requests leave no gaps.

``max(number) + 1`` with retries, what this replaced, let concurrent writers pick the same
number and gave up after a few collisions (issue 12, item 17).
"""

from __future__ import annotations

from sqlalchemy.dialects import postgresql, sqlite
from sqlmodel import Session

from ..models import CodeCounter

COMPOUND_SERIES = "compound"


def batch_series(compound_code: str) -> str:
    """The series of batch numbers of one compound."""
    return f"batch:{compound_code}"


def allocate(session: Session, series: str) -> int:
    """The next number of ``series`` (1 for a new series), taken in the session's transaction."""
    dialect = session.get_bind().dialect.name
    insert = {"sqlite": sqlite.insert, "postgresql": postgresql.insert}[dialect]
    stmt = insert(CodeCounter).values(name=series, n=1)
    stmt = stmt.on_conflict_do_update(index_elements=[CodeCounter.name], set_={"n": CodeCounter.n + 1})
    return int(session.execute(stmt.returning(CodeCounter.n)).scalar_one())
