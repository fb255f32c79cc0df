"""Inversion barriers of a compound."""

from __future__ import annotations

from typing import Annotated, Any, Optional

from fastapi import APIRouter, Body, Query

from ...deps import Reader, RowId, SessionDep, Writer
from ...services import accounts, barriers, registry
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["barriers"])


@router.post("/compounds/{code}/barriers", status_code=201, responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
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
def list_barriers(code: str, session: SessionDep, actor: Reader) -> dict[str, Any]:
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
) -> dict[str, Any]:
    """Inversion rate and half-life at t_K; with a frequency, whether inversion keeps up with the field."""
    return barriers.rates(barriers.get_barrier(session, barrier_id), t_K=t_K, frequency_Hz=frequency_Hz)
