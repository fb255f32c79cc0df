"""Instrument uploads and the measurements derived from them."""

from __future__ import annotations

from typing import Annotated, Any, Optional, Union

from fastapi import APIRouter, Depends, File, Form, Query, UploadFile
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel

from ...budget import pool_for
from ...deps import Offset, Reader, RowId, SessionDep, SettingsDep, Uploader, Writer
from ...kinds import KINDS
from ...models import RawFile
from ...services import accounts, corrections, measurements, profiled_uploads, registry
from ...services.errors import Forbidden
from .responses import ARCHIVED, AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND, QUOTA_ERRORS, ErrorOut, LimitOut

router = APIRouter(tags=["measurements"])


class MeasurementOut(BaseModel):
    id: int
    kind: str
    batch: str
    sample: str
    compound: str
    sha256: str
    filename: str
    size: int
    results: dict[str, Any]
    verdict: Optional[str]
    flags: list[dict[str, str]]
    analysis_version: str
    method: str
    conditions: dict[str, Any]
    temperature_K: Optional[float]
    instrument: str
    operator: str
    notes: str
    archived: bool = False
    supersedes: Optional[int] = None
    superseded_by: Optional[int] = None
    correction: Optional[dict[str, Any]] = None  # a person's edit of the analysis (results stay automatic)
    created_at: str
    created_by: str
    profile: Optional[str] = None
    profile_version: Optional[int] = None
    block: int = 0


class MeasurementPage(BaseModel):
    items: list[MeasurementOut]
    total: int


def condition_fields(
    area: Annotated[Optional[str], Form(description="electrode area, e.g. '0.785 mm^2'")] = None,
    thickness: Annotated[Optional[str], Form(description="sample thickness, e.g. '150 um'")] = None,
    mass: Annotated[Optional[str], Form(description="DSC sample mass, e.g. '4.2 mg'")] = None,
    rate: Annotated[Optional[str], Form(description="DSC rate, e.g. '10 K/min'")] = None,
    temperature: Annotated[Optional[str], Form(description="measurement temperature, e.g. '300 K' or '25 degC'")] = None,
    frequency: Annotated[Optional[str], Form(description="drive frequency, e.g. '100 Hz'")] = None,
    instrument: Annotated[Optional[str], Form(max_length=120)] = None,
    operator: Annotated[Optional[str], Form(max_length=120)] = None,
    notes: Annotated[Optional[str], Form(max_length=20000)] = None,
    endo: Annotated[Optional[str], Form(description="DSC sign convention: up or down")] = None,
    spectrometer: Annotated[Optional[str], Form(description="NMR spectrometer frequency, e.g. '400 MHz'")] = None,
    nucleus: Annotated[Optional[str], Form(max_length=10, description="observed nucleus, e.g. '1H'")] = None,
    solvent: Annotated[Optional[str], Form(max_length=80, description="NMR solvent, e.g. 'toluene-d8'")] = None,
    sweep: Annotated[Optional[str], Form(description="temperature run direction: heating or cooling")] = None,
) -> dict[str, Optional[str]]:
    """The condition fields of an upload or a correction (quantities as text with their unit)."""
    return {"area": area, "thickness": thickness, "mass": mass, "rate": rate, "temperature": temperature,
            "frequency": frequency, "instrument": instrument, "operator": operator, "notes": notes, "endo": endo,
            "sweep": sweep, "spectrometer": spectrometer, "nucleus": nucleus, "solvent": solvent}


class ProfiledUploadOut(BaseModel):
    """A file read through an import profile: one measurement per block; two or more blocks whose
    profile says which condition varies are stated as a series of the sample."""

    measurements: list[MeasurementOut]
    series: Optional[dict[str, Any]] = None


class PreviewOut(BaseModel):
    columns: list[str]
    units: list[str]
    rows_head: list[list[float]]
    rows_total: int
    conditions: dict[str, Any]
    blocks: list[dict[str, Any]]
    conversions: list[str]
    notes: list[str]
    profile: Optional[dict[str, Any]] = None


class DryRunOut(BaseModel):
    """What the upload would store (the first block's results; each block has its own in `preview.blocks`)."""

    preview: PreviewOut
    results: dict[str, Any]
    verdict: Optional[str]
    flags: list[dict[str, str]]


ConditionFields = Annotated[dict, Depends(condition_fields)]
UploadKind = Annotated[Optional[str], Form(description="one of " + ", ".join(KINDS) + " (optional with a profile)")]
UploadProfile = Annotated[Optional[str], Form(max_length=60, description="read the file through this import profile")]
DryRun = Annotated[bool, Query(description="read and analyse only: store nothing, answer a preview (200)")]
UPLOAD_RESPONSES = {**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS, **DUPLICATE, **ARCHIVED,
                    200: {"model": Union[MeasurementOut, ProfiledUploadOut, DryRunOut],
                          "description": "the same bytes and conditions were stored already; or the dry run's preview"},
                    201: {"model": Union[MeasurementOut, ProfiledUploadOut],
                          "description": "stored: one measurement, or one per block of a profiled file"},
                    413: {"model": LimitOut, "description": "file too large or past a bound on work; `limit` names it"},
                    **QUOTA_ERRORS}


