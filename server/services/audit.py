"""The audit trail: every write adds one AuditEvent in the same transaction as the write."""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session

from ..analysis.results import jsonable
from ..models import AuditEvent


def snapshot(obj: Any, *, exclude: tuple[str, ...] = ("data", "password_hash", "token_hash")) -> dict[str, Any]:
    """A JSON-ready copy of a row's columns (binary and secret columns left out)."""
    out = {}
    for key, value in obj.model_dump().items():
        if key in exclude:
            continue
        out[key] = value.isoformat() if hasattr(value, "isoformat") else jsonable(value)
    return out


def record(
    session: Session,
    *,
    actor: str,
    action: str,
    entity: str,
    code: str = "",
    compound_id: Optional[int] = None,
    before: Optional[dict[str, Any]] = None,
    after: Optional[dict[str, Any]] = None,
) -> AuditEvent:
    event = AuditEvent(
        actor=actor, action=action, entity=entity, entity_code=code, compound_id=compound_id, before=before, after=after
    )
    session.add(event)
    return event
