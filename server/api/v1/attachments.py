"""Image attachments: ``GET``/``POST /api/v1/{compounds|batches|samples|measurements}/{id-or-code}/attachments``
(``?include_archived=true`` lists the archived ones too), one attachment's metadata, its original bytes and its
thumbnail, and ``POST /api/v1/attachments/{id}/archive`` / ``/restore`` with the reason."""

from __future__ import annotations

from typing import Annotated, Optional

from fastapi import APIRouter, Depends, File, Form, Query, UploadFile
from fastapi.responses import Response

from ...deps import Reader, RowId, SessionDep, SettingsDep, Writer
from ...models import ArchiveIn, AttachmentPage, AttachmentRead
from ...services import attachments, comments, measurements
from .responses import AUTH_ERRORS, DUPLICATE, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["attachments"])

READ = {**AUTH_ERRORS, **NOT_FOUND}
WRITE = {**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS, **DUPLICATE,
         413: {"description": "the file is larger than REMANENCE_MAX_UPLOAD_MB"}}
ImageFile = Annotated[UploadFile, File(description="PNG, JPEG or TIFF; its bytes must be the type it claims")]


def _metadata(caption: Optional[str] = Form(None, max_length=2000),
              magnification: Optional[str] = Form(None, max_length=40, description="e.g. 10x (objective)"),
              scale_bar: Optional[str] = Form(None, max_length=40, description="the scale bar's length, e.g. 100 um"),
              polariser: Optional[str] = Form(None, max_length=20, description="crossed, uncrossed or empty"),
              temperature: Optional[str] = Form(None, max_length=40, description="e.g. 298 K or 25 degC"),
              ) -> dict:
    return {"caption": caption, "magnification": magnification, "scale_bar": scale_bar, "polariser": polariser,
            "temperature": temperature}


Metadata = Annotated[dict, Depends(_metadata)]


IncludeArchived = Annotated[bool, Query(description="list archived attachments too (each labelled `archived`)")]


def _page(session, kind: str, ref: str, actor, include_archived: bool = False) -> AttachmentPage:  # noqa: ANN001
    return AttachmentPage(**attachments.gallery(session, comments.resolve(session, kind, ref), actor=actor,
                                                include_archived=include_archived))


def _post(session, settings, kind: str, ref: str, file: UploadFile, form: dict, actor) -> AttachmentRead:  # noqa: ANN001
    target = comments.resolve(session, kind, ref)
    raw = measurements.read_upload(file, settings.max_upload_bytes)
    att = attachments.attach_image(session=session, target=target, raw=raw, filename=file.filename,
                                   content_type=file.content_type, form=form, actor=actor)
    stored = attachments.original(session, att)
    return attachments.attachment_read(att, target, filename=stored.filename, size=stored.size, actor=actor)


@router.get("/compounds/{code}/attachments", response_model=AttachmentPage, responses=READ)
def compound_attachments(code: str, session: SessionDep, actor: Reader,
                         include_archived: IncludeArchived = False) -> AttachmentPage:
    """The compound's images, oldest first (``withheld`` for an embargoed compound the caller may not see);
    archived ones only with ``include_archived``."""
    return _page(session, "compound", code, actor, include_archived)


@router.post("/compounds/{code}/attachments", status_code=201, response_model=AttachmentRead, responses=WRITE)
def post_compound_attachment(code: str, file: ImageFile, form: Metadata, session: SessionDep,
                             settings: SettingsDep, actor: Writer) -> AttachmentRead:
    """Attach an image: stored unchanged with its SHA-256, a thumbnail made now; the bytes decide the type."""
    return _post(session, settings, "compound", code, file, form, actor)


@router.get("/batches/{code}/attachments", response_model=AttachmentPage, responses=READ)
def batch_attachments(code: str, session: SessionDep, actor: Reader,
                      include_archived: IncludeArchived = False) -> AttachmentPage:
    return _page(session, "batch", code, actor, include_archived)


@router.post("/batches/{code}/attachments", status_code=201, response_model=AttachmentRead, responses=WRITE)
def post_batch_attachment(code: str, file: ImageFile, form: Metadata, session: SessionDep,
                          settings: SettingsDep, actor: Writer) -> AttachmentRead:
    return _post(session, settings, "batch", code, file, form, actor)


@router.get("/samples/{sample_code}/attachments", response_model=AttachmentPage, responses=READ)
def sample_attachments(sample_code: str, session: SessionDep, actor: Reader,
                       include_archived: IncludeArchived = False) -> AttachmentPage:
    return _page(session, "sample", sample_code, actor, include_archived)


