"""The compound verdict: built from all its evidence, stored with its inputs, overridable with a reason."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Optional

from sqlmodel import Session, func, select

from ..analysis import verdict as rules
from ..analysis.results import Flag, jsonable
from ..errors import InputError
from ..kinds import KINDS
from ..verdict_codes import LABELS, RETIRED, UNTESTED, effective
from ..analysis.constants import CAL_J
from ..models import BarrierEstimate, Batch, Compound, CompoundSideChain, Measurement, utcnow, live_measurement
from .stats import MEASURED_METHODS
from . import audit, notifications, pattern_runs
from .series import combine_series_tc, compound_series_entries


def evidence_kinds() -> tuple[str, ...]:
    """The kinds whose measurements the verdict uses (those that declare ``evidence``)."""
    return tuple(k.name for k in KINDS.values() if k.evidence is not None)


def evidence_for(session: Session, compound: Compound) -> list[rules.Evidence]:
    rows = session.exec(
        select(Measurement).join(Batch, Batch.id == Measurement.batch_id)
        .where(Batch.compound_id == compound.id, live_measurement(),  
               Measurement.kind.in_(evidence_kinds()))
        .order_by(Measurement.id)
    ).all()
    out = []
    for m in rows:
        facts = KINDS[m.kind].evidence(m.results or {}, m.temperature_K)
        out.append(rules.Evidence(kind=m.kind, measurement_id=m.id, verdict=m.verdict or "",
                                  temperature_K=facts.temperature_K, details=facts.details,
                                  flags=tuple(Flag(f["code"], f["message"]) for f in m.flags or [])))
    return out


def chain_ch2(session: Session, compound: Compound) -> int | None:
    """CH2 groups in the compound's alkyl, alkoxy and alkylthio side chains: (carbons - 1) per chain
    (one terminal CH3; a branched chain counts the same, an approximation); None without such chains."""
    rows = session.exec(select(CompoundSideChain).where(CompoundSideChain.compound_id == compound.id,
                                                        CompoundSideChain.kind != "other")).all()
    n = sum(max(r.carbons - 1, 0) * r.count for r in rows)
    return n or None


def measured_rates(session: Session, compound: Compound) -> list[dict[str, Any]]:
    """Eyring dH and dS of the compound's live NMR rate tables, in kJ/mol and J/(mol K)."""
    rows = session.exec(
        select(Measurement).join(Batch, Batch.id == Measurement.batch_id)
        .where(Batch.compound_id == compound.id, live_measurement(), Measurement.kind == "nmr_rates").order_by(Measurement.id)
    ).all()
    out = []
    for m in rows:
        r = m.results or {}
        if r.get("dh_kcal_mol") is not None and r.get("ds_cal_molK") is not None:
            out.append({"measurement_id": m.id, "dh_kJ_mol": r["dh_kcal_mol"] * CAL_J,
                        "ds_J_molK": r["ds_cal_molK"] * CAL_J})
    return out


def decide_for(session: Session, compound: Compound, evidence: list[rules.Evidence]) -> rules.CompoundVerdict:
    """The verdict from ``evidence``, with the compound's chain CH2 count, measured rates, the Curie
    temperature of its Pr(T) series (:func:`server.services.series.compound_tc`) and the pattern changes of its
    variable-temperature PXRD runs (:mod:`server.services.pattern_runs`), both limited to the series whose
    measurements are among ``evidence``, so a batch verdict uses its own series only."""
    return rules.decide(evidence, chain_ch2=chain_ch2(session, compound), rates=measured_rates(session, compound),
                        identity=identity_of(session, {ev.measurement_id for ev in evidence}),
                        **barrier_inputs(session, compound), **model_inputs(session, compound, evidence))


def barrier_inputs(session: Session, compound: Compound) -> dict[str, Any]:
    """The compound's live barriers as the verdict reads them: ``computed_minima`` (GFN2-xTB estimates with
    their bowl depth and whether the minimum was planar) and ``nmr_barriers`` (measured by dynamic NMR)."""
    rows = session.exec(select(BarrierEstimate).where(BarrierEstimate.compound_id == compound.id,
                                                      BarrierEstimate.archived == False)  # noqa: E712
                        .order_by(BarrierEstimate.id)).all()
    computed = [{"estimate_id": b.id, "barrier_kcal_mol": b.dg_kcal_mol,
                 "bowl_depth_A": (b.results or {}).get("bowl_depth_A"), "planar": bool((b.results or {}).get("planar"))}
                for b in rows if b.method == "gfn2-xtb"]
    nmr = [{"estimate_id": b.id, "measurement_id": b.measurement_id, "method": b.method, "dg_kcal_mol": b.dg_kcal_mol}
           for b in rows if b.method in MEASURED_METHODS and b.dg_kcal_mol is not None]
    return {"computed_minima": computed, "nmr_barriers": nmr}


