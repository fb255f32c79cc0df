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
from ..models import Compound, CompoundStats, Scaffold
from ..verdict_codes import CONFLICTING, HITS, UNTESTED
from .verdicts import effective_code

TARGET_STATES = ("planned", "in_synthesis")
#: At most this many measured compounds feed a model (the newest; bounded work per request).
MAX_TRAIN = 400


@dataclass(frozen=True)
class Property:
    key: str
    label: str
    unit: str
    column: str  # the CompoundStats field


PROPERTIES: dict[str, Property] = {p.key: p for p in (
    Property("tc", "Transition temperature (permittivity maximum)", "K", "t_peak_K"),
    Property("barrier", "Inversion barrier, measured", "kcal/mol", "barrier_measured_kcal_mol"),
    Property("pr", "Largest Pr of a switching loop", "µC/cm²", "pr_max_uC_cm2"),
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
    Goal("pr", "Largest Pr among compounds likely to switch", "pr", True,
         "expected improvement over the largest Pr measured so far, times the predicted probability of switching"),
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


def _descriptor(c: Compound, bridge: str) -> pr.Descriptor:
    return pr.Descriptor(c.code, bridge, tuple(c.side_chains or ()))


def campaign_models(session: Session, *, actor: Optional[Actor]) -> dict[str, Any]:
    """Every property model and the switching model, fitted on what ``actor`` may see, with the targets'
    predictions: {"targets": [code...], "properties": {key: RegressionResult}, "switching": ClassificationResult}."""
    rows = _records(session, actor)
    targets = [(c, s, b) for c, s, b in rows if s.life_state in TARGET_STATES]
    measured = [(c, s, b) for c, s, b in rows if s.life_state not in TARGET_STATES]
    target_d = [_descriptor(c, b) for c, _, b in targets]
    props = {}
    for p in PROPERTIES.values():
        train = [(_descriptor(c, b), float(getattr(s, p.column))) for c, s, b in measured
                 if getattr(s, p.column) is not None][:MAX_TRAIN]
        props[p.key] = pr.predict_property(train, target_d, prop=p.key, unit=p.unit)
    labelled = [(_descriptor(c, b), _switches(effective_code(c))) for c, _, b in measured]
    switching = pr.predict_switching([(d, s) for d, s in labelled if s is not None][:MAX_TRAIN], target_d)
    return {"targets": [c for c, _, _ in targets], "properties": props, "switching": switching}


def ranking(session: Session, *, actor: Optional[Actor], goal: str = "tc") -> dict[str, Any]:
    """The targets ordered by the goal's acquisition rule, each with its numbers and why it ranks there."""
    if goal not in GOALS:
        raise InputError(f"goal must be one of {', '.join(GOALS)}", field="goal")
    g = GOALS[goal]
    models = campaign_models(session, actor=actor)
    sw = models["switching"]
    reg = models["properties"][g.property] if g.property else None
    prop = PROPERTIES[g.property] if g.property else None
    notes = []
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
                why = (f"predicted {pred.mean:.3g} {prop.unit} (95 % {pred.low:.3g} to {pred.high:.3g}) against the best "
                       f"measured {reg.best_measured:.3g} {prop.unit} ({reg.best_code}): expected improvement "
                       + (f"{ei:.2g} {prop.unit}" if ei >= 0.01 else f"below 0.01 {prop.unit}") + (f", times P(switch) = {p_sw:.2f}" if weight else ""))
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
        "property": g.property, "unit": prop.unit if prop else None,
        "enough_data": enough, "notes": notes,
        "model": None if reg is None else _model_summary(reg),
        "switching_model": _switch_summary(sw),
        "items": items,
        "method": pr.METHOD, "version": pr.VERSION,
    }


def _model_summary(r: pr.RegressionResult) -> dict[str, Any]:
    return {"property": r.property, "unit": r.unit, "n": r.n, "enough_data": r.enough_data, "message": r.message,
            "model": r.model or None, "features": list(r.features), "loo_rmse": r.loo_rmse_gp,
            "loo_rmse_scaffold_mean": r.loo_rmse_scaffold_mean, "loo_coverage_95": r.loo_coverage_gp,
            "best_measured": r.best_measured, "best_code": r.best_code or None}


def _switch_summary(r: pr.ClassificationResult) -> dict[str, Any]:
    return {"n": r.n, "n_switching": r.n_switching, "enough_data": r.enough_data, "message": r.message,
            "model": r.model or None, "loo_brier": r.loo_brier_gp, "loo_brier_bridge_rate": r.loo_brier_rate}


def predictions_for(session: Session, compound: Compound, *, actor: Optional[Actor]) -> Optional[dict[str, Any]]:
    """What the compound page shows for a target: each property's prediction (or why there is none) and
    P(switch); None for a compound that is not a target or that ``actor`` may not see."""
    models = campaign_models(session, actor=actor)
    if compound.code not in {c.code for c in models["targets"]}:
        return None
    out = []
    for key, r in models["properties"].items():
        p = next((x for x in r.predictions if x.code == compound.code), None)
        out.append({"property": key, "label": PROPERTIES[key].label, "unit": r.unit, "n": r.n,
                    "message": r.message, "model": r.model, "prediction": p,
                    "loo_rmse": r.loo_rmse_gp if r.model == "gp" else r.loo_rmse_scaffold_mean})
    sw = models["switching"]
    return {"properties": out, "p_switch": sw.probabilities.get(compound.code), "switching": _switch_summary(sw)}
