"""Predictions for target compounds and the "what to make next" ranking, from the campaign's own data.

Reads the registry (descriptors from the perceived structure, values from ``CompoundStats``, switching
outcomes from the effective verdict) and hands plain records to ``server/analysis/prediction.py``.

The embargo: descriptors come from structures, so a caller who may not see embargoed structures gets
models fitted without the embargoed compounds and no prediction or rank for them
(``access.structure_visible`` in the one query below): nothing in the answer depends on them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Optional

from sqlmodel import Session, select

from ..access import Actor, structure_visible
from ..analysis import prediction as pr
from ..errors import InputError
from ..models import Batch, BarrierEstimate, Compound, CompoundStats, Measurement, Scaffold, live_measurement
from ..verdict_codes import CONFLICTING, HITS, UNTESTED
from .verdicts import effective_code

TARGET_STATES = ("planned", "in_synthesis")
#: At most this many measured compounds feed a model (the newest; bounded work per request).
MAX_TRAIN = 400
#: The reference temperature of the Pr model unless the caller chooses one (our choice: room temperature,
#: where a device would work; the demo's loops bracket it for most polar compounds).
PR_REFERENCE_K = 300.0


@dataclass(frozen=True)
class Property:
    key: str
    label: str
    unit: str
    column: str  # the CompoundStats field
    symbol: str = ""  # what a table header calls it ("Pr", then the reference temperature and the unit)


PROPERTIES: dict[str, Property] = {p.key: p for p in (
    Property("tc", "Transition temperature (permittivity maximum)", "K", "t_peak_K", "Tc"),
    Property("barrier", "Inversion barrier, measured", "kcal/mol", "barrier_measured_kcal_mol", "barrier"),
    # Pr at the reference temperature (analysis.prediction.pr_at_reference), not a maximum over temperatures.
    Property("pr", "Pr at the reference temperature", "µC/cm²", "", "Pr"),
)}


@dataclass(frozen=True)
class Goal:
    key: str
    label: str
    property: Optional[str]  # None: the switching probability alone
    weight_by_switching: bool
    rule: str


GOALS: dict[str, Goal] = {g.key: g for g in (
    Goal("tc", "Highest Tc among compounds likely to switch", "tc", True,
         "expected improvement over the highest transition temperature measured so far, times the predicted "
         "probability of switching"),
    Goal("pr", "Largest Pr at the reference temperature among compounds likely to switch", "pr", True,
         "expected improvement over the largest Pr at the reference temperature measured so far (a switching "
         "loop within 5 K of it, or interpolated between switching loops either side), times the predicted "
         "probability of switching"),
    Goal("switch", "Most likely to switch", None, False, "the predicted probability of switching"),
    Goal("barrier", "Highest measured inversion barrier", "barrier", False,
         "expected improvement over the highest measured barrier so far"),
)}


def _switches(code: str) -> Optional[bool]:
    """A compound's switching outcome from its effective verdict: None when untested or conflicting."""
    if code in (UNTESTED, CONFLICTING):
        return None
    return code in HITS


def _records(session: Session, actor: Optional[Actor]) -> list[tuple[Compound, CompoundStats, str]]:
    rows = session.exec(
        select(Compound, CompoundStats, Scaffold.bridge)
        .join(CompoundStats, CompoundStats.compound_id == Compound.id)
        .outerjoin(Scaffold, Scaffold.id == Compound.scaffold_id)
        .where(Compound.archived == False, structure_visible(actor))  # noqa: E712
        .order_by(Compound.number.desc())
    ).all()
    return [(c, s, b or "none") for c, s, b in rows]


def _descriptor(c: Compound, bridge: str, estimates: dict[int, dict[str, float]]) -> pr.Descriptor:
    return pr.Descriptor(c.code, bridge, tuple(c.side_chains or ()), estimates.get(c.id, {}))


def _estimates(session: Session, compound_ids: list[int]) -> dict[int, dict[str, float]]:
    """The latest GFN2-xTB job result per compound: its barrier and bowl depth (computed, never measured:
    a target has no crystal, so measured depths would make the two sets incomparable)."""
    out: dict[int, dict[str, float]] = {}
    if not compound_ids:
        return out
    rows = session.exec(select(BarrierEstimate.compound_id, BarrierEstimate.dg_kcal_mol, BarrierEstimate.results)
                        .where(BarrierEstimate.method == "gfn2-xtb", BarrierEstimate.archived == False,  # noqa: E712
                               BarrierEstimate.dg_kcal_mol.is_not(None), BarrierEstimate.compound_id.in_(compound_ids))
                        .order_by(BarrierEstimate.id)).all()
    for cid, dg, results in rows:
        depth = (results or {}).get("bowl_depth_A")
        out[cid] = {"barrier_computed_kcal_mol": float(dg)}
        if isinstance(depth, (int, float)):
            out[cid]["bowl_depth_computed_A"] = float(depth)
    return out


