"""The compound's phase map: its phase model, the facts of its structures, powder patterns, X-ray scattering,
SHG and switching measurements, each phase identified (``server.analysis.identification``) and the figure.

Shown only to callers who may see the compound's structure (``server/access.py``): space groups and the
matches with CIFs are structure-derived.
"""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..analysis import identification
from ..analysis import verdict as rules
from ..analysis.identification import Fact
from ..models import Batch, Compound, Measurement, live_measurement
from ..plots import figure_json
from ..plots.phase_map import phase_map_figure
from . import verdicts

_PHASE_KINDS = ("crystal", "pxrd", "saxs", "shg")


def facts_of(session: Session, compound: Compound, evidence: list[rules.Evidence]) -> list[Fact]:
    """Facts from the compound's live crystal, pxrd, saxs and shg measurements, and its switching evidence."""
    rows = session.exec(select(Measurement).join(Batch, Batch.id == Measurement.batch_id)
                        .where(Batch.compound_id == compound.id, Measurement.kind.in_(_PHASE_KINDS),
                               live_measurement()).order_by(Measurement.id)).all()
    cif_t = {m.id: m.results.get("temperature_K") or m.temperature_K for m in rows if m.kind == "crystal"}
    facts: list[Fact] = []
    for m in rows:
        r = m.results or {}
        t = r.get("temperature_K") or m.temperature_K
        if m.kind == "crystal":
            facts.append(Fact("crystal", m.id, t, {k: r.get(k) for k in ("space_group", "polar", "centrosymmetric")}))
        elif m.kind == "pxrd":
            facts.append(Fact("pxrd", m.id, t, {"verdict": r.get("verdict"), "reference": r.get("reference"),
                                                "reference_label": r.get("reference_label"),
                                                "reference_t_K": cif_t.get(r.get("reference"))}))
        elif m.kind == "saxs":
            facts.append(Fact("saxs", m.id, t, {k: r.get(k) for k in ("lattice", "a_nm", "stacking_A")}))
        elif m.kind == "shg":
            for i, p in enumerate(r.get("points") or []):
                extra = ({"t_vanish_K": r.get("t_vanish_K"), "t_vanish_resolution_K": r.get("t_vanish_resolution_K")}
                         if i == 0 else {})
                facts.append(Fact("shg", m.id, p["T_K"], {"active": p["active"], **extra}))
    for ev in evidence:
        if (ev.kind == "pund" and ev.verdict == "switching") or (ev.kind == "pe_loop"
                                                                  and ev.verdict in ("switching", "ferroelectric")):
            facts.append(Fact("switching", ev.measurement_id, ev.temperature_K))
    return facts


def phase_map(session: Session, compound: Compound, *, actor: Optional[Actor]) -> Optional[dict[str, Any]]:
    """Identified phases, compound-wide criteria and the figure; None without phase evidence or when the
    caller may not see the structure."""
    if not access.may_see_structure(actor, compound):
        return None
    evidence = verdicts.evidence_for(session, compound)
    facts = facts_of(session, compound, evidence)
    if not any(f.kind in _PHASE_KINDS for f in facts):
        return None
    # the verdict's own phase model: Pr(T) series and PXRD pattern changes included
    model = rules.phase_model(evidence, verdicts.chain_ch2(session, compound),
                              **verdicts.model_inputs(session, compound, evidence))
    ident = identification.identify(model, facts)
    return {"phases": ident.phases, "criteria": ident.criteria,
            "figure": figure_json(phase_map_figure(ident, model, facts))}
