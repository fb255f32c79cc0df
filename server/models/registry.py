"""Registry tables: scaffolds, compounds, batches."""

from __future__ import annotations

from datetime import date, datetime
from typing import Any, Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from ..bounds import BUILT_CHAIN_CARBONS
from .types import UTCDateTime, utcnow

BATCH_STATES = ("made", "impure", "failed", "used_up")


class Scaffold(SQLModel, table=True):
    """A group-defined core with attachment points written as ``[*:n]`` dummies."""

    id: Optional[int] = Field(default=None, primary_key=True)
    code: str = Field(max_length=40, unique=True, index=True)
    name: str = Field(max_length=200)
    smiles: str = Field(sa_type=sa.Text)
    bridge: str = Field(default="", max_length=40)
    attachment_points: int = 0
    core_formula: str = Field(default="", max_length=80)
    notes: str = Field(default="", sa_type=sa.Text)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)


class Compound(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    number: int = Field(unique=True, index=True)
    code: str = Field(max_length=40, unique=True, index=True)
    label: str = Field(default="", max_length=200)
    smiles: str = Field(sa_type=sa.Text)
    inchi: str = Field(sa_type=sa.Text)
    inchikey: str = Field(max_length=27, unique=True, index=True)
    formula: str = Field(max_length=120)
    mw: float
    exact_mass: float
    heavy_atoms: int = 0
    side_chains: list[dict[str, Any]] = Field(default_factory=list, sa_type=sa.JSON)
    side_chain_summary: str = Field(default="", max_length=400)
    scaffold_id: Optional[int] = Field(default=None, foreign_key="scaffold.id", index=True)
    notes: str = Field(default="", sa_type=sa.Text)
    embargoed: bool = False
    archived: bool = Field(default=False, index=True)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    updated_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)
    # The evidence-based verdict (server.analysis.verdict), recomputed whenever evidence changes.
    verdict_code: str = Field(default="untested", max_length=40, index=True)
    verdict: Optional[dict[str, Any]] = Field(default=None, sa_type=sa.JSON)
    verdict_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    # A reviewed override by a person with the right role; the computed verdict stays beside it.
    override_code: Optional[str] = Field(default=None, max_length=40)
    override_reason: str = Field(default="", sa_type=sa.Text)
    override_by: str = Field(default="", max_length=120)
    override_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)

    # The registry's sorts read these in order, the registration number breaking ties (server/services/views.py:
    # keyset pages seek to the last row shown instead of counting past an offset).
    __table_args__ = (sa.Index("ix_compound_mw_number", "mw", "number"),
                      sa.Index("ix_compound_label_number", "label", "number"),
                      sa.Index("ix_compound_created_at_number", "created_at", "number"))


class CodeCounter(SQLModel, table=True):
    """The last number handed out in one code series ("compound", or "batch:<compound code>").

    Incremented in the transaction that stores the new row (server/services/codes.py), so a
    failed registration rolls its number back with it: no gaps, no duplicates, no retries.
    """

    name: str = Field(primary_key=True, max_length=80)
    n: int = 0


class Batch(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    code: str = Field(max_length=50, unique=True, index=True)
    compound_id: int = Field(foreign_key="compound.id", index=True)
    seq: int
    made_on: Optional[date] = None
    chemist: str = Field(default="", max_length=120)
    scale_mg: Optional[float] = None
    yield_pct: Optional[float] = None
    purity_pct: Optional[float] = None
    state: str = Field(default="made", max_length=20)
    notes: str = Field(default="", sa_type=sa.Text)
    archived: bool = False
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)
    # "identity confirmed": a member's judgement on the batch's identity evidence (services/identity.py);
    # every confirmation and withdrawal is an AuditEvent, these columns hold the current state.
    identity_confirmed: bool = False
    identity_confirmed_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    identity_confirmed_by: str = Field(default="", max_length=120)
    identity_note: str = Field(default="", sa_type=sa.Text)

    __table_args__ = (sa.UniqueConstraint("compound_id", "seq", name="uq_batch_compound_seq"),)


# --- API shapes (the table classes above are the storage; these are the contract) ---------------


