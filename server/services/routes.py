"""Synthesis routes, lineage and reagents: a batch's ordered steps, the batches it was made from, every
batch made from it downstream, and the hazard data the group entered for each reagent.

Hazard data are never filled in here: a reagent without entered data shows ``hazards.NO_DATA``.
Routes are validated whole before anything is stored (amounts by dimension, temperatures, times,
precursors that exist and make no cycle); each write commits once with an AuditEvent whose before/after
hold the whole route, so a replaced route stays in the history.

The embargo: a route's reagents and steps spell out the structure, and so does being made from a given
intermediate; for a caller who may not see an embargoed compound, its batches' routes are withheld and its
batches are left out of other batches' lineage.
"""

from __future__ import annotations

import re
from collections import deque
from typing import Any, Optional

from sqlalchemy import delete, func
from sqlmodel import Session, select

from .. import hazards
from ..access import Actor, may_see_structure
from ..errors import InputError
from ..ingest.conditions import parse_quantity
from ..ingest.units import UNIT_PARSE_ERRORS, normalise_unit_text, parse_unit
from ..models import Batch, BatchPrecursor, Compound, Reagent, SynthesisStep, utcnow
from ..models.planning import ReagentCreate, ReagentUpdate, RouteIn, RouteStepIn
from . import audit
from .errors import Duplicate, NotFound

#: What an amount may be: (dimension name, the unit it is stored in).
AMOUNT_UNITS = (("amount", "mmol"), ("mass", "mg"), ("volume", "mL"))
_AMOUNT_RE = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*")
#: Lineage walks stop after this many batches (bounded work per request).
MAX_LINEAGE = 2000


# --- reagents -------------------------------------------------------------------------------------


def _hazard_fields(data: dict[str, Any]) -> dict[str, Any]:
    out = dict(data)
    try:
        if "hazard_codes" in out and out["hazard_codes"] is not None:
            out["hazard_codes"] = hazards.check_hazard_codes(out["hazard_codes"])
    except ValueError as exc:
        raise InputError(str(exc), field="hazard_codes") from exc
    try:
        if "pictograms" in out and out["pictograms"] is not None:
            out["pictograms"] = hazards.check_pictograms(out["pictograms"])
    except ValueError as exc:
        raise InputError(str(exc), field="pictograms") from exc
    if out.get("smiles"):
        from ..chem import identity

        out["smiles"] = identity.identify(identity.parse_structure(out["smiles"])).smiles
    return out


def _entered(r: Reagent) -> bool:
    return bool(r.hazard_codes or r.pictograms or r.hazard_statements.strip())


def reagent_read(r: Reagent) -> dict[str, Any]:
    entered = _entered(r)
    return {"id": r.id, "name": r.name, "smiles": r.smiles, "hazard_codes": list(r.hazard_codes),
            "hazard_statements": r.hazard_statements, "pictograms": list(r.pictograms), "sds_source": r.sds_source,
            "hazard_data_entered": entered, "notice": "" if entered else hazards.NO_DATA,
            "cautions": [c.__dict__ for c in hazards.cautions_for_structure(r.smiles)],
            "entered_by": r.entered_by, "entered_at": r.entered_at}


def create_reagent(*, session: Session, data: ReagentCreate, actor: str) -> Reagent:
    fields = _hazard_fields(data.model_dump())
    name = fields["name"].strip()
    if _find_reagent(session, name) is not None:
        raise Duplicate(f"reagent {name!r} is in the table already", existing=name)
    r = Reagent(**{**fields, "name": name})
    if _entered(r):
        r.entered_by, r.entered_at = actor, utcnow()
    session.add(r)
    session.flush()
    audit.record(session, actor=actor, action="reagent.create", entity="reagent", code=r.name, after=audit.snapshot(r))
    session.commit()
    session.refresh(r)
    return r


