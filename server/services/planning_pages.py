"""Everything the planning pages show, gathered per page: the target list with predictions and estimate
status, the ranking, the compound page's planning section, a batch's route page, the reagent table.

The embargo is applied here and in the services called (``planning.targets``, ``prediction``,
``routes.route_read``): templates only display.
"""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session, select

from .. import hazards
from ..access import Actor, may_see_structure
from ..errors import InputError
from ..models import Batch, Compound, Measurement, live_measurement
from ..models.planning import LIFE_STATES
from . import estimates, planning, prediction, registry, routes


def estimate_status(session: Session, compound: Compound) -> dict[str, Any]:
    """The GFN2-xTB estimate of a target: done (with the barrier), queued/running (job id), not possible (why)."""
    done = estimates.estimates_of(session, compound)
    if done:
        return {"state": "done", "dg_kcal_mol": done[-1].dg_kcal_mol}
    job = estimates.active_estimate(session, compound)
    if job is not None:
        return {"state": job.state, "job": job.id}
    try:
        estimates.check_estimable(compound.smiles)
    except InputError as exc:
        return {"state": "not_possible", "reason": exc.message}
    return {"state": "none"}


def planning_page(session: Session, *, actor: Optional[Actor], goal: str, state: str,
                  t_ref_K: Optional[float] = None) -> dict[str, Any]:
    states = ("planned", "in_synthesis") if state == "open" else (state,)
    rank = prediction.ranking(session, actor=actor, goal=goal, t_ref_K=t_ref_K)
    by_code = {it["code"]: it for it in rank["items"]}
    rows = []
    for c, plan, life in planning.targets(session, actor=actor, states=states):
        rows.append({"compound": c, "plan": plan, "state": life, "rank": by_code.get(c.code),
                     "estimate": estimate_status(session, c) if life in ("planned", "in_synthesis") else None})
    return {"rows": rows, "ranking": rank, "goals": prediction.GOALS, "goal": goal, "state": state,
            "t_ref_K": prediction.check_reference(t_ref_K),
            "states": ("open",) + LIFE_STATES[1:], "cautions": hazards.CAMPAIGN_CAUTIONS, "defer": hazards.DEFER}


def highest_temperature_K(session: Session, batch: Batch) -> Optional[float]:
    """The highest temperature a batch's live measurements took it to: stated measuring temperatures, the
    ends of DSC segments and the top of dielectric scans."""
    temps = []
    for m in session.exec(select(Measurement).where(Measurement.batch_id == batch.id, live_measurement())).all():
        if m.temperature_K is not None:
            temps.append(m.temperature_K)
        r = m.results or {}
        if r.get("t_max_K") is not None:
            temps.append(r["t_max_K"])
        for seg in r.get("segments") or []:
            temps.extend(v for v in (seg.get("t_start_K"), seg.get("t_end_K")) if v is not None)
    return max(temps) if temps else None


def compound_section(session: Session, compound: Compound, *, actor: Optional[Actor]) -> dict[str, Any]:
    """The compound page's planning part: state and plan, predictions for a target, the heating caution
    for S/Se compounds with each batch's highest temperature, and links to the batches' routes."""
    visible = may_see_structure(actor, compound)
    plan = planning.plan_of(session, compound)
    batches = registry.batches_of(session, compound)
    chalcogen = visible and hazards.formula_has_chalcogen(compound.formula)
    return {
        "state": planning.state_of(session, compound),
        "plan": plan,
        "show_rationale": visible,
        "predictions": prediction.predictions_for(session, compound, actor=actor) if visible else None,
        "heating_caution": hazards.HEATING_CHALCOGEN if chalcogen else None,
        "batch_temperatures": [(b, highest_temperature_K(session, b)) for b in batches] if chalcogen else [],
        "batches": batches,
        "estimate": estimate_status(session, compound) if visible and plan is not None else None,
    }


def route_page(session: Session, batch: Batch, *, actor: Optional[Actor]) -> dict[str, Any]:
    compound = session.get(Compound, batch.compound_id)
    route = routes.route_read(session, batch, actor=actor)
    visible = may_see_structure(actor, compound)
    templates = [b for b in routes.batches_with_routes(session)
                 if b.id != batch.id and may_see_structure(actor, session.get(Compound, b.compound_id))]
    chalcogen = visible and hazards.formula_has_chalcogen(compound.formula)
    return {"batch": batch, "compound": compound, "route": route, "templates": templates,
            "reagents": routes.list_reagents(session), "pictograms": hazards.PICTOGRAMS,
            "heating_caution": hazards.HEATING_CHALCOGEN if chalcogen else None,
            "highest_K": highest_temperature_K(session, batch) if chalcogen else None}


def reagents_page(session: Session) -> dict[str, Any]:
    return {"reagents": [routes.reagent_read(r) for r in routes.list_reagents(session)],
            "pictograms": hazards.PICTOGRAMS, "no_data": hazards.NO_DATA, "defer": hazards.DEFER}


#: Kinds whose runs heat a sample (the heating caution shows on their pages for S/Se compounds).
HEATED_KINDS = ("dsc", "dielectric")


def measurement_heating(session: Session, m: Measurement, *, actor: Optional[Actor]) -> Optional[dict[str, Any]]:
    """For a DSC or permittivity run of an S- or Se-containing compound the caller may see: the heating
    caution and the highest temperature the batch has been taken to; else None."""
    if m.kind not in HEATED_KINDS:
        return None
    batch = session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    if not may_see_structure(actor, compound) or not hazards.formula_has_chalcogen(compound.formula):
        return None
    return {"text": hazards.HEATING_CHALCOGEN, "batch": batch.code, "highest_K": highest_temperature_K(session, batch)}