def _loops(session: Session, compound_ids: list[int]) -> dict[int, list[pr.Loop]]:
    out: dict[int, list[pr.Loop]] = {}
    if not compound_ids:
        return out
    rows = session.exec(select(Batch.compound_id, Measurement.temperature_K, Measurement.verdict, Measurement.results)
                        .join(Batch, Batch.id == Measurement.batch_id)
                        .where(Measurement.kind == "pe_loop", live_measurement(), Measurement.temperature_K.is_not(None),
                               Batch.compound_id.in_(compound_ids))).all()
    for cid, t, verdict, results in rows:
        value = (results or {}).get("pr_uC_cm2")
        out.setdefault(cid, []).append(pr.Loop(float(t), verdict == "switching",
                                               float(value) if isinstance(value, (int, float)) else None))
    return out


def check_reference(t_ref_K: Optional[float]) -> float:
    if t_ref_K is None:
        return PR_REFERENCE_K
    if not (1.0 <= t_ref_K <= 2000.0):
        raise InputError("the reference temperature must be between 1 and 2000 K", field="t_ref_K")
    return float(t_ref_K)


def campaign_models(session: Session, *, actor: Optional[Actor], t_ref_K: Optional[float] = None) -> dict[str, Any]:
    """Every property model and the switching model, fitted on what ``actor`` may see, with the targets'
    predictions: {"targets": [code...], "properties": {key: RegressionResult}, "switching": ClassificationResult,
    "pr_reference": {"t_K", "n_at", "n_without", "without": [code...]}}."""
    t_ref = check_reference(t_ref_K)
    rows = _records(session, actor)
    targets = [(c, s, b) for c, s, b in rows if s.life_state in TARGET_STATES]
    measured = [(c, s, b) for c, s, b in rows if s.life_state not in TARGET_STATES]
    est = _estimates(session, [c.id for c, _, _ in rows][:MAX_TRAIN * 2])
    target_d = [_descriptor(c, b, est) for c, _, b in targets]
    props = {}
    for p in PROPERTIES.values():
        if p.key == "pr":
            continue
        train = [(_descriptor(c, b, est), float(getattr(s, p.column))) for c, s, b in measured
                 if getattr(s, p.column) is not None][:MAX_TRAIN]
        props[p.key] = pr.predict_property(train, target_d, prop=p.key, unit=p.unit)
    # Pr at the reference temperature: compounds with switching loops but none that gives Pr there are
    # left out and counted (a Pr at another temperature is not a Pr at this one).
    switching_loops = [(c, s, b) for c, s, b in measured if s.pr_max_uC_cm2 is not None][:MAX_TRAIN]
    loops = _loops(session, [c.id for c, _, _ in switching_loops])
    train, without = [], []
    for c, _, b in switching_loops:
        at = pr.pr_at_reference(loops.get(c.id, []), t_ref)
        if at.value_uC_cm2 is None:
            without.append(c.code)
        else:
            train.append((_descriptor(c, b, est), at.value_uC_cm2))
    props["pr"] = pr.predict_property(train, target_d, prop="pr", unit=PROPERTIES["pr"].unit)
    props = {k: props[k] for k in PROPERTIES}
    labelled = [(_descriptor(c, b, est), _switches(effective_code(c))) for c, _, b in measured]
    switching = pr.predict_switching([(d, s) for d, s in labelled if s is not None][:MAX_TRAIN], target_d)
    return {"targets": [c for c, _, _ in targets], "properties": props, "switching": switching,
            "pr_reference": {"t_K": t_ref, "n_at": len(train), "n_without": len(without), "without": without}}