class SideChainSpec(SQLModel):
    """A side chain to attach at every attachment point of a scaffold."""

    kind: str = Field(description="alkoxy, alkylthio or alkyl")
    carbons: Optional[int] = Field(default=None, ge=BUILT_CHAIN_CARBONS[0], le=BUILT_CHAIN_CARBONS[1], description="carbon count (linear chains)")
    branched_form: Optional[str] = Field(default=None, description="a named branched chain, e.g. 2-ethylhexyl")


class CompoundCreate(SQLModel):
    smiles: Optional[str] = Field(default=None, description="SMILES or a MOL block")
    label: str = Field(default="", max_length=200)
    scaffold: Optional[str] = Field(default=None, description="scaffold code")
    side_chain: Optional[SideChainSpec] = Field(
        default=None, description="with `scaffold` and no `smiles`: build the compound from the scaffold"
    )
    notes: str = Field(default="", max_length=20000)
    embargoed: bool = False
    state: Optional[str] = Field(default=None, description="'planned' registers a target compound before any batch")
    rationale: str = Field(default="", max_length=20000, description="why this target (planned compounds)")
    priority: Optional[int] = Field(default=None, ge=1, le=5, description="1 = make first ... 5 = last")
    assignee: str = Field(default="", max_length=120, description="who will make it")


class CompoundUpdate(SQLModel):
    label: Optional[str] = Field(default=None, max_length=200)
    notes: Optional[str] = Field(default=None, max_length=20000)
    scaffold: Optional[str] = None
    embargoed: Optional[bool] = None
    state: Optional[str] = Field(default=None, description="planned, in_synthesis or abandoned (made follows from batches)")
    reason: Optional[str] = Field(default=None, max_length=20000, description="why it was abandoned (needed then)")
    rationale: Optional[str] = Field(default=None, max_length=20000)
    priority: Optional[int] = Field(default=None, ge=1, le=5)
    assignee: Optional[str] = Field(default=None, max_length=120)


class SideChainRead(SQLModel):
    kind: str
    carbons: int
    branched: bool
    count: int


class CompoundRead(SQLModel):
    code: str
    label: str
    smiles: Optional[str] = Field(description="null when embargoed and the caller may not see structures")
    inchi: Optional[str]
    inchikey: Optional[str]
    formula: Optional[str]
    mw: Optional[float] = Field(description="average molar mass, g/mol")
    exact_mass: Optional[float] = Field(description="monoisotopic mass, Da")
    side_chains: list[SideChainRead]
    side_chain_summary: str
    scaffold: Optional[str]
    notes: str
    embargoed: bool
    archived: bool
    batches: int
    created_at: datetime
    created_by: str
    verdict: Optional[str] = None
    verdict_evidence: Optional[dict[str, Any]] = None
    state: str = Field(default="registered", description="registered, planned, in_synthesis, made or abandoned")
    rationale: str = ""
    priority: Optional[int] = None
    assignee: str = ""
    state_reason: str = Field(default="", description="why it was abandoned")


class CompoundPage(SQLModel):
    items: list[CompoundRead]
    # None when not counted (``count=false``) and more pages follow.
    total: Optional[int]
    # The keyset position of the next page (pass it back as ``after=``, with the same sort), None on the last.
    next_after: Optional[str] = None


class BatchCreate(SQLModel):
    made_on: Optional[date] = None
    chemist: str = Field(default="", max_length=120)
    scale_mg: Optional[float] = Field(default=None, gt=0)
    yield_pct: Optional[float] = Field(default=None, ge=0, le=100)
    purity_pct: Optional[float] = Field(default=None, ge=0, le=100)
    state: str = Field(default="made", description="made, impure, failed or used_up")
    notes: str = Field(default="", max_length=20000)


class BatchRead(SQLModel):
    code: str
    compound: str
    seq: int
    made_on: Optional[date]
    chemist: str
    scale_mg: Optional[float]
    yield_pct: Optional[float]
    purity_pct: Optional[float]
    state: str
    notes: str
    archived: bool
    created_at: datetime
    identity_confirmed: bool = False
    measurements: int = 0


class ScaffoldCreate(SQLModel):
    code: str = Field(max_length=40, min_length=1)
    name: str = Field(max_length=200, min_length=1)
    smiles: str = Field(description="core SMILES with attachment points [*:1], [*:2], ...")
    notes: str = ""


class ScaffoldRead(SQLModel):
    code: str
    name: str
    smiles: str
    bridge: str
    attachment_points: int
    core_formula: str
    notes: str
    compounds: int = 0
