"""Samples of a batch, their measurements, history and series."""

from __future__ import annotations

from typing import Annotated, Any, Optional

from fastapi import APIRouter, File, Form, UploadFile
from pydantic import BaseModel, ConfigDict, Field

from ...deps import MAX_ID, Reader, SessionDep, SettingsDep, Uploader, Writer
from ...kinds import KINDS
from ...models import SampleCreate
from ...services import registry, samples, series
from .measurements import UPLOAD_RESPONSES, ConditionFields, DryRun, MeasurementOut, UploadKind, UploadProfile, store_upload
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["samples"])


class SampleOut(BaseModel):
    code: str
    batch: str
    form: Optional[str]
    default: bool
    thickness_um: Optional[float]
    electrode_area_mm2: Optional[float]
    electrode: str
    axis: str
    preparation: dict[str, Any]
    notes: str
    archived: bool
    created_at: str
    created_by: str
    history: list[dict[str, Any]] = []
    highest_field_kV_cm: Optional[float] = None
    highest_temperature_K: Optional[float] = None
    transition: Optional[dict[str, Any]] = None
    poled: bool = False


class SeriesOut(BaseModel):
    variable: str
    direction: Optional[str]
    direction_from: Optional[str]
    kind: str
    measurements: list[int]
    stated: bool
    id: Optional[int]
    values: list[Optional[float]]
    fit: dict[str, Any]


class SeriesCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    variable: str
    measurements: list[Annotated[int, Field(ge=1, le=MAX_ID)]] = Field(max_length=1000)
    direction: Optional[str] = None
    notes: str = Field(default="", max_length=20000)


@router.post("/batches/{batch_code}/samples", status_code=201, response_model=SampleOut,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def create_sample(batch_code: str, data: SampleCreate, session: SessionDep, actor: Writer):
    """Describe a specimen of the batch (quantities as text with their unit: '150 um', '0.785 mm^2')."""
    batch = registry.get_batch(session, batch_code)
    sample = samples.create_sample(session=session, batch=batch, data=data, actor=actor.label)
    return samples.sample_read(session, sample)


@router.get("/batches/{batch_code}/samples", response_model=list[SampleOut], responses={**AUTH_ERRORS, **NOT_FOUND})
def list_samples(batch_code: str, session: SessionDep, actor: Reader):
    batch = registry.get_batch(session, batch_code)
    return [samples.sample_read(session, s, history=False) for s in samples.samples_of_batch(session, batch)]


@router.get("/samples/{sample_code}", response_model=SampleOut, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_sample(sample_code: str, session: SessionDep, actor: Reader):
    """The sample with its computed history: every measurement in order, the highest field and
    temperature it has seen, whether it was poled before each, and flags on loops."""
    return samples.sample_read(session, samples.get_sample(session, sample_code))


@router.post("/samples/{sample_code}/measurements", status_code=201, response_model=None,
             responses=UPLOAD_RESPONSES)
def upload_to_sample(
    sample_code: str,
    session: SessionDep,
    settings: SettingsDep,
    actor: Uploader,
    file: Annotated[UploadFile, File(description="the instrument's raw file (CSV, TSV, XLSX or CIF)")],
    form: ConditionFields,
    kind: UploadKind = None,
    profile: UploadProfile = None,
    dry_run: DryRun = False,
):
    """Post a raw file measured on this sample. Area and thickness default from the sample; a
    value given with the file wins (`conditions.sources` says `form`, `file` or `sample`).
    `profile` and `dry_run` as for the batch route."""
    sample = samples.get_sample(session, sample_code)
    return store_upload(session, settings, actor, batch=samples.batch_of(session, sample), sample=sample,
                        kind=kind, file=file, form=form, profile=profile, dry_run=dry_run)


@router.get("/samples/{sample_code}/series", response_model=list[SeriesOut], responses={**AUTH_ERRORS, **NOT_FOUND})
def get_series(sample_code: str, session: SessionDep, actor: Reader):
    """Series of the sample (stated ones, then those found automatically) with their fits:
    Pr(T) = A (Tc - T)^beta with Tc, beta and standard errors, first-order jumps, Ec(T), Ec(f)."""
    return series.sample_series(session, samples.get_sample(session, sample_code))


@router.post("/samples/{sample_code}/series", status_code=201, response_model=SeriesOut,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS})
def state_series(sample_code: str, data: SeriesCreate, session: SessionDep, actor: Writer):
    """State that measurements of this sample form one series."""
    sample = samples.get_sample(session, sample_code)
    row = series.state_series(session=session, sample=sample, variable=data.variable,
                              measurement_ids=data.measurements, direction=data.direction, notes=data.notes,
                              actor=actor.label)
    return next(e for e in series.sample_series(session, sample) if e["id"] == row.id)