def ranking(session: Session, *, actor: Optional[Actor], goal: str = "tc",
            t_ref_K: Optional[float] = None) -> dict[str, Any]:
    """The targets ordered by the goal's acquisition rule, each with its numbers and why it ranks there;
    ``t_ref_K`` is the reference temperature of the Pr goal (default :data:`PR_REFERENCE_K`)."""
    if goal not in GOALS:
        raise InputError(f"goal must be one of {', '.join(GOALS)}", field="goal")
    g = GOALS[goal]
    models = campaign_models(session, actor=actor, t_ref_K=t_ref_K)
    ref = models["pr_reference"]
    sw = models["switching"]
    reg = models["properties"][g.property] if g.property else None
    prop = PROPERTIES[g.property] if g.property else None
    notes = []
    if g.property == "pr":
        notes.append(_reference_note(ref))
    if reg is not None and reg.estimates_message and reg.enough_data:
        notes.append(reg.estimates_message)
    if reg is not None and not reg.enough_data:
        notes.append(f"{prop.label}: {reg.message}")
    if (g.weight_by_switching or g.property is None) and not sw.enough_data:
        notes.append(f"switching: {sw.message}")
    enough = (reg is None or reg.enough_data) and (g.property is not None or sw.enough_data)
    by_code = {p.code: p for p in reg.predictions} if reg is not None and reg.enough_data else {}
    items = []
    if enough:
        weight = g.weight_by_switching and sw.enough_data
        if g.weight_by_switching and not sw.enough_data:
            notes.append("ranked by expected improvement alone: too few switching outcomes to weight by")
        for c in models["targets"]:
            p_sw = sw.probabilities.get(c.code) if sw.enough_data else None
            if reg is not None:
                pred = by_code[c.code]
                ei = pr.expected_improvement(pred.mean, pred.sd, reg.best_measured)
                score = ei * (p_sw if weight else 1.0)
                at = f" at {ref['t_K']:g} K" if g.property == "pr" else ""
                why = (f"predicted{at} {pred.mean:.3g} {prop.unit} (95 % {pred.low:.3g} to {pred.high:.3g}) against the best "
                       f"measured {reg.best_measured:.3g} {prop.unit} ({reg.best_code}): expected improvement "
                       + (f"{ei:.2g} {prop.unit}" if ei >= 0.01 else f"below 0.01 {prop.unit}") + (f", times P(switch) = {p_sw:.2f}" if weight else "")
                       + ("; model with the computed estimates" if pred.with_estimates else ""))
            else:
                pred, ei, score = None, None, p_sw
                why = f"P(switch) = {p_sw:.2f}"
            items.append({"code": c.code, "score": score, "expected_improvement": ei, "p_switch": p_sw,
                          "predicted": None if pred is None else pred.mean, "sd": None if pred is None else pred.sd,
                          "low": None if pred is None else pred.low, "high": None if pred is None else pred.high,
                          "explanation": why})
        items.sort(key=lambda it: (-(it["score"] or 0.0), it["code"]))
        for i, it in enumerate(items, 1):
            it["rank"] = i
    return {
        "goal": g.key, "goal_label": g.label, "rule": g.rule,
        "property": g.property, "unit": prop.unit if prop else None, "symbol": prop.symbol if prop else None,
        "reference_t_K": ref["t_K"] if g.property == "pr" else None,
        "enough_data": enough, "notes": notes,
        "model": None if reg is None else _model_summary(reg),
        "switching_model": _switch_summary(sw),
        "items": items,
        "method": pr.METHOD, "version": pr.VERSION,
    }


def _reference_note(ref: dict[str, Any]) -> str:
    """How many compounds give a Pr at the reference temperature, and which are left out and why."""
    text = (f"Pr at {ref['t_K']:g} K: {ref['n_at']} compound{'s' if ref['n_at'] != 1 else ''} with a switching loop "
            f"within {pr.SAME_T_K:g} K of it or switching loops either side (interpolated, at most "
            f"{pr.MAX_BRACKET_K:g} K apart); the model is of Pr given that the compound switches")
    if ref["n_without"]:
        shown = ", ".join(ref["without"][:12]) + (" …" if ref["n_without"] > 12 else "")
        text += (f". {ref['n_without']} compound{'s' if ref['n_without'] != 1 else ''} with switching loops only "
                 f"elsewhere in temperature {'are' if ref['n_without'] != 1 else 'is'} left out, not extrapolated: {shown}")
    return text


def _model_summary(r: pr.RegressionResult) -> dict[str, Any]:
    return {"property": r.property, "unit": r.unit, "n": r.n, "enough_data": r.enough_data, "message": r.message,
            "model": r.model or None, "features": list(r.features), "loo_rmse": r.loo_rmse_gp,
            "loo_rmse_scaffold_mean": r.loo_rmse_scaffold_mean, "loo_coverage_95": r.loo_coverage_gp,
            "best_measured": r.best_measured, "best_code": r.best_code or None,
            "n_with_estimates": r.n_with_estimates, "estimates_used": r.estimates_used,
            "loo_rmse_with_estimates": r.loo_rmse_with_estimates,
            "loo_rmse_without_estimates": r.loo_rmse_without_estimates}


def _switch_summary(r: pr.ClassificationResult) -> dict[str, Any]:
    return {"n": r.n, "n_switching": r.n_switching, "enough_data": r.enough_data, "message": r.message,
            "model": r.model or None, "loo_brier": r.loo_brier_gp, "loo_brier_bridge_rate": r.loo_brier_rate}


def predictions_for(session: Session, compound: Compound, *, actor: Optional[Actor]) -> Optional[dict[str, Any]]:
    """What the compound page shows for a target: each property's prediction (or why there is none) and
    P(switch); None for a compound that is not a target or that ``actor`` may not see. Pr is at
    :data:`PR_REFERENCE_K`."""
    models = campaign_models(session, actor=actor)
    if compound.code not in {c.code for c in models["targets"]}:
        return None
    out = []
    for key, r in models["properties"].items():
        p = next((x for x in r.predictions if x.code == compound.code), None)
        label = PROPERTIES[key].label if key != "pr" else f"Pr at {models['pr_reference']['t_K']:g} K"
        out.append({"property": key, "label": label, "unit": r.unit, "n": r.n,
                    "message": r.message, "model": r.model, "prediction": p,
                    "loo_rmse": r.loo_rmse_gp if r.model == "gp" else r.loo_rmse_scaffold_mean})
    sw = models["switching"]
    return {"properties": out, "p_switch": sw.probabilities.get(compound.code), "switching": _switch_summary(sw)}