def model_inputs(session: Session, compound: Compound, evidence: list[rules.Evidence]) -> dict[str, Any]:
    """The series-derived inputs of the phase model for ``evidence``: ``series_tc``, ``pattern_changes`` and
    ``pattern_scans`` (keywords of :func:`server.analysis.verdict.decide` and ``phase_model``)."""
    ids = {ev.measurement_id for ev in evidence}
    entries = [e for e in compound_series_entries(session, compound) if set(e["measurements"]) <= ids]
    changes, scans = pattern_runs.runs_of(session, entries)
    return {"series_tc": combine_series_tc(entries), "pattern_changes": changes, "pattern_scans": scans}


def identity_of(session: Session, measurement_ids: set[int]) -> dict[int, bool]:
    """Measurement id -> whether its batch's identity is confirmed (the verdict's identity criterion)."""
    if not measurement_ids:
        return {}
    rows = session.exec(select(Measurement.id, Batch.identity_confirmed).join(Batch, Batch.id == Measurement.batch_id)
                        .where(Measurement.id.in_(sorted(measurement_ids)))).all()
    return {mid: bool(ok) for mid, ok in rows}


def batch_verdicts(session: Session, compound: Compound) -> dict[int, rules.CompoundVerdict]:
    """The verdict each batch's own evidence supports (computed on the fly, not stored)."""
    by_batch: dict[int, list[rules.Evidence]] = {}
    ids = {m.id: m.batch_id for m in session.exec(
        select(Measurement).join(Batch, Batch.id == Measurement.batch_id).where(Batch.compound_id == compound.id))}
    for ev in evidence_for(session, compound):
        by_batch.setdefault(ids[ev.measurement_id], []).append(ev)
    return {bid: decide_for(session, compound, evs) for bid, evs in by_batch.items()}


def recompute(session: Session, compound: Compound, *, actor: str = "system:verdict") -> rules.CompoundVerdict:
    """Decide again from the current evidence and store it on the compound (the caller commits).

    A change of the computed code, or of its conflicts, is audited as ``verdict.change`` (old and new
    code, the reason, the conflicts): the weekly digest reads these events. The compound's registrant
    and followers are notified of a new code and of each conflict not there before.
    """
    decision = decide_for(session, compound, evidence_for(session, compound))
    old_conflicts = [c.get("message", "") for c in (compound.verdict or {}).get("conflicts") or []]
    new_conflicts = [c.message for c in decision.conflicts]
    if compound.id is not None and (decision.code != compound.verdict_code or new_conflicts != old_conflicts):
        audit.record(session, actor=actor, action="verdict.change", entity="compound", code=compound.code,
                     compound_id=compound.id,
                     before={"code": compound.verdict_code, "conflicts": old_conflicts,
                             "version": stored_version(compound)},
                     after={"code": decision.code, "reason": decision.reason, "conflicts": new_conflicts,
                            "version": decision.version})
        notifications.verdict_changed(session, compound, old_code=compound.verdict_code, new_code=decision.code,
                                      old_conflicts=old_conflicts, new_conflicts=new_conflicts, actor=actor)
    compound.verdict_code = decision.code
    compound.verdict = jsonable(decision.to_dict())
    compound.verdict_at = utcnow()
    session.add(compound)
    return decision


def stored_version(compound: Compound) -> Optional[str]:
    """The rule version (``verdict/x.y``) the stored verdict was decided under; None if none was stored."""
    return (compound.verdict or {}).get("version")


@dataclass(frozen=True)
class Rederived:
    """One compound's stored verdict against the one the current rules give (:func:`recompute_all`).

    ``changed``: the code or the conflicts moved (a verdict change: audited, notified); ``restated``: same code
    and conflicts, but the stored reasons, criteria or rule version differ and are rewritten."""

    code: str
    old_code: str
    new_code: str
    old_version: Optional[str]
    new_version: str
    changed: bool
    restated: bool