def update_reagent(*, session: Session, reagent: Reagent, data: ReagentUpdate, actor: str) -> Reagent:
    before = audit.snapshot(reagent)
    fields = _hazard_fields({k: v for k, v in data.model_dump(exclude_unset=True).items() if v is not None})
    for key, value in fields.items():
        setattr(reagent, key, value.strip() if isinstance(value, str) else value)
    if any(k in fields for k in ("hazard_codes", "pictograms", "hazard_statements", "sds_source")):
        reagent.entered_by, reagent.entered_at = actor, utcnow()
    session.add(reagent)
    audit.record(session, actor=actor, action="reagent.update", entity="reagent", code=reagent.name, before=before,
                 after=audit.snapshot(reagent))
    session.commit()
    session.refresh(reagent)
    return reagent


def list_reagents(session: Session) -> list[Reagent]:
    return list(session.exec(select(Reagent).order_by(Reagent.name)).all())


def get_reagent(session: Session, reagent_id: int) -> Reagent:
    r = session.get(Reagent, reagent_id)
    if r is None:
        raise NotFound(f"no reagent {reagent_id}")
    return r


def _find_reagent(session: Session, name: str) -> Optional[Reagent]:
    return session.exec(select(Reagent).where(func.lower(Reagent.name) == name.strip().lower())).first()


# --- routes ---------------------------------------------------------------------------------------


def parse_amount(text: str, *, field: str) -> tuple[float, str, str]:
    """'2.5 mmol' -> (2.5, 'mmol', 'amount'); a mass goes to mg, a volume to mL; anything else is a 422."""
    m = _AMOUNT_RE.fullmatch(text or "")
    if m is None or not m.group(2):
        raise InputError(f"'{text}' is not a number with a unit; write e.g. '2.5 mmol', '120 mg' or '3 mL'",
                         field=field)
    try:
        given = parse_unit(normalise_unit_text(m.group(2)))
    except UNIT_PARSE_ERRORS as exc:
        raise InputError(f"'{m.group(2)}' is not a unit; write e.g. '2.5 mmol', '120 mg' or '3 mL'", field=field) from exc
    for dimension, unit in AMOUNT_UNITS:
        if given.dimensionality == parse_unit(unit).dimensionality:
            value = parse_quantity(text, field=field, unit=unit, example=f"1 {unit}")
            return value, unit, dimension
    raise InputError(f"'{text}' is not an amount of substance, a mass or a volume", field=field)


def _upstream_reaches(session: Session, start_ids: list[int], target_id: int) -> bool:
    """Whether ``target_id`` lies upstream of (or is one of) ``start_ids``, following recorded precursors."""
    seen, todo = set(), deque(start_ids)
    while todo and len(seen) < MAX_LINEAGE:
        bid = todo.popleft()
        if bid == target_id:
            return True
        if bid in seen:
            continue
        seen.add(bid)
        todo.extend(session.exec(select(BatchPrecursor.precursor_id).where(BatchPrecursor.batch_id == bid)).all())
    return False


def _steps_from(data: RouteIn, session: Session, batch: Batch) -> list[SynthesisStep]:
    steps = []
    for i, s in enumerate(data.steps):
        uses = []
        for j, u in enumerate(s.reagents):
            field = f"steps[{i}].reagents[{j}].amount"
            value, unit, dim = parse_amount(u.amount, field=field) if u.amount else (None, None, None)
            known = _find_reagent(session, u.reagent)
            uses.append({"reagent": u.reagent.strip(), "reagent_id": known.id if known else None,
                         "smiles": u.smiles.strip(), "amount": u.amount.strip() if u.amount else None,
                         "amount_value": value, "amount_unit": unit, "amount_dimension": dim,
                         "equivalents": u.equivalents})
        t_K = parse_quantity(s.temperature, field=f"steps[{i}].temperature", unit="K", example="80 degC",
                             temperature=True, positive=False) if s.temperature else None
        time_h = parse_quantity(s.time, field=f"steps[{i}].time", unit="h", example="12 h") if s.time else None
        steps.append(SynthesisStep(batch_id=batch.id, position=i + 1, description=s.description.strip(), reagents=uses,
                                   solvent=s.solvent.strip(), temperature_K=t_K, time_h=time_h, yield_pct=s.yield_pct))
    return steps


