"""Keep CompoundStats and CompoundSideChain in step with a compound's evidence.

``refresh(session, compound)`` recomputes one compound's row from its batches,
measurements and barriers (a few small queries); services call it before they commit,
so the registry table and the explorer never read stale figures.

Rows stored under an older rule (say, a "largest Pr" taken before apparent loops were left out,
``server/merit.py``) are rebuilt once: the database records the :data:`RULE` its rows were last
built under, and :func:`ensure_current` (run by ``remanence init`` and ``remanence serve``) rebuilds
every row when that differs. ``remanence rebuild-stats`` rebuilds them whatever the record says.
"""

from __future__ import annotations

from typing import Iterable, Optional

from sqlalchemy import delete, func
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, select

from .. import merit
from ..kinds import KINDS
from ..models import (BarrierEstimate, Batch, Compound, CompoundPlan, CompoundSideChain, CompoundStats, Measurement,
                      SiteSetting, live_measurement, utcnow)
from ..models.planning import life_state

MEASURED_METHODS = ("coalescence", "eyring")  # barriers measured by dynamic NMR

#: The rule the stored rows follow; change it whenever :func:`refresh` (or a kind's ``stats``) would
#: fill a row differently from the same evidence, so stored rows are rebuilt once. History:
#: ``stats/1`` took loops' numbers whatever their shape; ``stats/2`` leaves apparent loops out of
#: every best value (``server/merit.py``: leaky and lossy loops, and loops PUND contradicts); ``stats/3`` adds
#: the dielectric-relaxation Ea (``relax_ea_*``, kinds/dielectric_spectrum.py; migration 0027); ``stats/4``
#: leaves out measurements of archived samples, batches and compounds (``models.live_measurement``).
RULE = "stats/4"
RULE_KEY = "stats_rule"


def _max(values: Iterable[Optional[float]]) -> Optional[float]:
    vals = [v for v in values if isinstance(v, (int, float))]
    return max(vals) if vals else None


def refresh(session: Session, compound: Compound) -> CompoundStats:
    """Recompute the stats row and side-chain rows of one compound (the caller commits)."""
    session.flush()
    cid = compound.id
    session.exec(delete(CompoundSideChain).where(CompoundSideChain.compound_id == cid))
    chains = compound.side_chains or []
    for ch in chains:
        session.add(CompoundSideChain(compound_id=cid, kind=ch["kind"], carbons=ch["carbons"],
                                      branched=bool(ch["branched"]), count=ch["count"]))
    stats = session.get(CompoundStats, cid) or CompoundStats(compound_id=cid)
    if chains:
        main = max(chains, key=lambda c: (c["count"], c["carbons"]))
        stats.chain_kind, stats.chain_carbons = main["kind"], main["carbons"]
        stats.chain_carbons_min = min(c["carbons"] for c in chains)
        stats.chain_carbons_max = max(c["carbons"] for c in chains)
        stats.chain_branched = any(c["branched"] for c in chains)
        stats.chain_count = sum(c["count"] for c in chains)
    else:
        stats.chain_kind, stats.chain_carbons = "", None
        stats.chain_carbons_min = stats.chain_carbons_max = None
        stats.chain_branched, stats.chain_count = False, 0

    batches = session.exec(select(Batch).where(Batch.compound_id == cid, Batch.archived == False)).all()  # noqa: E712
    stats.n_batches = len(batches)
    states = sorted({b.state for b in batches})
    stats.batch_states = "," + ",".join(states) + "," if states else ""
    confirmed = sum(b.identity_confirmed for b in batches)
    stats.identity_status = ("no batches" if not batches else "confirmed" if confirmed == len(batches)
                             else "partly confirmed" if confirmed else "unconfirmed")
    stats.yield_best_pct = _max(b.yield_pct for b in batches)
    stats.purity_best_pct = _max(b.purity_pct for b in batches)
    plan = session.get(CompoundPlan, cid)
    stats.life_state = life_state(plan.state if plan else None, set(states))

    ms = session.exec(
        select(Measurement).join(Batch, Batch.id == Measurement.batch_id)
        .where(Batch.compound_id == cid, live_measurement())
        .order_by(Measurement.id)
    ).all()
    stats.n_measurements = len(ms)
    kinds = sorted({m.kind for m in ms})
    stats.kinds = "," + ",".join(kinds) + "," if kinds else ""
    # Each kind fills its own fields from its live measurements (Kind.stats in server/kinds/); loops whose
    # numbers are only apparent, by themselves or because PUND contradicts them, never reach a best value.
    apparent = merit.apparent_reasons(ms)
    for kind in KINDS.values():
        if kind.stats is not None:
            for name, value in kind.stats([m for m in ms if m.kind == kind.name and m.id not in apparent]).items():
                setattr(stats, name, value)

    bars = session.exec(select(BarrierEstimate).where(BarrierEstimate.compound_id == cid,
                                                      BarrierEstimate.archived == False)  # noqa: E712
                        .order_by(BarrierEstimate.id)).all()
    measured = [b for b in bars if b.method in MEASURED_METHODS and b.dg_kcal_mol is not None]
    computed = [b for b in bars if b.method == "gfn2-xtb" and b.dg_kcal_mol is not None]
    outside = [b for b in bars if b.method in ("gfn2-xtb", "imported") and b.dg_kcal_mol is not None]
    stats.barrier_measured_kcal_mol = measured[-1].dg_kcal_mol if measured else None
    # "Computed" for filtering: the latest GFN2-xTB estimate or imported calculation.
    stats.barrier_computed_kcal_mol = outside[-1].dg_kcal_mol if outside else None
    stats.dipole_D = computed[-1].results.get("dipole_D") if computed else None
    if stats.bowl_depth_A is None and computed:  # no measured structure: the computed depth
        stats.bowl_depth_A = computed[-1].results.get("bowl_depth_A")
    times = [compound.updated_at] + [b.created_at for b in batches] + [m.created_at for m in ms] + [b.created_at for b in bars]
    stats.last_activity_at = max(t for t in times if t is not None)
    session.add(stats)
    return stats


def refresh_all(session: Session) -> int:
    """Rebuild every compound's stats (after an upgrade, or a restore), record that they follow
    :data:`RULE`, and commit; returns how many."""
    n = 0
    for compound in session.exec(select(Compound).order_by(Compound.id)).all():
        refresh(session, compound)
        n += 1
    row = session.get(SiteSetting, RULE_KEY) or SiteSetting(key=RULE_KEY)
    row.value, row.updated_by, row.updated_at = RULE, "stats rebuild", utcnow()
    session.add(row)
    session.commit()
    return n


def stored_rule(session: Session) -> Optional[str]:
    """The rule the stored rows were last rebuilt under; None for a database from before the record."""
    row = session.get(SiteSetting, RULE_KEY)
    return row.value if row is not None else None


def ensure_current(session: Session) -> int:
    """Rebuild every row once when some are missing or were built under another rule; returns how many
    were rebuilt (0 when nothing was stale, so running it again changes nothing)."""
    if stored_rule(session) == RULE and not missing(session):
        return 0
    try:
        return refresh_all(session)
    except IntegrityError:
        # another process (a second server started at the same time) recorded the rule first, so it rebuilt
        # the same rows from the same evidence
        session.rollback()
        if stored_rule(session) != RULE:
            raise
        return 0


def missing(session: Session) -> int:
    have = session.exec(select(func.count()).select_from(CompoundStats)).one()
    total = session.exec(select(func.count()).select_from(Compound)).one()
    return total - have