def recompute_all(*, session: Session, apply: bool, actor: str) -> list[Rederived]:
    """Re-derive every compound's stored verdict under the current rules (``remanence recompute-verdicts``).

    A verdict is stored when its evidence changes; a change of the rules themselves (a new
    :data:`server.analysis.verdict.VERSION`) leaves older verdicts as they were decided. This is the deliberate
    step that brings them in line: each compound goes through :func:`recompute`, the path every evidence change
    uses, so a moved code or conflict is audited as ``verdict.change`` (old -> new, with both rule versions) and
    notified like any other. One ``verdict.recompute_all`` event records the run and its counts; all commits once.
    With ``apply`` False (a dry run) the verdicts are decided and compared, and nothing is written.
    """
    out: list[Rederived] = []
    for compound in session.exec(select(Compound).order_by(Compound.number)).all():
        before_code, before_version = compound.verdict_code, stored_version(compound)
        before = jsonable(compound.verdict) if compound.verdict is not None else None
        old_conflicts = [c.get("message", "") for c in (compound.verdict or {}).get("conflicts") or []]
        if apply:
            decision = recompute(session, compound, actor=actor)
        else:
            decision = decide_for(session, compound, evidence_for(session, compound))
        after = jsonable(decision.to_dict())
        changed = decision.code != before_code or [c.message for c in decision.conflicts] != old_conflicts
        out.append(Rederived(compound.code, before_code, decision.code, before_version, decision.version,
                             changed=changed, restated=not changed and after != before))
    if apply:
        audit.record(session, actor=actor, action="verdict.recompute_all", entity="compound",
                     after={"version": rules.VERSION, "examined": len(out), "changed": sum(r.changed for r in out),
                            "restated": sum(r.restated for r in out)})
        session.commit()
    return out


def effective_code(compound: Compound) -> str:
    """The verdict that counts for ``compound``: its reviewed override, else the computed one."""
    return effective(compound.override_code, compound.verdict_code)


def qualifiers(compound: Compound) -> tuple[str, ...]:
    """The qualifiers of ``compound``'s computed verdict (:func:`server.analysis.verdict.verdict`, e.g. "tested at
    one temperature only"), which limit what its class says; none while the verdict that counts is untested.
    The outcome map counts them per cell beside the verdict classes."""
    if effective_code(compound) == UNTESTED:
        return ()
    return tuple((compound.verdict or {}).get("qualifiers") or ())


#: The same rule as :func:`effective_code`, as an SQL expression for filters, sorts and counts.
EFFECTIVE_CODE = func.coalesce(Compound.override_code, Compound.verdict_code)


def set_override(*, session: Session, compound: Compound, code: Optional[str], reason: str, actor: str) -> Compound:
    """A reviewed override (code None clears it); the computed verdict stays stored beside it."""
    if code is not None:
        if code in RETIRED:
            raise InputError(f"the verdict {code!r} is retired; use {RETIRED[code]!r}", field="code")
        if code not in LABELS:
            raise InputError(f"unknown verdict {code!r}; use one of {', '.join(LABELS)}", field="code")
        if not reason.strip():
            raise InputError("an override needs a reason", field="reason")
    before = {"override_code": compound.override_code, "override_reason": compound.override_reason}
    compound.override_code = code
    compound.override_reason = reason.strip() if code else ""
    compound.override_by = actor if code else ""
    compound.override_at = utcnow() if code else None
    session.add(compound)
    audit.record(session, actor=actor, action="verdict.override" if code else "verdict.clear_override",
                 entity="compound", code=compound.code, compound_id=compound.id, before=before,
                 after={"override_code": code, "override_reason": compound.override_reason})
    session.commit()
    session.refresh(compound)
    return compound


def verdict_read(compound: Compound, *, withheld: bool = False) -> dict[str, Any]:
    """The verdict and its evidence. ``withheld``: for a caller who may not see an embargoed
    compound, only the codes; the reasons, criteria and phases quote values derived from its
    structure (molar quantities, entropy per chain CH2) and are left out (``server/access.py``)."""
    if withheld:
        return {"computed": {"code": compound.verdict_code, "label": LABELS.get(compound.verdict_code, "")},
                "override": ({"code": compound.override_code, "label": LABELS.get(compound.override_code, "")}
                             if compound.override_code else None),
                "criteria": [], "phases": [], "withheld": True}
    computed = compound.verdict or {"code": compound.verdict_code, "label": LABELS.get(compound.verdict_code, "")}
    # criteria and phases are shown at the top level of verdict_evidence (issue 15 API keys)
    out: dict[str, Any] = {"computed": computed, "override": None,
                           "criteria": computed.get("criteria") or [], "phases": computed.get("phases") or []}
    if compound.override_code:
        out["override"] = {"code": compound.override_code, "label": LABELS.get(compound.override_code, ""),
                           "reason": compound.override_reason, "by": compound.override_by,
                           "at": compound.override_at.isoformat() if compound.override_at else None}
    return out
