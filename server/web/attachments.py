"""Image attachments on pages: the upload form (htmx or plain form) under each gallery. The gallery is
``partials/attachments.html``, included by the compound, batch, sample and measurement pages; its
thumbnails and originals are the API's byte routes (a page session is a Reader there)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import PageWriter, RowId, SessionDep, SettingsDep
from ..errors import InputError
from ..services import attachments, comments, measurements
from ..services.errors import Duplicate
from .render import fragment_or_redirect, render

router = APIRouter(include_in_schema=False)

PARTIAL = "partials/attachments.html"
FORM_FIELDS = ("caption", "magnification", "scale_bar", "polariser", "temperature")


async def _post(request: Request, session, settings, kind: str, ref: str, actor):  # noqa: ANN001, ANN202
    target = comments.resolve(session, kind, ref)
    form = await request.form()
    typed = {k: str(form.get(k) or "") for k in FORM_FIELDS}
    upload = form.get("file")
    try:
        if not hasattr(upload, "file"):
            raise InputError("choose an image file (PNG, JPEG or TIFF)", field="file")
        raw = measurements.read_upload(upload, settings.max_upload_bytes)
        attachments.attach_image(session=session, target=target, raw=raw, filename=upload.filename,
                                 content_type=upload.content_type, form=typed, actor=actor)
    except (InputError, Duplicate) as exc:
        panel = attachments.gallery_panel(session, target, actor=actor, error=str(exc), form=typed)
        return render(request, PARTIAL, {"gallery": panel}, actor=actor,
                      status_code=409 if isinstance(exc, Duplicate) else 422)
    return fragment_or_redirect(request, PARTIAL, {"gallery": attachments.gallery_panel(session, target, actor=actor)},
                                attachments.page_url(target), actor=actor)


@router.post("/compounds/{code}/attachments", response_class=HTMLResponse)
async def compound_attachment(code: str, request: Request, session: SessionDep, settings: SettingsDep,
                              actor: PageWriter):
    return await _post(request, session, settings, "compound", code, actor)


@router.post("/batches/{code}/attachments", response_class=HTMLResponse)
async def batch_attachment(code: str, request: Request, session: SessionDep, settings: SettingsDep,
                           actor: PageWriter):
    return await _post(request, session, settings, "batch", code, actor)


@router.post("/samples/{code}/attachments", response_class=HTMLResponse)
async def sample_attachment(code: str, request: Request, session: SessionDep, settings: SettingsDep,
                            actor: PageWriter):
    return await _post(request, session, settings, "sample", code, actor)


@router.post("/measurements/{measurement_id}/attachments", response_class=HTMLResponse)
async def measurement_attachment(measurement_id: RowId, request: Request, session: SessionDep, settings: SettingsDep,
                                 actor: PageWriter):
    return await _post(request, session, settings, "measurement", str(measurement_id), actor)