def _snapshot(session: Session, batch: Batch) -> dict[str, Any]:
    steps = session.exec(select(SynthesisStep).where(SynthesisStep.batch_id == batch.id)
                         .order_by(SynthesisStep.position)).all()
    pre = session.exec(select(Batch.code).join(BatchPrecursor, BatchPrecursor.precursor_id == Batch.id)
                       .where(BatchPrecursor.batch_id == batch.id).order_by(Batch.code)).all()
    return {"steps": [audit.snapshot(s) for s in steps], "precursors": list(pre)}


def _record_route_change(session: Session, batch: Batch, before: dict[str, Any], actor: str, *,
                         action: str = "batch.route", extra: Optional[dict[str, Any]] = None) -> Batch:
    """The one tail of every route change: flush, audit before/after, commit, refresh."""
    session.flush()
    audit.record(session, actor=actor, action=action, entity="batch", code=batch.code,
                 compound_id=batch.compound_id, before=before, after={**_snapshot(session, batch), **(extra or {})})
    session.commit()
    session.refresh(batch)
    return batch


def set_route(*, session: Session, batch: Batch, data: RouteIn, actor: str) -> Batch:
    """Replace a batch's route and precursors (validated whole first; one commit, audited)."""
    steps = _steps_from(data, session, batch)
    precursor_ids = []
    for i, code in enumerate(data.precursors):
        p = session.exec(select(Batch).where(Batch.code == code.strip())).first()
        if p is None:
            raise InputError(f"no batch {code}", field=f"precursors[{i}]")
        if p.id == batch.id or _upstream_reaches(session, [p.id], batch.id):
            raise InputError(f"{code} is made from {batch.code} (directly or further up): a batch cannot be its "
                             "own precursor", field=f"precursors[{i}]")
        if p.id not in precursor_ids:
            precursor_ids.append(p.id)
    before = _snapshot(session, batch)
    session.exec(delete(SynthesisStep).where(SynthesisStep.batch_id == batch.id))
    session.exec(delete(BatchPrecursor).where(BatchPrecursor.batch_id == batch.id))
    session.flush()
    session.add_all(steps)
    session.add_all(BatchPrecursor(batch_id=batch.id, precursor_id=pid) for pid in precursor_ids)
    return _record_route_change(session, batch, before, actor)


def copy_route(*, session: Session, batch: Batch, source: Batch, actor: str) -> Batch:
    """Use an earlier batch's steps as the template of this one's (yields left empty: they are the old
    batch's); precursors are not copied (lineage belongs to the batch). Refused if the batch has steps."""
    if source.id == batch.id:
        raise InputError("choose another batch as the template", field="source")
    if session.exec(select(SynthesisStep.id).where(SynthesisStep.batch_id == batch.id)).first() is not None:
        raise InputError(f"{batch.code} has a route already; replace it with PUT", field="source")
    src = session.exec(select(SynthesisStep).where(SynthesisStep.batch_id == source.id)
                       .order_by(SynthesisStep.position)).all()
    if not src:
        raise InputError(f"{source.code} has no recorded route", field="source")
    before = _snapshot(session, batch)
    session.add_all(SynthesisStep(batch_id=batch.id, position=s.position, description=s.description,
                                  reagents=[dict(u) for u in s.reagents], solvent=s.solvent,
                                  temperature_K=s.temperature_K, time_h=s.time_h, yield_pct=None) for s in src)
    return _record_route_change(session, batch, before, actor, action="batch.route_copy",
                                extra={"template": source.code})


def _walk(session: Session, batch: Batch, *, upstream: bool) -> list[tuple[Batch, int]]:
    seen: dict[int, int] = {}
    todo = deque([(batch.id, 0)])
    while todo and len(seen) < MAX_LINEAGE:
        bid, depth = todo.popleft()
        if upstream:
            nxt = session.exec(select(BatchPrecursor.precursor_id).where(BatchPrecursor.batch_id == bid)).all()
        else:
            nxt = session.exec(select(BatchPrecursor.batch_id).where(BatchPrecursor.precursor_id == bid)).all()
        for n in nxt:
            if n not in seen and n != batch.id:
                seen[n] = depth + 1
                todo.append((n, depth + 1))
    batches = {b.id: b for b in session.exec(select(Batch).where(Batch.id.in_(list(seen)))).all()} if seen else {}
    return sorted(((batches[i], d) for i, d in seen.items()), key=lambda x: (x[1], x[0].code))


