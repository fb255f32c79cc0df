"""Planning tables: target compounds (their plan), reagents with entered hazard data, synthesis routes
(ordered steps of a batch) and lineage (which batches a batch was made from).

A compound's life state is ``planned`` -> ``in_synthesis`` -> ``made`` (derived: a live batch that is
made, impure or used up) or ``abandoned`` (with a reason). A compound registered without a plan and
without batches is ``registered``. The stored part is :class:`CompoundPlan`; the derived state lives in
``CompoundStats.life_state`` (``server/services/planning.life_state``) so views filter on it with SQL.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow

PLAN_STATES = ("planned", "in_synthesis", "abandoned")  # what a person sets
LIFE_STATES = ("registered", "planned", "in_synthesis", "made", "abandoned")  # what the views show
PRIORITIES = (1, 2, 3, 4, 5)  # 1 = make first


class CompoundPlan(SQLModel, table=True):
    """The plan of a target compound: state, rationale, priority, who has claimed it."""

    compound_id: int = Field(foreign_key="compound.id", primary_key=True)
    state: str = Field(default="planned", max_length=20, index=True)
    rationale: str = Field(default="", sa_type=sa.Text)
    priority: int = 3
    assignee: str = Field(default="", max_length=120)
    reason: str = Field(default="", sa_type=sa.Text)  # why it was abandoned
    updated_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    updated_by: str = Field(default="", max_length=120)


class Reagent(SQLModel, table=True):
    """A reagent the group uses, with the GHS hazard data a person entered from the supplier's SDS.

    Nothing here is filled in by the program: empty ``hazard_codes`` means "no hazard data entered".
    """

    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(max_length=200, unique=True, index=True)
    smiles: str = Field(default="", sa_type=sa.Text)
    hazard_codes: list[str] = Field(default_factory=list, sa_type=sa.JSON)  # e.g. H250, EUH014
    hazard_statements: str = Field(default="", sa_type=sa.Text)  # the SDS wording, as entered
    pictograms: list[str] = Field(default_factory=list, sa_type=sa.JSON)  # GHS01 ... GHS09
    sds_source: str = Field(default="", max_length=400)  # supplier, product number, SDS revision date
    entered_by: str = Field(default="", max_length=120)
    entered_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)


class SynthesisStep(SQLModel, table=True):
    """One step of the route recorded for a batch, in order."""

    id: Optional[int] = Field(default=None, primary_key=True)
    batch_id: int = Field(foreign_key="batch.id", index=True)
    position: int
    description: str = Field(default="", sa_type=sa.Text)
    # [{"reagent": name, "reagent_id": id|None, "smiles": str, "amount": "2.5 mmol", "amount_value": 2.5,
    #   "amount_unit": "mmol", "amount_dimension": "amount"|"mass"|"volume", "equivalents": 1.1|None}]
    reagents: list[dict[str, Any]] = Field(default_factory=list, sa_type=sa.JSON)
    solvent: str = Field(default="", max_length=200)
    temperature_K: Optional[float] = None
    time_h: Optional[float] = None
    yield_pct: Optional[float] = None

    __table_args__ = (sa.UniqueConstraint("batch_id", "position", name="uq_step_batch_position"),)


class BatchPrecursor(SQLModel, table=True):
    """Lineage: ``batch_id`` was made from ``precursor_id`` (a batch of a registered intermediate)."""

    id: Optional[int] = Field(default=None, primary_key=True)
    batch_id: int = Field(foreign_key="batch.id", index=True)
    precursor_id: int = Field(foreign_key="batch.id", index=True)

    __table_args__ = (sa.UniqueConstraint("batch_id", "precursor_id", name="uq_batch_precursor"),)


MADE_BATCH_STATES = ("made", "impure", "used_up")  # a batch in one of these means the compound exists


def life_state(plan_state: Optional[str], batch_states: set[str] | frozenset[str]) -> str:
    """A compound's life state from its plan (None: never planned) and its live batches' states.

    Abandoned wins (a person said so, with a reason); else a live batch that was made makes the
    compound ``made``; else the plan's state; a compound never planned and never made is ``registered``.
    """
    if plan_state == "abandoned":
        return "abandoned"
    if set(batch_states) & set(MADE_BATCH_STATES):
        return "made"
    return plan_state or "registered"


# --- API shapes ---------------------------------------------------------------------------------


class RankingItem(SQLModel):
    rank: int
    code: str
    score: Optional[float] = Field(description="the goal's acquisition value (see `rule`)")
    expected_improvement: Optional[float] = Field(description="in the property's unit")
    p_switch: Optional[float] = Field(description="predicted probability of a switching verdict")
    predicted: Optional[float] = Field(description="predicted value of the property, in `unit`")
    sd: Optional[float]
    low: Optional[float] = Field(description="95 % interval of a new measurement, low end")
    high: Optional[float]
    explanation: str


class ModelSummary(SQLModel):
    property: str
    unit: str
    n: int = Field(description="measured compounds the model was fitted to")
    enough_data: bool
    message: str
    model: Optional[str] = Field(description="gp or scaffold_mean: the one of lower leave-one-out error")
    features: list[str]
    loo_rmse: Optional[float] = Field(description="leave-one-out RMSE of the Gaussian process")
    loo_rmse_scaffold_mean: Optional[float]
    loo_coverage_95: Optional[float] = Field(description="fraction of left-out values inside their 95 % interval")
    best_measured: Optional[float]
    best_code: Optional[str]
    n_with_estimates: int = Field(0, description="measured compounds with computed (GFN2-xTB) estimates")
    estimates_used: bool = Field(False, description="whether a model with the estimates predicts the targets "
                                 "that have them (its leave-one-out error is lower)")
    loo_rmse_with_estimates: Optional[float] = None
    loo_rmse_without_estimates: Optional[float] = None


class SwitchingSummary(SQLModel):
    n: int
    n_switching: int
    enough_data: bool
    message: str
    model: Optional[str] = Field(description="gp or bridge_rate: the one of lower leave-one-out Brier score")
    loo_brier: Optional[float]
    loo_brier_bridge_rate: Optional[float]


class RankingRead(SQLModel):
    goal: str
    goal_label: str
    rule: str = Field(description="the acquisition rule the ranking follows")
    property: Optional[str]
    unit: Optional[str]
    reference_t_K: Optional[float] = Field(None, description="the temperature the Pr goal's values are at")
    enough_data: bool
    notes: list[str]
    model: Optional[ModelSummary]
    switching_model: SwitchingSummary
    items: list[RankingItem]
    method: str
    version: str


class ReagentCreate(SQLModel):
    name: str = Field(min_length=1, max_length=200)
    smiles: str = Field(default="", max_length=2000, description="structure, if it has one worth recording")
    hazard_codes: list[str] = Field(default_factory=list, max_length=60,
                                    description="GHS hazard-statement codes from the supplier's SDS, e.g. H250")
    hazard_statements: str = Field(default="", max_length=20000, description="the statements' wording, from the SDS")
    pictograms: list[str] = Field(default_factory=list, max_length=9, description="GHS01 ... GHS09")
    sds_source: str = Field(default="", max_length=400, description="supplier, product number, SDS revision date")


class ReagentUpdate(SQLModel):
    smiles: Optional[str] = Field(default=None, max_length=2000)
    hazard_codes: Optional[list[str]] = Field(default=None, max_length=60)
    hazard_statements: Optional[str] = Field(default=None, max_length=20000)
    pictograms: Optional[list[str]] = Field(default=None, max_length=9)
    sds_source: Optional[str] = Field(default=None, max_length=400)


class CautionRead(SQLModel):
    key: str
    title: str
    text: str


class ReagentRead(SQLModel):
    id: int
    name: str
    smiles: str
    hazard_codes: list[str]
    hazard_statements: str
    pictograms: list[str]
    sds_source: str
    hazard_data_entered: bool
    notice: str = Field(description="what to do when no hazard data is entered")
    cautions: list[CautionRead] = Field(description="the campaign's general cautions this structure calls for")
    entered_by: str
    entered_at: Optional[datetime]


class ReagentUse(SQLModel):
    reagent: str = Field(min_length=1, max_length=200, description="a reagent's name (from the reagent table, or new)")
    smiles: str = Field(default="", max_length=2000)
    amount: Optional[str] = Field(default=None, max_length=60, description="amount, mass or volume, e.g. '2.5 mmol'")
    equivalents: Optional[float] = Field(default=None, gt=0, le=1000)


class RouteStepIn(SQLModel):
    description: str = Field(default="", max_length=20000)
    reagents: list[ReagentUse] = Field(default_factory=list, max_length=40)
    solvent: str = Field(default="", max_length=200)
    temperature: Optional[str] = Field(default=None, max_length=60, description="e.g. '-78 degC' or '353 K'")
    time: Optional[str] = Field(default=None, max_length=60, description="e.g. '12 h' or '30 min'")
    yield_pct: Optional[float] = Field(default=None, ge=0, le=100)


class RouteIn(SQLModel):
    steps: list[RouteStepIn] = Field(default_factory=list, max_length=50)
    precursors: list[str] = Field(default_factory=list, max_length=20,
                                  description="codes of the batches (of registered intermediates) this batch was made from")


class RouteCopy(SQLModel):
    source: str = Field(min_length=1, max_length=50, description="code of the batch whose route is the template")


class ReagentUseRead(SQLModel):
    reagent: str
    smiles: str
    amount: Optional[str]
    amount_value: Optional[float]
    amount_unit: Optional[str]
    amount_dimension: Optional[str] = Field(description="amount, mass or volume")
    equivalents: Optional[float]
    hazard_codes: list[str]
    hazard_statements: str
    pictograms: list[str]
    hazard_data_entered: bool
    notice: str
    cautions: list[CautionRead]


class RouteStepRead(SQLModel):
    position: int
    description: str
    reagents: list[ReagentUseRead]
    solvent: str
    temperature_K: Optional[float]
    time_h: Optional[float]
    yield_pct: Optional[float]


class LineageRead(SQLModel):
    batch: str
    compound: str
    depth: int = Field(description="1 = directly made from / into; 2 = one step further ...")


class RouteRead(SQLModel):
    batch: str
    compound: str
    withheld: bool = Field(description="true when the route of an embargoed compound is hidden from this caller")
    steps: list[RouteStepRead]
    precursors: list[LineageRead] = Field(description="what this batch was made from, upstream")
    products: list[LineageRead] = Field(description="every batch made from this one, downstream")
    cautions: list[CautionRead] = Field(description="general cautions for this campaign's chemistry")
    defer: str
