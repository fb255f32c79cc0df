"""Inversion barriers: measured (coalescence, Eyring fits of rate tables), imported, computed."""

from __future__ import annotations

from typing import Any, Literal, Optional, Union

from pydantic import BaseModel, Field
from sqlmodel import Session, select

from .. import access
from ..access import Actor
from ..analysis import kinetics
from ..analysis.calibration import (INTERVAL_LIMIT_KCAL, MIN_PAIRS_PER_BRIDGE, CalibrationPair, CalibrationSet,
                                    calibrate_pairs)
from ..analysis.results import jsonable
from ..errors import InputError
from ..models import BarrierEstimate, Compound, CompoundStats, Measurement, Scaffold, is_live
from ..plots import figure_json
from ..plots.kinetics import calibration_figure
from . import audit, stats, verdicts
from .stats import MEASURED_METHODS
from .errors import NotFound

# Barriers that are electronic energies (GFN2-xTB, imported calculations), not free energies.
ELECTRONIC_METHODS = ("gfn2-xtb", "imported")


class NmrConditionsIn(BaseModel):
    """Where a dynamic-NMR barrier was measured: dnu in Hz scales with the field, and the
    barrier can depend on the solvent."""

    spectrometer_MHz: Optional[float] = Field(default=None, gt=0, lt=5000,
                                              description="spectrometer frequency for the observed nucleus, MHz")
    nucleus: str = Field(default="", max_length=10, description="observed nucleus, e.g. 1H, 13C, 19F")
    solvent: str = Field(default="", max_length=80, description="solvent, e.g. CD2Cl2")


class CoalescenceIn(NmrConditionsIn):
    method: Literal["coalescence"]
    tc_K: float = Field(description="coalescence temperature, K")
    dnu_Hz: float = Field(description="peak separation in the slow-exchange limit, Hz")
    j_Hz: Optional[float] = Field(default=None, description="coupling of an exchanging AB pair, Hz (e.g. 2J of CH2)")
    tc_err_K: Optional[float] = None
    dnu_err_Hz: Optional[float] = None
    j_err_Hz: Optional[float] = None
    notes: str = ""


class EyringIn(NmrConditionsIn):
    method: Literal["eyring"]
    points: list[tuple[float, float]] = Field(description="[[T (K), k (1/s)], ...], at least three")
    notes: str = ""


class ImportedIn(BaseModel):
    method: Literal["imported"]
    dg_kcal_mol: float
    level_of_theory: str = Field(min_length=1, max_length=200)
    notes: str = ""


BarrierIn = Union[CoalescenceIn, EyringIn, ImportedIn]


def add_barrier(*, session: Session, compound: Compound, data: BarrierIn, actor: str) -> BarrierEstimate:
    """Compute and store a barrier from a coalescence point, rate points or an outside value."""
    if isinstance(data, CoalescenceIn):
        r = kinetics.coalescence(data.tc_K, data.dnu_Hz, tc_err_K=data.tc_err_K, dnu_err_Hz=data.dnu_err_Hz,
                                 j_Hz=data.j_Hz, j_err_Hz=data.j_err_Hz)
        row = BarrierEstimate(compound_id=compound.id, method="coalescence", dg_kcal_mol=r.dg_kcal_mol,
                              dg_err_kcal_mol=r.dg_err_kcal_mol, t_K=r.tc_K, results=jsonable(r.to_dict()),
                              model=r.model, analysis_version=kinetics.VERSION)
    elif isinstance(data, EyringIn):
        if len(data.points) < 3:
            raise InputError("an Eyring fit needs at least three (T, k) points", field="points")
        t, k = zip(*data.points)
        r = kinetics.eyring_fit(list(t), list(k))
        row = _eyring_row(compound, r)
    else:
        r = kinetics.imported_barrier(data.dg_kcal_mol, data.level_of_theory, data.notes or None)
        row = BarrierEstimate(compound_id=compound.id, method="imported", dg_kcal_mol=r.dg_kcal_mol,
                              results=jsonable(r.to_dict()), model=data.level_of_theory,
                              analysis_version=kinetics.VERSION)
    if isinstance(data, NmrConditionsIn):
        row.spectrometer_MHz, row.nucleus, row.solvent = data.spectrometer_MHz, data.nucleus.strip(), data.solvent.strip()
    row.notes = data.notes
    row.created_by = actor
    session.add(row)
    session.flush()
    audit.record(session, actor=actor, action="barrier.create", entity="barrier", code=str(row.id),
                 compound_id=compound.id, after=audit.snapshot(row))
    stats.refresh(session, compound)
    # a measured barrier can contradict a computed planar minimum (analysis/verdict.py)
    verdicts.recompute(session, compound, actor=actor)
    session.commit()
    session.refresh(row)
    return row