@router.post("/batches/{batch_code}/measurements", status_code=201, response_model=None,
             responses=UPLOAD_RESPONSES)
def upload(
    batch_code: str,
    session: SessionDep,
    settings: SettingsDep,
    actor: Uploader,
    file: Annotated[UploadFile, File(description="the instrument's raw file (CSV, TSV, XLSX or CIF)")],
    form: ConditionFields,
    kind: UploadKind = None,
    profile: UploadProfile = None,
    dry_run: DryRun = False,
):
    """Post a raw instrument file to a batch; it is stored unchanged under the batch's default
    sample (created on first use) and analysed at once. The same bytes with other conditions: 409.
    With `profile` the file is read through that import profile (a token bound to a profile always
    is); a file of several blocks answers `{"measurements": [...], "series": ...}`. With
    `dry_run=true` nothing is stored: 200 with the preview."""
    return store_upload(session, settings, actor, batch=registry.get_batch(session, batch_code), sample=None,
                        kind=kind, file=file, form=form, profile=profile, dry_run=dry_run)


def store_upload(session, settings, actor, *, batch, sample, kind: Optional[str], file: UploadFile, form: dict,  # noqa: ANN001
                 profile: Optional[str] = None, dry_run: bool = False) -> JSONResponse:
    """The one upload answer of the batch and sample routes: 201 new, 200 the same bytes and conditions again
    (or the dry run's preview); the body as the caller may see it (a receipt for an embargoed compound, no
    names for upload tokens)."""
    raw = measurements.read_upload(file, settings.max_upload_bytes)
    profile_row, kind = profiled_uploads.resolve_profile(session, profile_name=profile, kind_name=kind,
                                                         bound=actor.profile)
    allowed = actor.kinds if actor.scope == "upload" else None
    budget = pool_for(settings)
    if dry_run:
        return JSONResponse(profiled_uploads.dry_run(
            session=session, batch=batch, sample=sample, kind_name=kind, profile_row=profile_row, raw=raw,
            filename=file.filename, form=form, actor=actor, allowed_kinds=allowed, budget=budget), status_code=200)
    if profile_row is not None:
        body, created = profiled_uploads.upload_profiled(
            session=session, batch=batch, sample=sample, profile_row=profile_row, raw=raw, filename=file.filename,
            form=form, actor=actor, allowed_kinds=allowed, budget=budget)
        body["measurements"] = accounts.hide_people(body["measurements"], sees_people=actor.sees_people)
        return JSONResponse(body, status_code=201 if created else 200)
    m, created = measurements.upload_measurement(
        session=session, batch=batch, sample=sample, kind_name=kind, raw=raw, filename=file.filename, form=form,
        actor=actor.label, allowed_kinds=allowed, budget=budget,
    )
    body = accounts.hide_people(measurements.measurement_as_seen(session, m, actor), sees_people=actor.sees_people)
    return JSONResponse(body, status_code=201 if created else 200)


@router.post("/measurements/{measurement_id}/revise", status_code=201, response_model=MeasurementOut,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS,
                        409: {"model": ErrorOut, "description": "corrected already (names the newest) or the "
                                                                  "replacement file is stored already"},
                        413: {"model": LimitOut, "description": "file too large or past a bound on work; `limit` names it"},
                    **QUOTA_ERRORS})
def revise(
    measurement_id: RowId,
    session: SessionDep,
    settings: SettingsDep,
    actor: Writer,
    form: ConditionFields,
    file: Annotated[Optional[UploadFile], File(description="a replacement raw file (optional)")] = None,
):
    """Correct a measurement's conditions (and optionally its file): a new measurement whose
    `supersedes` is this one; this one gets `superseded_by` and leaves lists, plots and verdicts."""
    m = measurements.get_measurement(session, measurement_id)
    raw = measurements.read_upload(file, settings.max_upload_bytes) if file is not None else None
    new = measurements.revise_measurement(session=session, measurement=m, form=form, actor=actor.label, raw=raw,
                                          filename=file.filename if file is not None else None,
                                          budget=pool_for(settings))
    return JSONResponse(measurements.measurement_read(session, new), status_code=201)


class SignalsEdit(BaseModel):
    signals: list[dict[str, Any]]
    reason: str


class CorrectionRevert(BaseModel):
    reason: str