@router.post("/samples/{sample_code}/attachments", status_code=201, response_model=AttachmentRead, responses=WRITE)
def post_sample_attachment(sample_code: str, file: ImageFile, form: Metadata, session: SessionDep,
                           settings: SettingsDep, actor: Writer) -> AttachmentRead:
    return _post(session, settings, "sample", sample_code, file, form, actor)


@router.get("/measurements/{measurement_id}/attachments", response_model=AttachmentPage, responses=READ)
def measurement_attachments(measurement_id: RowId, session: SessionDep, actor: Reader,
                            include_archived: IncludeArchived = False) -> AttachmentPage:
    return _page(session, "measurement", str(measurement_id), actor, include_archived)


@router.post("/measurements/{measurement_id}/attachments", status_code=201, response_model=AttachmentRead,
             responses=WRITE)
def post_measurement_attachment(measurement_id: RowId, file: ImageFile, form: Metadata, session: SessionDep,
                                settings: SettingsDep, actor: Writer) -> AttachmentRead:
    return _post(session, settings, "measurement", str(measurement_id), file, form, actor)


@router.get("/attachments/{attachment_id}", response_model=AttachmentRead, responses=READ)
def get_attachment(attachment_id: RowId, session: SessionDep, actor: Reader) -> AttachmentRead:
    """One attachment's metadata (404 for an embargoed compound's attachment the caller may not see)."""
    att, target = attachments.get_attachment(session, attachment_id, actor=actor)
    stored = attachments.original(session, att)
    return attachments.attachment_read(att, target, filename=stored.filename, size=stored.size, actor=actor)


ARCHIVE = {**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS,
           409: {"description": "the attachment is archived (or restored) already"}}


def _set_archived(session, attachment_id: int, data: ArchiveIn, archived: bool, actor) -> AttachmentRead:  # noqa: ANN001
    att, target = attachments.get_attachment(session, attachment_id, actor=actor)
    att = attachments.set_archived(session=session, attachment=att, archived=archived, reason=data.reason, actor=actor)
    stored = attachments.original(session, att)
    return attachments.attachment_read(att, target, filename=stored.filename, size=stored.size, actor=actor)


@router.post("/attachments/{attachment_id}/archive", response_model=AttachmentRead, responses=ARCHIVE)
def archive_attachment(attachment_id: RowId, data: ArchiveIn, session: SessionDep, actor: Writer) -> AttachmentRead:
    """Take an image out of its gallery, saying why (kept with who and when in the audit trail); its bytes
    stay and it stays reachable by id, labelled ``archived``."""
    return _set_archived(session, attachment_id, data, True, actor)


@router.post("/attachments/{attachment_id}/restore", response_model=AttachmentRead, responses=ARCHIVE)
def restore_attachment(attachment_id: RowId, data: ArchiveIn, session: SessionDep, actor: Writer) -> AttachmentRead:
    """Put an archived image back in its gallery, saying why."""
    return _set_archived(session, attachment_id, data, False, actor)


def _safe_name(name: str, fallback: str) -> str:
    return "".join(ch for ch in name if ch.isalnum() or ch in "._-") or fallback


IMAGE_RESPONSES = {**READ, 200: {"content": {"image/png": {}, "image/jpeg": {}, "image/tiff": {}},
                                 "description": "the stored bytes; `X-Content-SHA256` carries their checksum"}}


@router.get("/attachments/{attachment_id}/original", response_class=Response, responses=IMAGE_RESPONSES)
def attachment_original(attachment_id: RowId, session: SessionDep, actor: Reader) -> Response:
    """The image exactly as uploaded, with the media type its bytes were found to be."""
    att, _ = attachments.get_attachment(session, attachment_id, actor=actor)
    stored = attachments.original(session, att)
    name = _safe_name(stored.filename, f"attachment-{att.id}")
    # Browsers show PNG and JPEG; TIFF (most browsers cannot) is offered as a download.
    disposition = "attachment" if att.image_format == "TIFF" else "inline"
    return Response(stored.data, media_type=stored.content_type,
                    headers={"Content-Disposition": f'{disposition}; filename="{name}"',
                             "X-Content-SHA256": stored.sha256, "Cache-Control": "private, max-age=3600"})


@router.get("/attachments/{attachment_id}/thumbnail", response_class=Response,
            responses={**READ, 200: {"content": {"image/jpeg": {}}, "description": "the thumbnail made on upload"}})
def attachment_thumbnail(attachment_id: RowId, session: SessionDep, actor: Reader) -> Response:
    """The JPEG thumbnail made on upload (longer side ``bounds.THUMBNAIL_PX``)."""
    att, _ = attachments.get_attachment(session, attachment_id, actor=actor)
    return Response(att.thumbnail, media_type="image/jpeg", headers={"Cache-Control": "private, max-age=3600"})