EYRING_MODEL = "Eyring fit of ln(k/T) on 1/T"


def _eyring_row(compound: Compound, fit: kinetics.EyringFit, measurement_id: Optional[int] = None) -> BarrierEstimate:
    row = BarrierEstimate(compound_id=compound.id, method="eyring", measurement_id=measurement_id)
    _set_eyring(row, jsonable(fit.to_dict()), kinetics.VERSION)
    return row


def _set_eyring(row: BarrierEstimate, results: dict[str, Any], version: str) -> None:
    row.dg_kcal_mol, row.dg_err_kcal_mol = results.get("dg298_kcal_mol"), results.get("dg298_err_kcal_mol")
    row.t_K, row.results, row.model, row.analysis_version = 298.15, results, EYRING_MODEL, version


def sync_rate_table_barrier(session: Session, *, compound: Compound, measurement: Measurement, actor: str) -> None:
    """The barrier row of an uploaded rate table (kind nmr_rates), kept in step with it.

    Created with the measurement, rewritten from its stored fit after a re-analysis, archived
    and restored with it (the caller commits).
    """
    row = session.exec(select(BarrierEstimate).where(BarrierEstimate.measurement_id == measurement.id)
                       .order_by(BarrierEstimate.id)).first()
    if row is None:
        row = BarrierEstimate(compound_id=compound.id, method="eyring", measurement_id=measurement.id,
                              created_by=actor)
    _set_eyring(row, dict(measurement.results), measurement.analysis_version)
    c = measurement.conditions or {}
    row.spectrometer_MHz, row.nucleus, row.solvent = c.get("spectrometer_MHz"), c.get("nucleus") or "", c.get("solvent") or ""
    row.archived = not is_live(session, measurement)
    session.add(row)


def list_barriers(session: Session, compound: Compound) -> list[BarrierEstimate]:
    return list(session.exec(select(BarrierEstimate).where(BarrierEstimate.compound_id == compound.id,
                                                           BarrierEstimate.archived == False)  # noqa: E712
                             .order_by(BarrierEstimate.id)).all())


def get_barrier(session: Session, barrier_id: int) -> BarrierEstimate:
    row = session.get(BarrierEstimate, barrier_id)
    if row is None:
        raise NotFound(f"no barrier {barrier_id}")
    return row


def barrier_read(session: Session, row: BarrierEstimate) -> dict[str, Any]:
    compound = session.get(Compound, row.compound_id)
    return {
        "id": row.id,
        "compound": compound.code,
        "method": row.method,
        "measured": row.method in MEASURED_METHODS,
        # a computed barrier is an electronic energy difference dE++, a measured one a free energy dG++
        "energy": "electronic" if row.method in ELECTRONIC_METHODS else "free",
        "dg_kcal_mol": row.dg_kcal_mol,
        "dg_err_kcal_mol": row.dg_err_kcal_mol,
        "t_K": row.t_K,
        "model": row.model,
        "spectrometer_MHz": row.spectrometer_MHz,
        "nucleus": row.nucleus,
        "solvent": row.solvent,
        "results": row.results,
        "measurement": row.measurement_id,
        "job": row.job_id,
        "analysis_version": row.analysis_version,
        "notes": row.notes,
        "created_at": row.created_at.isoformat(),
        "created_by": row.created_by,
    }


