"""Keep CompoundStats and CompoundSideChain in step with a compound's evidence.

``refresh(session, compound)`` recomputes one compound's row from its batches,
measurements and barriers (a few small queries); services call it before they commit,
so the registry table and the explorer never read stale figures.
"""

from __future__ import annotations

from collections import Counter
from typing import Any, Iterable, Optional

from sqlalchemy import delete, func
from sqlmodel import Session, select

from ..models import BarrierEstimate, Batch, Compound, CompoundSideChain, CompoundStats, CrystalPhase, Measurement

MEASURED_METHODS = ("coalescence", "eyring")  # barriers measured by dynamic NMR


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
    stats.yield_best_pct = _max(b.yield_pct for b in batches)
    stats.purity_best_pct = _max(b.purity_pct for b in batches)

    ms = session.exec(
        select(Measurement).join(Batch, Batch.id == Measurement.batch_id)
        .where(Batch.compound_id == cid, Measurement.archived == False)  # noqa: E712
        .order_by(Measurement.id)
    ).all()
    stats.n_measurements = len(ms)
    kinds = sorted({m.kind for m in ms})
    stats.kinds = "," + ",".join(kinds) + "," if kinds else ""
    loops = [m.results for m in ms if m.kind == "pe_loop" and m.verdict == "ferroelectric"]
    best = max(loops, key=lambda r: r.get("pr_uC_cm2") or 0, default=None)
    stats.pr_max_uC_cm2 = best.get("pr_uC_cm2") if best else None
    stats.ec_kV_cm = best.get("ec_kV_cm") if best else None
    stats.ps_uC_cm2 = best.get("ps_uC_cm2") if best else None
    diel = [m.results for m in ms if m.kind == "dielectric" and m.results.get("t_peak_K") is not None]
    last_diel = diel[-1] if diel else {}
    stats.t_peak_K = last_diel.get("t_peak_K")
    stats.eps_peak = last_diel.get("eps_peak")
    stats.curie_constant_K = last_diel.get("curie_constant_K")
    # The lowest-temperature DSC peak that is not melting (see verdicts.MELTING_DS_J_MOLK).
    from .verdicts import _looks_like_melting

    peaks = sorted((p for m in ms if m.kind == "dsc" for p in m.results.get("peaks") or []
                    if p.get("peak_K") and not _looks_like_melting(p)), key=lambda p: p["peak_K"])
    first: dict[str, Any] = peaks[0] if peaks else {}
    stats.dsc_t_K, stats.dsc_ds_J_molK, stats.dsc_n_states = first.get("peak_K"), first.get("ds_J_molK"), first.get("n_states")

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
    crystal_depths = [m.results.get("bowl_depth_A") for m in ms if m.kind == "crystal"]
    stats.bowl_depth_A = _max(crystal_depths) if _max(crystal_depths) is not None else (
        computed[-1].results.get("bowl_depth_A") if computed else None)

    phases = session.exec(select(CrystalPhase).where(CrystalPhase.compound_id == cid)).all()
    stats.polar_phase = any(p.polar for p in phases) if phases else None
    groups = Counter(p.space_group for p in phases if p.space_group)
    stats.space_groups = ", ".join(sorted(groups))[:200]
    times = [compound.updated_at] + [b.created_at for b in batches] + [m.created_at for m in ms] + [b.created_at for b in bars]
    stats.last_activity_at = max(t for t in times if t is not None)
    session.add(stats)
    return stats


def refresh_all(session: Session) -> int:
    """Rebuild every compound's stats (after an upgrade, or a restore); returns how many."""
    n = 0
    for compound in session.exec(select(Compound).order_by(Compound.id)).all():
        refresh(session, compound)
        n += 1
    session.commit()
    return n


def missing(session: Session) -> int:
    have = session.exec(select(func.count()).select_from(CompoundStats)).one()
    total = session.exec(select(func.count()).select_from(Compound)).one()
    return total - have