def _use_read(session: Session, u: dict[str, Any]) -> dict[str, Any]:
    r = session.get(Reagent, u["reagent_id"]) if u.get("reagent_id") else _find_reagent(session, u["reagent"])
    data = reagent_read(r) if r is not None else None
    smiles = u.get("smiles") or (r.smiles if r is not None else "")
    return {**{k: u.get(k) for k in ("reagent", "amount", "amount_value", "amount_unit", "amount_dimension",
                                     "equivalents")},
            "smiles": smiles,
            "hazard_codes": data["hazard_codes"] if data else [],
            "hazard_statements": data["hazard_statements"] if data else "",
            "pictograms": data["pictograms"] if data else [],
            "hazard_data_entered": bool(data and data["hazard_data_entered"]),
            "notice": data["notice"] if data else hazards.NO_DATA,
            "cautions": [c.__dict__ for c in hazards.cautions_for_structure(smiles)]}


def route_read(session: Session, batch: Batch, *, actor: Optional[Actor]) -> dict[str, Any]:
    compound = session.get(Compound, batch.compound_id)
    hide = not may_see_structure(actor, compound)
    base = {"batch": batch.code, "compound": compound.code, "withheld": hide,
            "cautions": [c.__dict__ for c in hazards.CAMPAIGN_CAUTIONS], "defer": hazards.DEFER}
    if hide:
        return {**base, "steps": [], "precursors": [], "products": []}
    steps = session.exec(select(SynthesisStep).where(SynthesisStep.batch_id == batch.id)
                         .order_by(SynthesisStep.position)).all()

    def lineage(rows: list[tuple[Batch, int]]) -> list[dict[str, Any]]:
        out = []
        for b, depth in rows:
            c = session.get(Compound, b.compound_id)
            if may_see_structure(actor, c):
                out.append({"batch": b.code, "compound": c.code, "depth": depth})
        return out

    return {**base,
            "steps": [{"position": s.position, "description": s.description, "solvent": s.solvent,
                       "temperature_K": s.temperature_K, "time_h": s.time_h, "yield_pct": s.yield_pct,
                       "reagents": [_use_read(session, u) for u in s.reagents]} for s in steps],
            "precursors": lineage(_walk(session, batch, upstream=True)),
            "products": lineage(_walk(session, batch, upstream=False))}


def batches_with_routes(session: Session) -> list[Batch]:
    """Batches that have recorded steps (the templates a new route can be copied from), by code."""
    ids = select(SynthesisStep.batch_id).distinct()
    return list(session.exec(select(Batch).where(Batch.id.in_(ids)).order_by(Batch.code)).all())


def add_step(*, session: Session, batch: Batch, step: RouteStepIn, actor: str) -> Batch:
    """Append one step to a batch's route (the page's form); validated before anything is stored."""
    new = _steps_from(RouteIn(steps=[step]), session, batch)[0]
    last = session.exec(select(func.max(SynthesisStep.position)).where(SynthesisStep.batch_id == batch.id)).one()
    new.position = (last or 0) + 1
    before = _snapshot(session, batch)
    session.add(new)
    return _record_route_change(session, batch, before, actor)


def add_precursor(*, session: Session, batch: Batch, precursor_code: str, actor: str) -> Batch:
    """Record that ``batch`` was made from the batch ``precursor_code`` (refused if it would close a cycle)."""
    p = session.exec(select(Batch).where(Batch.code == precursor_code.strip())).first()
    if p is None:
        raise InputError(f"no batch {precursor_code}", field="precursor")
    if p.id == batch.id or _upstream_reaches(session, [p.id], batch.id):
        raise InputError(f"{p.code} is made from {batch.code} (directly or further up): a batch cannot be its own "
                         "precursor", field="precursor")
    if session.exec(select(BatchPrecursor).where(BatchPrecursor.batch_id == batch.id,
                                                 BatchPrecursor.precursor_id == p.id)).first() is not None:
        return batch
    before = _snapshot(session, batch)
    session.add(BatchPrecursor(batch_id=batch.id, precursor_id=p.id))
    return _record_route_change(session, batch, before, actor)
