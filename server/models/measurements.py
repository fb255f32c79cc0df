"""Raw instrument files, the samples they were measured on, the measurements derived from them,
stated series, barriers and crystal phases."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Optional

import sqlalchemy as sa
from pydantic import BaseModel, ConfigDict
from sqlmodel import Field, SQLModel

from .registry import Batch, Compound
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


#: What a sample physically is; ``cell`` is a liquid-crystal cell of known gap.
SAMPLE_FORMS: tuple[str, ...] = ("pellet", "film", "single_crystal", "powder", "cell", "solution")


class Sample(SQLModel, table=True):
    """A physical specimen pressed, cast, cut or grown from one batch (code ``<batch>-S01``).

    A batch's *default* sample (``is_default``) is created the first time a file is posted to
    the batch itself rather than to a sample; it says only that the specimen was not described.
    """

    id: Optional[int] = Field(default=None, primary_key=True)
    code: str = Field(max_length=60, unique=True, index=True)
    batch_id: int = Field(foreign_key="batch.id", index=True)
    seq: int
    form: str = Field(default="", max_length=20)  # one of SAMPLE_FORMS; "" for an undescribed default sample
    is_default: bool = False
    thickness_um: Optional[float] = None
    electrode_area_mm2: Optional[float] = None
    electrode: str = Field(default="", max_length=120)  # electrode material
    axis: str = Field(default="", max_length=60)  # crystal axis or face along the field, e.g. "[001]", "(010)"
    pressing_load_kN: Optional[float] = None
    anneal_K: Optional[float] = None
    anneal_min: Optional[float] = None
    deposition: str = Field(default="", max_length=120)
    cell_gap_um: Optional[float] = None
    preparation_notes: str = Field(default="", sa_type=sa.Text)
    notes: str = Field(default="", sa_type=sa.Text)
    archived: bool = False
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)

    __table_args__ = (
        sa.UniqueConstraint("batch_id", "seq", name="uq_sample_batch_seq"),
        # At most one default sample per batch, so two first uploads at once cannot make two.
        sa.Index("uq_sample_default_per_batch", "batch_id", unique=True,
                 sqlite_where=sa.text("is_default"), postgresql_where=sa.text("is_default")),
    )


class SamplePreparation(BaseModel):
    """How a sample was made; quantities as text with their unit, as for uploads."""

    model_config = ConfigDict(extra="forbid")

    pressing_load: Optional[str] = None  # e.g. "5 kN"
    anneal_temperature: Optional[str] = None  # e.g. "350 K" or "80 degC"
    anneal_time: Optional[str] = None  # e.g. "2 h"
    deposition: Optional[str] = Field(default=None, max_length=120)  # e.g. "drop-cast from CH2Cl2"
    cell_gap: Optional[str] = None  # e.g. "10 um"
    notes: Optional[str] = Field(default=None, max_length=20000)


class SampleCreate(BaseModel):
    """``POST /api/v1/batches/{code}/samples``: quantities as text with their unit."""

    model_config = ConfigDict(extra="forbid")

    form: str
    thickness: Optional[str] = None  # e.g. "150 um"
    electrode_area: Optional[str] = None  # e.g. "0.785 mm^2"
    electrode: Optional[str] = Field(default=None, max_length=120)  # material, e.g. "silver paste"
    preparation: Optional[SamplePreparation] = None
    axis: Optional[str] = Field(default=None, max_length=60)
    notes: Optional[str] = Field(default=None, max_length=20000)


class Measurement(SQLModel, table=True):
    id: Optional[int] = Field(default=None, primary_key=True)
    batch_id: int = Field(foreign_key="batch.id", index=True)  # always the sample's batch
    sample_id: int = Field(foreign_key="sample.id", index=True)
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
    # A correction: the new measurement names the one it replaces; the old one names its successor.
    supersedes_id: Optional[int] = Field(default=None, foreign_key="measurement.id")
    superseded_by_id: Optional[int] = Field(default=None, foreign_key="measurement.id")
    # A person's correction of the automatic analysis, stored beside it (``results`` stay as the analysis gave
    # them): ``{"results": {key: value}, "reason", "by", "at", "analysis_version"}``, the keys the kind lets
    # people edit (``Kind.correct``); None while the automatic analysis stands. An edit or its revert is a
    # correction like any other: a new measurement that supersedes this one.
    correction: Optional[dict[str, Any]] = Field(default=None, sa_type=sa.JSON)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    analysed_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)
    # Read through an import profile: its name and version (re-analysis reads with the same version),
    # and which block of a multi-block file (0 for a file of one table).
    profile_name: str = Field(default="", max_length=60)
    profile_version: Optional[int] = None
    block: int = Field(default=0)

    __table_args__ = (
        # The same bytes of one kind are stored once per sample and block while they are live; archived
        # or superseded copies do not count, so the same file can be stored again after them.
        sa.Index("uq_measurement_live_sample_sha_kind", "sample_id", "sha256", "kind", "block", unique=True,
                 sqlite_where=sa.text("NOT archived AND superseded_by_id IS NULL"),
                 postgresql_where=sa.text("NOT archived AND superseded_by_id IS NULL")),
    )

    @property
    def retired(self) -> bool:
        """Archived or superseded itself: kept and readable, but out of lists, plots, stats and verdicts
        (a measurement of an archived sample, batch or compound is out too: :func:`is_live`)."""
        return bool(self.archived or self.superseded_by_id is not None)


def not_retired() -> Any:
    """SQL condition on the measurement row alone: neither archived nor superseded (the twin of
    :attr:`Measurement.retired`; the partial unique index of live copies is over the same rows)."""
    return sa.and_(Measurement.archived == False, Measurement.superseded_by_id.is_(None))  # noqa: E712


def live_measurement() -> Any:
    """THE SQL condition for measurements that count: the measurement is neither archived nor
    superseded, and its sample, its batch and its compound are not archived.

    Archiving a batch (a mistaken or withdrawn batch) or a compound withdraws its evidence: every list,
    count, tile, plot, verdict input, CompoundStats row and export that picks measurements asks this,
    so such measurements stop counting everywhere at once and count again when restored. Nothing is
    deleted. The subqueries are uncorrelated (``correlate(None)``), so the condition means the same
    whatever the calling query joins. :func:`is_live` is its Python twin."""
    return sa.and_(not_retired(), live_parents())


def live_parents() -> Any:
    """SQL condition: the measurement's sample, batch and compound are not archived (the part of
    :func:`live_measurement` about where it was measured)."""
    live_samples = sa.select(Sample.id).where(Sample.archived == False).correlate(None)  # noqa: E712
    live_batches = (sa.select(Batch.id).join(Compound, Compound.id == Batch.compound_id)
                    .where(Batch.archived == False, Compound.archived == False).correlate(None))  # noqa: E712
    return sa.and_(Measurement.sample_id.in_(live_samples), Measurement.batch_id.in_(live_batches))


def is_live(session: Any, m: Measurement) -> bool:
    """Whether ``m`` counts, by the rule of :func:`live_measurement` (for rows that follow their
    measurement: a barrier, a crystal phase; and for checks on one measurement)."""
    if m.retired:
        return False
    sample, batch = session.get(Sample, m.sample_id), session.get(Batch, m.batch_id)
    compound = session.get(Compound, batch.compound_id)
    return not (sample.archived or batch.archived or compound.archived)


#: The variables a series can sweep.
SERIES_VARIABLES: tuple[str, ...] = ("temperature", "frequency", "field")


class ImportProfile(SQLModel, table=True):
    """One version of an import profile: how to read one instrument's export (``server/ingest/profiles.py``).

    Versions are never changed: an edit adds the next version, and measurements name the version
    they were read with."""

    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(max_length=60, index=True)
    version: int
    kind: str = Field(max_length=30)
    spec: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)

    __table_args__ = (sa.UniqueConstraint("name", "version", name="uq_importprofile_name_version"),)


class MeasurementSeries(SQLModel, table=True):
    """A series stated by a person (or an import profile), beside the ones found automatically."""

    id: Optional[int] = Field(default=None, primary_key=True)
    sample_id: int = Field(foreign_key="sample.id", index=True)
    kind: str = Field(max_length=30)
    variable: str = Field(max_length=20)  # one of SERIES_VARIABLES
    direction: str = Field(default="", max_length=10)  # heating | cooling | "" (not a temperature series)
    measurement_ids: list[int] = Field(default_factory=list, sa_type=sa.JSON)
    notes: str = Field(default="", sa_type=sa.Text)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    created_by: str = Field(default="", max_length=120)


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
