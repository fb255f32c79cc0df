"""Image attachments on pages: the upload form (htmx or plain form) under each gallery, and each image's
archive / restore form (a reason is required). The gallery is
``partials/attachments.html``, included by the compound, batch, sample and measurement pages; its
thumbnails and originals are the API's byte routes (a page session is a Reader there)."""

from __future__ import annotations

from typing import Annotated, Optional

from fastapi import APIRouter, File, Form, Request, UploadFile
from fastapi.responses import HTMLResponse

from ..deps import PageWriter, RowId, SessionDep, SettingsDep
from ..errors import InputError
from ..services import attachments, comments, measurements
from ..services.errors import Duplicate
from .render import fragment_or_redirect, render

router = APIRouter(include_in_schema=False)

PARTIAL = "partials/attachments.html"
FORM_FIELDS = ("caption", "magnification", "scale_bar", "polariser", "temperature")


# The file is a File() parameter, so server/app.py's takes_file finds these routes and the refused-upload
# limit (ratelimit.FailureWindow) counts them like the API's.
ImageUpload = Annotated[Optional[UploadFile], File()]


async def _post(request: Request, session, settings, kind: str, ref: str, actor,  # noqa: ANN001, ANN202
                upload: Optional[UploadFile]):
    target = comments.resolve(session, kind, ref)
    form = await request.form()
    typed = {k: str(form.get(k) or "") for k in FORM_FIELDS}
    try:
        if upload is None or not upload.filename:
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
                              actor: PageWriter, file: ImageUpload = None):
    return await _post(request, session, settings, "compound", code, actor, file)


@router.post("/batches/{code}/attachments", response_class=HTMLResponse)
async def batch_attachment(code: str, request: Request, session: SessionDep, settings: SettingsDep,
                           actor: PageWriter, file: ImageUpload = None):
    return await _post(request, session, settings, "batch", code, actor, file)


@router.post("/samples/{code}/attachments", response_class=HTMLResponse)
async def sample_attachment(code: str, request: Request, session: SessionDep, settings: SettingsDep,
                            actor: PageWriter, file: ImageUpload = None):
    return await _post(request, session, settings, "sample", code, actor, file)


@router.post("/measurements/{measurement_id}/attachments", response_class=HTMLResponse)
async def measurement_attachment(measurement_id: RowId, request: Request, session: SessionDep, settings: SettingsDep,
                                 actor: PageWriter, file: ImageUpload = None):
    return await _post(request, session, settings, "measurement", str(measurement_id), actor, file)


def _set_archived(request: Request, session, attachment_id: int, reason: str, archived: bool, actor):  # noqa: ANN001, ANN202
    att, target = attachments.get_attachment(session, attachment_id, actor=actor)
    try:
        attachments.set_archived(session=session, attachment=att, archived=archived, reason=reason, actor=actor)
    except (InputError, Duplicate) as exc:
        panel = attachments.gallery_panel(session, target, actor=actor, archive_error=(att.id, str(exc)))
        return render(request, PARTIAL, {"gallery": panel}, actor=actor,
                      status_code=409 if isinstance(exc, Duplicate) else 422)
    return fragment_or_redirect(request, PARTIAL, {"gallery": attachments.gallery_panel(session, target, actor=actor)},
                                attachments.page_url(target), actor=actor)


@router.post("/attachments/{attachment_id}/archive", response_class=HTMLResponse)
def archive_attachment(attachment_id: RowId, request: Request, session: SessionDep, actor: PageWriter,
                       reason: Annotated[str, Form(max_length=2000)] = ""):
    return _set_archived(request, session, attachment_id, reason, True, actor)


@router.post("/attachments/{attachment_id}/restore", response_class=HTMLResponse)
def restore_attachment(attachment_id: RowId, request: Request, session: SessionDep, actor: PageWriter,
                       reason: Annotated[str, Form(max_length=2000)] = ""):
    return _set_archived(request, session, attachment_id, reason, False, actor)