@router.post("/measurements/{measurement_id}/signals", status_code=201, response_model=MeasurementOut,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS,
                        409: {"model": ErrorOut, "description": "corrected already (names the newest)"}})
def edit_signals(measurement_id: RowId, body: SignalsEdit, session: SessionDep, actor: Writer):
    """Store a person's integrated peak list of an NMR spectrum (each signal: `from_ppm`, `to_ppm`, and
    optionally `shift_ppm`, `n_H`, `multiplicity`, `j_Hz`, `label`, `assigned`) with the `reason`: a new
    measurement from the same file whose `correction` holds it; `results` stay the automatic analysis."""
    m = measurements.get_measurement(session, measurement_id)
    new = corrections.correct(session=session, measurement=m, edit=body.signals, reason=body.reason,
                              actor=actor.label)
    return JSONResponse(measurements.measurement_read(session, new), status_code=201)


@router.post("/measurements/{measurement_id}/signals/revert", status_code=201, response_model=MeasurementOut,
             responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS,
                        409: {"model": ErrorOut, "description": "corrected already (names the newest)"}})
def revert_signals(measurement_id: RowId, body: CorrectionRevert, session: SessionDep, actor: Writer):
    """Let the automatic peak list stand again (a correction with no edit, with the `reason`)."""
    m = measurements.get_measurement(session, measurement_id)
    new = corrections.revert(session=session, measurement=m, reason=body.reason, actor=actor.label)
    return JSONResponse(measurements.measurement_read(session, new), status_code=201)


@router.get("/measurements", response_model=MeasurementPage, responses=AUTH_ERRORS)
def list_measurements(
    session: SessionDep,
    actor: Reader,
    batch: Optional[str] = None,
    compound: Optional[str] = None,
    kind: Optional[str] = None,
    sample: Optional[str] = None,
    include_superseded: bool = False,
    limit: int = Query(100, ge=1, le=1000),
    offset: Offset = 0,
) -> MeasurementPage:
    """Live measurements, newest first; superseded ones only with `include_superseded=true`."""
    rows, total = measurements.list_measurements(session, batch=batch, compound=compound, kind=kind, sample=sample,
                                                 include_superseded=include_superseded, limit=limit, offset=offset)
    items = [measurements.measurement_as_seen(session, m, actor) for m in rows]
    return MeasurementPage(items=accounts.hide_people(items, sees_people=actor.sees_people), total=total)


@router.get("/measurements/{measurement_id}", response_model=MeasurementOut, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_measurement(measurement_id: RowId, session: SessionDep, actor: Reader):
    return accounts.hide_people(
        measurements.measurement_as_seen(session, measurements.get_measurement(session, measurement_id), actor),
        sees_people=actor.sees_people)


@router.get("/measurements/{measurement_id}/raw", response_class=Response,
            responses={**AUTH_ERRORS, **NOT_FOUND,
                       200: {"content": {"application/octet-stream": {}},
                             "description": "the stored bytes; `X-Content-SHA256` carries their checksum"}})
def get_raw(measurement_id: RowId, session: SessionDep, actor: Reader) -> Response:
    """The stored bytes, exactly as uploaded; the checksum travels in the headers. Raw files of an
    embargoed compound's measurements are for callers who may see its structure (403 otherwise)."""
    m = measurements.get_measurement(session, measurement_id)
    if not measurements.may_download_raw(session, m, actor):
        raise Forbidden(f"{actor.label} may not download raw files of an embargoed compound")
    raw = session.get(RawFile, m.raw_file_id)
    name = raw.filename or f"measurement-{m.id}.txt"
    safe = "".join(ch for ch in name if ch.isalnum() or ch in "._-") or f"measurement-{m.id}"
    return Response(raw.data, media_type="application/octet-stream",
                    headers={"Content-Disposition": f'attachment; filename="{safe}"',
                             "X-Content-SHA256": raw.sha256})


@router.post("/measurements/{measurement_id}/archive", response_model=MeasurementOut,
             responses={**AUTH_ERRORS, **NOT_FOUND})
def archive_measurement(measurement_id: RowId, session: SessionDep, actor: Writer):
    """Archive a measurement (its raw file is kept); the compound's verdict no longer uses it."""
    m = measurements.set_archived(session=session, measurement=measurements.get_measurement(session, measurement_id),
                                  archived=True, actor=actor.label)
    return measurements.measurement_read(session, m)


@router.post("/measurements/{measurement_id}/restore", response_model=MeasurementOut,
             responses={**AUTH_ERRORS, **NOT_FOUND})
def restore_measurement(measurement_id: RowId, session: SessionDep, actor: Writer):
    m = measurements.set_archived(session=session, measurement=measurements.get_measurement(session, measurement_id),
                                  archived=False, actor=actor.label)
    return measurements.measurement_read(session, m)
