"""The group status page: campaign progress, this week's arrivals, hits, the job queue, review items.

What a visitor without a login sees is built here, not filtered in a template: embargoed
compounds appear as their code alone (no label, structure, SMILES, InChI or formula).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from typing import Any, Optional

from sqlalchemy import func
from sqlmodel import Session, select

from ..access import Actor, may_see_structure, structure_visible
from ..verdict_codes import CONFLICTING, HITS, LABELS, SHORT, UNTESTED
from ..models import (
    live_measurement,
    AuditEvent,
    BarrierEstimate,
    Batch,
    Compound,
    CompoundStats,
    Job,
    Measurement,
    Sample,
    SiteSetting,
    utcnow,
)
from ..settings import Settings
from . import audit
from .verdicts import EFFECTIVE_CODE, effective_code

PUBLIC_KEY = "public_status"


def public_status_enabled(session: Session, settings: Settings) -> bool:
    """The environment setting, unless an admin has switched it in the app."""
    row = session.get(SiteSetting, PUBLIC_KEY)
    return bool(row.value) if row is not None else settings.public_status


def set_public_status(*, session: Session, enabled: bool, actor: str) -> None:
    row = session.get(SiteSetting, PUBLIC_KEY) or SiteSetting(key=PUBLIC_KEY)
    before = row.value
    row.value, row.updated_by, row.updated_at = enabled, actor, utcnow()
    session.add(row)
    audit.record(session, actor=actor, action="site.public_status", entity="site", code=PUBLIC_KEY,
                 before={"value": before}, after={"value": enabled})
    session.commit()


# How "current hits" are ranked, in words the page shows beside the table.
HITS_RULE = ("Ranked by the largest remanent polarisation Pr of a live, saturated switching loop, over every "
             "temperature, field amplitude and specimen measured; each row names the temperature, field "
             "amplitude and specimen of that loop, so unlike conditions are visible. Loops whose values are "
             "only apparent (leaky or lossy) are not ranked.")
MAX_HITS = 12


@dataclass(frozen=True)
class Hit:
    """One ranked hit and the conditions of the loop that ranked it."""

    compound: "CompoundRef"
    pr_uC_cm2: Optional[float]
    ec_kV_cm: Optional[float]
    t_K: Optional[float]
    emax_kV_cm: Optional[float]
    specimen: str  # the sample code of that loop ("" when no loop ranked it)
    measurement_id: Optional[int]


@dataclass(frozen=True)
class CompoundRef:
    code: str
    label: str  # empty for embargoed compounds seen from outside
    verdict: str
    show_structure: bool


def _ref(c: Compound, *, actor: Optional[Actor]) -> CompoundRef:
    visible = may_see_structure(actor, c)
    return CompoundRef(code=c.code, label=c.label if visible else "", verdict=effective_code(c),
                       show_structure=visible)


@dataclass(frozen=True)
class Tile:
    """One progress tile: ``n`` distinct live compounds that meet ``rule`` (shown as the tile's title)."""

    key: str
    name: str
    n: int
    rule: str


def progress_tiles(session: Session) -> list[Tile]:
    """The campaign's progress as counts of distinct compounds; archived compounds never count.

    Each compound counts once per tile however many batches, samples or measurements it has. The
    life state (planned, made) and the measurement count come from ``CompoundStats``, which counts
    only live batches and live measurements (``services/stats.refresh``); switching and the strongest
    class read the effective verdict (a reviewed override, else the computed one).
    """
    live = Compound.archived == False  # noqa: E712 - SQL expression

    def count(*where) -> int:
        return session.exec(select(func.count()).select_from(Compound).join(
            CompoundStats, CompoundStats.compound_id == Compound.id, isouter=True).where(live, *where)).one()

    codes = dict(session.exec(select(EFFECTIVE_CODE, func.count()).where(live).group_by(EFFECTIVE_CODE)).all())
    reached = [code for code in LABELS if codes.get(code) and code not in (UNTESTED, CONFLICTING)]
    strongest = reached[0] if reached else None
    # counted apart: a verdict from one temperature says nothing about the rest of the phase diagram
    one_temperature = sum(
        1 for v in session.exec(select(Compound.verdict).where(live, EFFECTIVE_CODE != UNTESTED)).all()
        if "tested at one temperature only" in ((v or {}).get("qualifiers") or ()))
    return [
        Tile("registered", "registered", count(), "live compounds in the registry"),
        Tile("planned", "planned", count(CompoundStats.life_state.in_(("planned", "in_synthesis"))),
             "planned or in synthesis, no batch made yet"),
        Tile("made", "made", count(CompoundStats.life_state == "made"),
             "at least one live batch made (made, impure or used up)"),
        Tile("measured", "measured", count(CompoundStats.n_measurements > 0), "at least one live measurement"),
        Tile("switching", "switching", count(EFFECTIVE_CODE.in_(HITS)),
             "verdict: " + ", ".join(SHORT[c] for c in HITS)),
        Tile("strongest", f"strongest class: {SHORT[strongest]}" if strongest else "strongest class: none yet",
             codes.get(strongest, 0) if strongest else 0,
             LABELS[strongest] if strongest else "no compound has a verdict class yet"),
        Tile("one_temperature", "tested at one temperature only", one_temperature,
             "verdict from measurements at a single temperature"),
    ]


def summary(session: Session, *, actor: Optional[Actor], days: int = 7) -> dict[str, Any]:
    live = Compound.archived == False  # noqa: E712 - SQL expression
    progress = progress_tiles(session)
    since = utcnow() - timedelta(days=days)
    week = {
        "compounds": session.exec(select(func.count()).select_from(Compound).where(Compound.created_at >= since)).one(),
        "batches": session.exec(select(func.count()).select_from(Batch).where(Batch.created_at >= since)).one(),
        "uploads": session.exec(select(func.count()).select_from(Measurement).where(
            Measurement.created_at >= since)).one(),
        "estimates": session.exec(select(func.count()).select_from(BarrierEstimate).where(
            BarrierEstimate.method == "gfn2-xtb", BarrierEstimate.created_at >= since)).one(),
    }
    new_compounds = [_ref(c, actor=actor) for c in session.exec(
        select(Compound).where(live, Compound.created_at >= since).order_by(Compound.number.desc()).limit(12)).all()]
    # Figures of merit of embargoed compounds are not shown to a caller who may not see them, and the
    # ranking must not depend on them either: such a caller gets the ranked open hits, then the
    # embargoed hits by code alone (code and verdict class, in code order).
    hit_rows = session.exec(
        select(Compound, CompoundStats, Sample.code)
        .join(CompoundStats, CompoundStats.compound_id == Compound.id, isouter=True)
        .join(Measurement, Measurement.id == CompoundStats.pr_max_measurement_id, isouter=True)
        .join(Sample, Sample.id == Measurement.sample_id, isouter=True)
        .where(live, EFFECTIVE_CODE.in_(HITS), structure_visible(actor))
        .order_by(CompoundStats.pr_max_uC_cm2.desc().nulls_last(), Compound.number.desc()).limit(MAX_HITS)).all()
    hits = [Hit(compound=_ref(c, actor=actor), pr_uC_cm2=s.pr_max_uC_cm2 if s else None,
                ec_kV_cm=s.ec_kV_cm if s else None, t_K=s.pr_max_t_K if s else None,
                emax_kV_cm=s.pr_max_emax_kV_cm if s else None, specimen=sample or "",
                measurement_id=s.pr_max_measurement_id if s else None) for c, s, sample in hit_rows]
    withheld_hits = [_ref(c, actor=actor) for c in session.exec(
        select(Compound).where(live, EFFECTIVE_CODE.in_(HITS), ~structure_visible(actor))
        .order_by(Compound.number).limit(MAX_HITS)).all()]
    review = [_ref(c, actor=actor) for c in session.exec(
        select(Compound).where(live, Compound.verdict_code == CONFLICTING, Compound.override_code.is_(None))
        .order_by(Compound.number.desc()).limit(20)).all()]
    flagged = session.exec(select(func.count()).select_from(Measurement).where(
        live_measurement(), Measurement.verdict == "inconclusive")).one()  # noqa: E712
    jobs = {state: n for state, n in session.exec(select(Job.state, func.count()).group_by(Job.state)).all()}
    running = session.exec(select(Job).where(Job.state.in_(("running", "queued"))).order_by(Job.id).limit(10)).all()
    running_rows = []
    for j in running:
        c = session.get(Compound, j.compound_id) if j.compound_id else None
        running_rows.append({"id": j.id, "state": j.state, "progress": j.progress, "message": j.message,
                             "compound": _ref(c, actor=actor) if c else None})
    last = session.exec(select(func.max(AuditEvent.at))).one()
    by_verdict = dict(session.exec(select(EFFECTIVE_CODE, func.count())
                                   .where(live).group_by(EFFECTIVE_CODE)).all())
    return {
        "progress": progress,
        "week": week,
        "days": days,
        "new_compounds": new_compounds,
        "hits": hits,
        "hits_rule": HITS_RULE,
        "withheld_hits": withheld_hits,
        "review": review,
        "inconclusive_measurements": flagged,
        "jobs": jobs,
        "running": running_rows,
        "by_verdict": [(code, label, by_verdict.get(code, 0)) for code, label in LABELS.items()],
        "last_updated": last,
    }

