"""Raw instrument files, the measurements derived from them, barriers and crystal phases."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Optional

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow


class RawFile(SQLModel, table=True):
    """The bytes an instrument produced, stored unchanged; never updated after insert."""

    id: Optional[int] = Field(default=None, primary_key=True)
    sha256: str = Field(max_length=64, index=True)
    size: int
    filename: str = Field(default="", max_length=255)  # shown to people, never used as a path
    content_type: str = Field(default="application/octet-stream", max_length=120)
    data: bytes = Field(sa_type=sa.LargeBinary)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)


class Measurement(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    batch_id: int = Field(foreign_key="batch.id", index=True)
    kind: str = Field(max_length=30, index=True)
    raw_file_id: int = Field(foreign_key="rawfile.id", index=True)
    sha256: str = Field(max_length=64)
    conditions: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    results: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    flags: list[dict[str, Any]] = Field(default_factory=list, sa_type=sa.JSON)
    verdict: str = Field(default="", max_length=40)
    analysis_version: str = Field(default="", max_length=40)
    temperature_K: Optional[float] = None
    instrument: str = Field(default="", max_length=120)
    operator: str = Field(default="", max_length=120)
    notes: str = Field(default="", sa_type=sa.Text)
    archived: bool = False
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    analysed_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)

    __table_args__ = (sa.UniqueConstraint("batch_id", "sha256", "kind", name="uq_measurement_batch_sha_kind"),)


class BarrierEstimate(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    compound_id: int = Field(foreign_key="compound.id", index=True)
    method: str = Field(max_length=30)  # coalescence | eyring | imported | gfn2-xtb
    dg_kcal_mol: Optional[float] = None
    dg_err_kcal_mol: Optional[float] = None
    t_K: Optional[float] = None
    results: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    model: str = Field(default="", max_length=200)
    measurement_id: Optional[int] = Field(default=None, foreign_key="measurement.id")
    job_id: Optional[int] = Field(default=None, foreign_key="job.id")
    analysis_version: str = Field(default="", max_length=40)
    notes: str = Field(default="", sa_type=sa.Text)
    archived: bool = False
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)
    # NMR conditions (dnu in Hz depends on the field; the barrier on the solvent)
    spectrometer_MHz: Optional[float] = None
    nucleus: str = Field(default="", max_length=10)
    solvent: str = Field(default="", max_length=80)


class CrystalPhase(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    compound_id: int = Field(foreign_key="compound.id", index=True)
    batch_id: Optional[int] = Field(default=None, foreign_key="batch.id")
    measurement_id: Optional[int] = Field(default=None, foreign_key="measurement.id")
    space_group: str = Field(default="", max_length=40)
    space_group_number: Optional[int] = None
    polar: Optional[bool] = None
    centrosymmetric: Optional[bool] = None
    temperature_K: Optional[float] = None
    results: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    archived: bool = False  # with its measurement (server/kinds/crystal.py keeps it in step)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
