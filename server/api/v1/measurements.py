"""Instrument uploads and the measurements derived from them."""

from __future__ import annotations

from typing import Annotated, Any, Optional

from fastapi import APIRouter, File, Form, Query, UploadFile
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel

from ...deps import Offset, Reader, RowId, SessionDep, SettingsDep, Uploader, Writer
from ...kinds import KINDS
from ...models import RawFile
from ...services import accounts, measurements, registry
from ...services.errors import Forbidden
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND, ErrorOut

router = APIRouter(tags=["measurements"])


class MeasurementOut(BaseModel):
    id: int
    kind: str
    batch: str
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
    created_at: str
    created_by: str


class MeasurementPage(BaseModel):
    items: list[MeasurementOut]
    total: int


@router.post(
    "/batches/{batch_code}/measurements",
    status_code=201,
    response_model=MeasurementOut,
    responses={**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS, 200: {"model": MeasurementOut, "description": "the same bytes were stored already for this batch"},
               413: {"model": ErrorOut, "description": "file too large"}},
)
def upload(
    batch_code: str,
    session: SessionDep,
    settings: SettingsDep,
    actor: Uploader,
    kind: Annotated[str, Form(description="one of " + ", ".join(KINDS))],
    file: Annotated[UploadFile, File(description="the instrument's raw file (CSV, TSV, XLSX or CIF)")],
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
):
    """Post a raw instrument file to a batch; it is stored unchanged and analysed at once."""
    batch = registry.get_batch(session, batch_code)
    raw = measurements.read_upload(file, settings.max_upload_bytes)
    form = {"area": area, "thickness": thickness, "mass": mass, "rate": rate, "temperature": temperature,
            "frequency": frequency, "instrument": instrument, "operator": operator, "notes": notes, "endo": endo,
            "spectrometer": spectrometer, "nucleus": nucleus, "solvent": solvent}
    m, created = measurements.upload_measurement(
        session=session, batch=batch, kind_name=kind, raw=raw, filename=file.filename, form=form,
        actor=actor.label, allowed_kinds=actor.kinds if actor.scope == "upload" else None,
    )
    body = accounts.hide_people(measurements.measurement_as_seen(session, m, actor), sees_people=actor.sees_people)
    return JSONResponse(body, status_code=201 if created else 200)


@router.get("/measurements", response_model=MeasurementPage, responses=AUTH_ERRORS)
def list_measurements(
    session: SessionDep,
    actor: Reader,
    batch: Optional[str] = None,
    compound: Optional[str] = None,
    kind: Optional[str] = None,
    limit: int = Query(100, ge=1, le=1000),
    offset: Offset = 0,
) -> MeasurementPage:
    rows, total = measurements.list_measurements(session, batch=batch, compound=compound, kind=kind, limit=limit,
                                                 offset=offset)
    items = [measurements.measurement_as_seen(session, m, actor) for m in rows]
    return MeasurementPage(items=accounts.hide_people(items, sees_people=actor.sees_people), total=total)


@router.get("/measurements/{measurement_id}", response_model=MeasurementOut, responses={**AUTH_ERRORS, **NOT_FOUND})
def get_measurement(measurement_id: RowId, session: SessionDep, actor: Reader):
    return accounts.hide_people(
        measurements.measurement_as_seen(session, measurements.get_measurement(session, measurement_id), actor),
        sees_people=actor.sees_people)


@router.get("/measurements/{measurement_id}/raw", responses={**AUTH_ERRORS, **NOT_FOUND})
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
