"""Inversion barriers of a compound."""

from __future__ import annotations

from typing import Annotated, Any, Optional

from fastapi import APIRouter, Body, Query
from pydantic import Field

from ...deps import Reader, RowId, SessionDep, Writer
from ...services import accounts, barriers, registry
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND, Closed

router = APIRouter(tags=["barriers"])


class FlagOut(Closed):
    code: str
    message: str


class BarrierOut(Closed):
    """A stored barrier (``barriers.barrier_read``); ``results`` holds the method's own results."""

    id: int
    compound: str
    method: str
    measured: bool = Field(description="from an experiment (coalescence, Eyring) rather than a calculation")
    energy: str = Field(description="'free' (a measured dG++) or 'electronic' (a computed dE++)")
    dg_kcal_mol: Optional[float]
    dg_err_kcal_mol: Optional[float]
    t_K: Optional[float] = Field(description="the temperature the barrier belongs to, K")
    model: str
    spectrometer_MHz: Optional[float]
    nucleus: str
    solvent: str
    results: dict[str, Any]
    measurement: Optional[int]
    job: Optional[int]
    analysis_version: str
    notes: str
    created_at: str
    created_by: str


class BarrierPage(Closed):
    items: list[BarrierOut]
    total: int


class BarrierAdded(BarrierOut):
    """The stored barrier with its method's results also at the top level, as each method gives them
    (server/analysis/kinetics.py: CoalescenceResult, EyringFit, ImportedBarrier); only the added method's appear."""

    flags: list[FlagOut] = []
    dg_kJ_mol: Optional[float] = None
    # coalescence (Gutowsky-Holm)
    k_s: Optional[float] = Field(None, description="exchange rate at coalescence, 1/s")
    dnu_Hz: Optional[float] = None
    j_Hz: Optional[float] = None
    tc_err_K: Optional[float] = None
    dnu_err_Hz: Optional[float] = None
    j_err_Hz: Optional[float] = None
    # Eyring fit
    dh_kcal_mol: Optional[float] = None
    ds_cal_molK: Optional[float] = None
    dh_err_kcal_mol: Optional[float] = None
    ds_err_cal_molK: Optional[float] = None
    dg298_kcal_mol: Optional[float] = None
    dg298_err_kcal_mol: Optional[float] = None
    ea_kJ_mol: Optional[float] = None
    ea_err_kJ_mol: Optional[float] = None
    ln_a: Optional[float] = Field(None, description="ln of the Arrhenius prefactor in 1/s")
    ln_a_err: Optional[float] = None
    r2: Optional[float] = None
    points: Optional[int] = Field(None, description="the number of (T, k) points fitted")
    t_min_K: Optional[float] = None
    t_max_K: Optional[float] = None
    weighted: Optional[bool] = None
    kappa: Optional[float] = Field(None, description="transmission coefficient assumed")
    # imported
    level_of_theory: Optional[str] = None


class RateOut(Closed):
    """Inversion rate at ``t_K`` (server/analysis/kinetics.py RateSummary)."""

    dg_kcal_mol: float = Field(description="dG++ at t_K, the one the rate uses")
    t_K: float
    k_s: float = Field(description="inversion rate, 1/s")
    half_life_s: float
    frequency_Hz: Optional[float]
    keeps_up: Optional[bool] = Field(description="inversion is faster than the field's period (None without a frequency)")
    flags: list[FlagOut]
    dh_kcal_mol: Optional[float]
    ds_cal_molK: Optional[float]
    ds_assumed_zero: bool


@router.post("/compounds/{code}/barriers", status_code=201, response_model=BarrierAdded,
             response_model_exclude_unset=True, responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def add_barrier(
    code: str,
    data: Annotated[barriers.BarrierIn, Body(discriminator="method")],
    session: SessionDep,
    actor: Writer,
) -> dict[str, Any]:
    """Add a barrier: `coalescence` {tc_K, dnu_Hz}, `eyring` {points: [[T, k], ...]} or `imported`
    {dg_kcal_mol, level_of_theory}. The answer carries `dg_kcal_mol`, `t_K` and the method's own results
    (`k_s` for coalescence; `dh_kcal_mol`, `ds_cal_molK` and their errors for Eyring fits)."""
    compound = registry.get_compound(session, code)
    row = barriers.add_barrier(session=session, compound=compound, data=data, actor=actor.label)
    out = barriers.barrier_read(session, row)
    return {**row.results, **out}


@router.get("/compounds/{code}/barriers", responses={**AUTH_ERRORS, **NOT_FOUND})
def list_barriers(code: str, session: SessionDep, actor: Reader) -> BarrierPage:
    compound = registry.get_compound(session, code)
    items = [barriers.barrier_read(session, b) for b in barriers.list_barriers(session, compound)]
    items = accounts.hide_people(items, sees_people=actor.sees_people)
    return {"items": items, "total": len(items)}


@router.get("/barriers/{barrier_id}/rate", responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def barrier_rate(
    barrier_id: RowId,
    session: SessionDep,
    actor: Reader,
    t_K: float = Query(298.15, description="temperature, K"),
    frequency_Hz: Optional[float] = Query(None, description="drive frequency, Hz"),
) -> RateOut:
    """Inversion rate and half-life at t_K; with a frequency, whether inversion keeps up with the field."""
    return barriers.rates(barriers.get_barrier(session, barrier_id), t_K=t_K, frequency_Hz=frequency_Hz)