def rates(row: BarrierEstimate, *, t_K: float, frequency_Hz: Optional[float]) -> dict[str, Any]:
    """Inversion rate and half-life at t_K, and whether inversion keeps up with a field of frequency_Hz."""
    if row.dg_kcal_mol is None:
        raise InputError("this barrier has no value", field="barrier")
    res = row.results or {}
    dh, ds = res.get("dh_kcal_mol"), res.get("ds_cal_molK")
    summary = kinetics.rate_summary(row.dg_kcal_mol, t_K, frequency_Hz,
                                    dh_kcal_mol=dh if ds is not None else None,
                                    ds_cal_molK=ds if dh is not None else None)
    out = jsonable(summary.to_dict())
    if row.method in ELECTRONIC_METHODS:
        out["flags"].append({"code": "electronic_energy", "message": (
            "This barrier is an electronic energy difference (dE++, no zero-point, thermal or entropy terms); "
            "the rate treats it as dG++, a rough estimate only.")})
    return out


def solid_against_solution(stats: Optional[CompoundStats], barrier_rows: list[dict[str, Any]]) -> Optional[dict[str, Any]]:
    """The compound's dielectric-relaxation Ea (solid; stored in ``stats`` by kinds/dielectric_spectrum.py from
    the latest live spectrum that gives one) beside the latest measured ΔH‡ from an Eyring fit of NMR rates
    (solution), with the difference Ea − ΔH‡ and its combined standard error. For one molecular process
    Ea = ΔH‡ + RT (Eyring 1935; RT is 0.5 kcal/mol near 250 K, inside the usual errors): a larger difference
    is a finding about the packing, not an error. ``apparent``: ln τ is curved in 1/T, so Ea is a mean over the
    range. None without both."""
    solution = [b for b in barrier_rows if b.get("measured") and (b.get("results") or {}).get("dh_kcal_mol") is not None]
    if stats is None or stats.relax_ea_kcal_mol is None or not solution:
        return None
    b = solution[-1]
    ea, ea_err = stats.relax_ea_kcal_mol, stats.relax_ea_err_kcal_mol
    dh, dh_err = b["results"]["dh_kcal_mol"], b["results"].get("dh_err_kcal_mol")
    err = (ea_err ** 2 + dh_err ** 2) ** 0.5 if ea_err is not None and dh_err is not None else None
    return {"measurement": stats.relax_ea_measurement_id, "ea_kcal_mol": ea, "ea_err_kcal_mol": ea_err,
            "apparent": bool(stats.relax_ea_apparent), "barrier": b["id"], "dh_kcal_mol": dh,
            "dh_err_kcal_mol": dh_err, "difference_kcal_mol": ea - dh, "difference_err_kcal_mol": err}


def _latest(rows: list[BarrierEstimate], methods: tuple[str, ...]) -> Optional[BarrierEstimate]:
    chosen = [r for r in rows if r.method in methods and r.dg_kcal_mol is not None and not r.archived]
    return chosen[-1] if chosen else None


def _bridge(session: Session, compound: Compound) -> Optional[str]:
    """The compound's bridge type (its scaffold's bridge, e.g. ``CH2`` or ``S``); None without a scaffold."""
    sc = session.get(Scaffold, compound.scaffold_id) if compound.scaffold_id else None
    return (sc.bridge or None) if sc else None


def _barriers_seen_by(session: Session, actor: Optional[Actor], *conditions: Any) -> list[BarrierEstimate]:
    """Barrier rows of compounds whose structure ``actor`` may see (``access.structure_visible``): a computed
    barrier comes from the structure, and a calibration line pooled over an embargoed pair would carry it into
    every calibrated value shown to a caller who may not see that compound."""
    stmt = (select(BarrierEstimate).join(Compound, Compound.id == BarrierEstimate.compound_id)
            .where(access.structure_visible(actor), *conditions).order_by(BarrierEstimate.id))
    return list(session.exec(stmt).all())


def calibration_pairs(session: Session, *, actor: Optional[Actor]) -> list[dict[str, Any]]:
    """Per compound ``actor`` may see, its latest measured barrier (dynamic NMR) and latest GFN2-xTB estimate,
    with the bridge type and whether the computed minimum was planar."""
    rows = _barriers_seen_by(session, actor)
    by_compound: dict[int, list[BarrierEstimate]] = {}
    for r in rows:
        by_compound.setdefault(r.compound_id, []).append(r)
    pairs = []
    for cid, items in by_compound.items():
        m, c = _latest(items, MEASURED_METHODS), _latest(items, ("gfn2-xtb",))
        if m and c:
            compound = session.get(Compound, cid)
            if compound.archived:
                continue
            pair = CalibrationPair(compound.code, m.dg_kcal_mol, c.dg_kcal_mol, bridge=_bridge(session, compound),
                                   planar=bool((c.results or {}).get("planar")))
            pairs.append({"code": compound.code, "measured": m.dg_kcal_mol, "computed": c.dg_kcal_mol,
                          "measured_method": m.method, "bridge": pair.bridge, "planar": pair.collapsed})
    return sorted(pairs, key=lambda p: p["code"])


