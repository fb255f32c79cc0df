"""Measurement pages: the upload form of a batch and the page of one measurement."""

from __future__ import annotations

from typing import Annotated, Optional

from fastapi import APIRouter, File, Form, Request, UploadFile
from fastapi.responses import HTMLResponse
from ..deps import PageActor, PageWriter, RowId, SessionDep, SettingsDep
from ..errors import InputError
from ..ingest.conditions import CONDITION_EXAMPLES
from ..kinds import KINDS, needed_by
from ..models import Batch, Compound
from ..services import measurements, registry
from ..services.errors import Forbidden
from .render import redirect, render

router = APIRouter(include_in_schema=False)

FIELDS = measurements.FORM_FIELDS


def _upload_context(batch: Batch, compound: Compound, form: dict, error: Optional[str] = None) -> dict:
    return {"batch": batch, "c": compound, "kinds": KINDS, "needed_by": needed_by(), "examples": CONDITION_EXAMPLES, "form": form, "error": error}


@router.get("/batches/{code}/upload", response_class=HTMLResponse)
def upload_form(code: str, request: Request, session: SessionDep, actor: PageWriter, kind: str = "pe_loop"):
    batch = registry.get_batch(session, code)
    compound = registry.compound_of(session, batch)
    return render(request, "pages/upload.html", _upload_context(batch, compound, {"kind": kind}), actor=actor)


@router.post("/batches/{code}/upload", response_class=HTMLResponse)
def upload(
    code: str,
    request: Request,
    session: SessionDep,
    settings: SettingsDep,
    actor: PageWriter,
    file: Annotated[UploadFile, File()],
    kind: Annotated[str, Form()] = "",
    area: Annotated[str, Form()] = "",
    thickness: Annotated[str, Form()] = "",
    mass: Annotated[str, Form()] = "",
    rate: Annotated[str, Form()] = "",
    temperature: Annotated[str, Form()] = "",
    frequency: Annotated[str, Form()] = "",
    instrument: Annotated[str, Form()] = "",
    operator: Annotated[str, Form()] = "",
    notes: Annotated[str, Form()] = "",
    endo: Annotated[str, Form()] = "",
    spectrometer: Annotated[str, Form()] = "",
    nucleus: Annotated[str, Form()] = "",
    solvent: Annotated[str, Form()] = "",
):
    batch = registry.get_batch(session, code)
    compound = registry.compound_of(session, batch)
    form = {"kind": kind, "area": area, "thickness": thickness, "mass": mass, "rate": rate,
            "temperature": temperature, "frequency": frequency, "instrument": instrument, "operator": operator,
            "notes": notes, "endo": endo, "spectrometer": spectrometer, "nucleus": nucleus, "solvent": solvent}
    try:
        raw = measurements.read_upload(file, settings.max_upload_bytes)
        m, _ = measurements.upload_measurement(
            session=session, batch=batch, kind_name=kind, raw=raw, filename=file.filename,
            form={k: (v or None) for k, v in form.items() if k != "kind"}, actor=actor.label,
        )
    except (InputError, Forbidden) as exc:
        return render(request, "pages/upload.html", _upload_context(batch, compound, form, str(exc)),
                      partial="partials/upload_form.html", status_code=422, actor=actor)
    return redirect(f"/measurements/{m.id}", request)


@router.get("/measurements/{measurement_id}", response_class=HTMLResponse)
def measurement_page(measurement_id: RowId, request: Request, session: SessionDep, actor: PageActor):
    m = measurements.get_measurement(session, measurement_id)
    info = measurements.measurement_as_seen(session, m, actor)
    kind = KINDS.get(m.kind)
    if not measurements.may_download_raw(session, m, actor):
        # A receipt (embargoed compound, caller who may not see it): no figure either, it draws the results.
        fig, fig_error = None, measurements.RECEIPT_WITHHELD
    else:
        try:
            fig = measurements.measurement_figure(session, m)
            fig_error = None
        except InputError as exc:
            fig, fig_error = None, str(exc)
    return render(request, "pages/measurement.html",
                  {"m": info, "kind": kind, "figure": fig, "figure_error": fig_error}, actor=actor)
