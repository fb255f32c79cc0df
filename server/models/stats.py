"""Denormalised per-compound figures for filtering, sorting and plotting.

Kept up to date by server.services.stats.refresh() whenever a compound's batches,
measurements, barriers or verdict change; never edited by hand. One row per compound,
so the registry table and the explorer filter and sort with plain indexed SQL.
"""

from __future__ import annotations

from datetime import datetime
from typing import Optional

from sqlmodel import Field, SQLModel

from .types import UTCDateTime


class CompoundSideChain(SQLModel, table=True):
    """One perceived side-chain group of a compound (kind, carbons, branched) x count."""

    id: Optional[int] = Field(default=None, primary_key=True)
    compound_id: int = Field(foreign_key="compound.id", index=True)
    kind: str = Field(max_length=20, index=True)
    carbons: int = Field(index=True)
    branched: bool = False
    count: int = 1


#: A compound's identity status over its live batches (the registry's column and filter).
IDENTITY_STATES: tuple[str, ...] = ("confirmed", "partly confirmed", "unconfirmed", "no batches")


class CompoundStats(SQLModel, table=True):
    compound_id: int = Field(foreign_key="compound.id", primary_key=True)
    n_batches: int = Field(default=0, index=True)
    n_measurements: int = Field(default=0, index=True)
    kinds: str = Field(default="", max_length=200)  # ",pe_loop,dsc," for LIKE filters
    batch_states: str = Field(default="", max_length=200)  # ",made,failed,"
    # IDENTITY_STATES: whether the live batches' identity is confirmed (all, some, none, no batches)
    identity_status: str = Field(default="no batches", max_length=20, index=True)
    chain_kind: str = Field(default="", max_length=20, index=True)  # the most frequent side-chain kind
    chain_carbons: Optional[int] = Field(default=None, index=True)  # carbons of that chain
    chain_carbons_min: Optional[int] = None
    chain_carbons_max: Optional[int] = None
    chain_branched: bool = False
    chain_count: int = 0
    barrier_measured_kcal_mol: Optional[float] = Field(default=None, index=True)
    barrier_computed_kcal_mol: Optional[float] = Field(default=None, index=True)
    bowl_depth_A: Optional[float] = None
    dipole_D: Optional[float] = None
    pr_max_uC_cm2: Optional[float] = Field(default=None, index=True)  # the largest Pr of a live loop judged ferroelectric
    pr_max_t_K: Optional[float] = None  # the temperature of that loop
    pr_max_emax_kV_cm: Optional[float] = None  # its field amplitude
    pr_max_measurement_id: Optional[int] = None  # that loop (its specimen and page)
    ec_kV_cm: Optional[float] = Field(default=None, index=True)
    ps_uC_cm2: Optional[float] = None
    t_peak_K: Optional[float] = Field(default=None, index=True)
    eps_peak: Optional[float] = None
    curie_constant_K: Optional[float] = None
    dsc_t_K: Optional[float] = None
    dsc_ds_J_molK: Optional[float] = None
    dsc_n_states: Optional[float] = None
    # the Arrhenius activation energy of dielectric relaxation (solid state; kinds/dielectric_spectrum.py) of the
    # latest live spectrum that gives one, its standard error, whether it is apparent (ln tau curved in 1/T: a
    # mean over the range) and that spectrum
    relax_ea_kcal_mol: Optional[float] = None
    relax_ea_err_kcal_mol: Optional[float] = None
    relax_ea_apparent: Optional[bool] = None
    relax_ea_measurement_id: Optional[int] = None
    yield_best_pct: Optional[float] = None
    purity_best_pct: Optional[float] = None
    polar_phase: Optional[bool] = None
    life_state: str = Field(default="registered", max_length=20, index=True)  # server/models/planning.py
    space_groups: str = Field(default="", max_length=200)
    last_activity_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime, index=True)