def _calibration_set(pairs: list[dict[str, Any]]) -> CalibrationSet:
    return calibrate_pairs([CalibrationPair(p["code"], p["measured"], p["computed"], bridge=p["bridge"],
                                            planar=p["planar"]) for p in pairs])


def calibrated_estimates(session: Session, cal: CalibrationSet, *, actor: Optional[Actor]) -> list[dict[str, Any]]:
    """Every visible compound's latest computed barrier beside its calibrated value and 95 % prediction interval
    (:meth:`CalibrationSet.predict`: none for a planar minimum or an interval wider than the limit)."""
    rows = _barriers_seen_by(session, actor, BarrierEstimate.method == "gfn2-xtb",
                             BarrierEstimate.archived == False)  # noqa: E712
    latest: dict[int, BarrierEstimate] = {r.compound_id: r for r in rows if r.dg_kcal_mol is not None}
    out = []
    for cid, r in sorted(latest.items()):
        compound = session.get(Compound, cid)
        pred = cal.predict(r.dg_kcal_mol, _bridge(session, compound), planar=bool((r.results or {}).get("planar")))
        out.append({"code": compound.code, "computed": r.dg_kcal_mol, **pred})
    return out


def barrier_rows(session: Session, compound: Compound, *, t_K: float,
                 frequency_Hz: Optional[float]) -> list[dict[str, Any]]:
    """Each barrier of ``compound`` with its inversion rate at ``t_K`` (Eyring equation, see
    ``analysis.kinetics.rate_summary``) and whether it keeps up with ``frequency_Hz``."""
    rows = []
    for b in list_barriers(session, compound):
        row = barrier_read(session, b)
        row["rate"] = rates(b, t_K=t_K, frequency_Hz=frequency_Hz) if b.dg_kcal_mol is not None else None
        rows.append(row)
    return rows


def current_calibration(session: Session, *, actor: Optional[Actor]) -> CalibrationSet:
    """The calibration lines (pooled, and per bridge type with enough pairs) from the pairs ``actor`` may see."""
    return _calibration_set(calibration_pairs(session, actor=actor))


def calibrated_for(session: Session, compound: Compound, estimates: list[BarrierEstimate], *,
                   actor: Optional[Actor]) -> dict[int, dict[str, Any]]:
    """Estimate id -> its calibrated value (:meth:`CalibrationSet.predict`) for the compound's computed
    estimates, on the lines ``actor`` may see; empty when no line can be fitted."""
    cal = current_calibration(session, actor=actor)
    bridge = _bridge(session, compound)
    if not (cal.pooled.ok or (bridge and bridge in cal.by_bridge)):
        return {}
    return {e.id: cal.predict(e.dg_kcal_mol, bridge, planar=bool((e.results or {}).get("planar")))
            for e in estimates if e.dg_kcal_mol is not None}


def calibration_view(session: Session, *, actor: Optional[Actor]) -> dict[str, Any]:
    """The calibration page's data, from the compounds ``actor`` may see: pairs (planar ones marked as left
    out), the pooled fit with its prediction band (as a figure), the per-bridge lines and the calibrated
    estimates."""
    pairs = calibration_pairs(session, actor=actor)
    cset = _calibration_set(pairs)
    cal = cset.pooled
    fig = figure_json(calibration_figure(cal, list(cal.labels))) if cset.used else None
    return {"cal": cal, "pairs": pairs, "figure": fig, "by_bridge": cset.by_bridge,
            "predictions": calibrated_estimates(session, cset, actor=actor), "limit_kcal_mol": INTERVAL_LIMIT_KCAL,
            "min_pairs_per_bridge": MIN_PAIRS_PER_BRIDGE}
