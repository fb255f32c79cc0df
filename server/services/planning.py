"""Target compounds: their plan (state, rationale, priority, assignee), the claim, and the planning list.

The plan is written inside the registering or updating transaction of ``services/registry.py`` (one
commit there); :func:`claim` is its own use case. The life state the views show is derived
(``models.planning.life_state``) and kept in ``CompoundStats.life_state`` by ``stats.refresh``.
"""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session, select

from ..access import Actor, structure_visible
from ..errors import InputError
from ..models import Compound, CompoundPlan, CompoundStats, utcnow
from ..models.planning import LIFE_STATES, PLAN_STATES
from . import audit, notifications, stats


def check_state(state: str, *, reason: Optional[str], current: Optional[CompoundPlan]) -> None:
    """Refuse a state a person may not set (422 naming the field)."""
    if state == "made":
        raise InputError("'made' follows from the compound's batches: log a batch instead", field="state")
    if state not in PLAN_STATES:
        raise InputError(f"state must be one of {', '.join(PLAN_STATES)}", field="state")
    if state == "abandoned" and not (reason or "").strip() and not (current and current.reason.strip()):
        raise InputError("say why the target is abandoned", field="reason")


def new_plan(compound: Compound, *, state: str, rationale: str, priority: Optional[int], assignee: str,
             actor: str) -> CompoundPlan:
    """The plan row of a target registered with ``state`` (the caller adds it and commits)."""
    check_new_state(state)
    return CompoundPlan(compound_id=compound.id, state=state, rationale=rationale.strip(),
                        priority=priority or 3, assignee=assignee.strip(), updated_by=actor)


def check_new_state(state: str) -> None:
    """A new target starts planned or in synthesis."""
    if state == "abandoned":
        raise InputError("a new target starts planned or in synthesis", field="state")
    check_state(state, reason=None, current=None)


PLAN_FIELDS = ("state", "reason", "rationale", "priority", "assignee")


def apply_changes(session: Session, compound: Compound, changes: dict[str, Any], *, actor: str) -> Optional[CompoundPlan]:
    """Apply the plan fields of a PATCH to the compound's plan (created if it had none); no commit."""
    wanted = {k: changes.pop(k) for k in PLAN_FIELDS if k in changes}
    wanted = {k: v for k, v in wanted.items() if v is not None}
    if not wanted:
        return None
    plan = session.get(CompoundPlan, compound.id)
    if "state" in wanted:
        check_state(wanted["state"], reason=wanted.get("reason"), current=plan)
    elif plan is None:
        raise InputError("this compound has no plan: give a state (planned or in_synthesis) first", field="state")
    if plan is None:
        plan = CompoundPlan(compound_id=compound.id)
    assignee_before = plan.assignee or ""
    for key, value in wanted.items():
        setattr(plan, key, value.strip() if isinstance(value, str) else value)
    if plan.state != "abandoned" and "reason" not in wanted:
        plan.reason = ""
    plan.updated_at, plan.updated_by = utcnow(), actor
    session.add(plan)
    notifications.assigned(session, compound, before=assignee_before, after=plan.assignee or "", actor=actor)
    return plan


def plan_of(session: Session, compound: Compound) -> Optional[CompoundPlan]:
    return session.get(CompoundPlan, compound.id)


def state_of(session: Session, compound: Compound) -> str:
    row = session.get(CompoundStats, compound.id)
    return row.life_state if row is not None else "registered"


def claim(*, session: Session, compound: Compound, actor: Actor) -> CompoundPlan:
    """A chemist takes a target: assignee = the caller, state in synthesis; commits once, audited."""
    plan = session.get(CompoundPlan, compound.id)
    if plan is None or plan.state == "abandoned":
        raise InputError(f"{compound.code} is not a planned target", field="code")
    if state_of(session, compound) == "made":
        raise InputError(f"{compound.code} is made already", field="code")
    before = audit.snapshot(plan)
    plan.assignee = actor.name
    plan.state = "in_synthesis"
    plan.updated_at, plan.updated_by = utcnow(), actor.label
    session.add(plan)
    audit.record(session, actor=actor.label, action="compound.claim", entity="compound", code=compound.code,
                 compound_id=compound.id, before=before, after=audit.snapshot(plan))
    stats.refresh(session, compound)
    session.commit()
    session.refresh(plan)
    return plan


def targets(session: Session, *, actor: Optional[Actor], states: tuple[str, ...] = ("planned", "in_synthesis")
            ) -> list[tuple[Compound, CompoundPlan, str]]:
    """Live target compounds in ``states``, by priority then code, as ``actor`` may list them: an
    embargoed target the caller may not see is left out (its rationale and place say what it is)."""
    for s in states:
        if s not in LIFE_STATES:
            raise InputError(f"state must be one of {', '.join(LIFE_STATES)}", field="state")
    rows = session.exec(
        select(Compound, CompoundPlan, CompoundStats.life_state)
        .join(CompoundPlan, CompoundPlan.compound_id == Compound.id)
        .join(CompoundStats, CompoundStats.compound_id == Compound.id)
        .where(Compound.archived == False, CompoundStats.life_state.in_(states), structure_visible(actor))  # noqa: E712
        .order_by(CompoundPlan.priority, Compound.number)
    ).all()
    return [(c, p, s) for c, p, s in rows]


def queue_estimate_of_target(session: Session, compound: Compound, *, actor: str) -> None:
    """Queue a GFN2-xTB estimate of a new target in the registering transaction (no commit), when its
    structure can be estimated; one that cannot is listed with the reason (:func:`estimate_status`)."""
    from . import estimates  # estimates imports registry, which imports this module

    try:
        estimates.check_estimable(compound.smiles)
    except InputError:
        return
    if estimates.active_estimate(session, compound) is None:
        from ..jobs import queue

        queue.add_job(session, kind=estimates.KIND, params=estimates.job_params(compound, True),
                      compound_id=compound.id, actor=actor)
