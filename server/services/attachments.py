"""Image attachments on compounds, batches, samples and measurements (issue 23, item 2).

A micrograph under crossed polarisers or a photo of a cracked pellet is evidence like an instrument
file: the original bytes are stored unchanged, once per SHA-256, as a ``rawfile`` row (so backups
verify them with the instrument files), and a JPEG thumbnail is made on upload for the gallery.

What an image is comes from its bytes, never from the file name or the content type the browser
sends: the first bytes must carry the signature of PNG (ISO/IEC 15948:2004, section 5.2), JPEG
(ITU-T T.81 / ISO/IEC 10918-1: the SOI marker FF D8 followed by another marker) or TIFF (TIFF 6.0,
section 2: "II*\\0" little-endian or "MM\\0*" big-endian), the type claimed must be that one, and
Pillow must decode every pixel (a truncated file fails there). A header that claims more pixels than
``bounds.MAX_IMAGE_PIXELS`` is refused before any pixel is decoded (a decompression bomb).

Nothing is deleted: an attachment is archived (and restored) like a measurement, the ``archived`` flag
on its row and who, when and why in its ``attachment.archive`` / ``attachment.restore`` AuditEvents
(:func:`set_archived`, :func:`archive_history`). Archived images leave the galleries and lists unless
asked for, and stay reachable by id with their ``archived`` label and history.

The embargo is the compound's, as for comments: an embargoed compound's attachments, and those of
its batches, samples and measurements, are invisible to callers who may not see its structure
(``access.may_see_structure``); their bytes answer 404 like an attachment that does not exist.
"""

from __future__ import annotations

import hashlib
import io
import re
import warnings
from dataclasses import dataclass
from typing import Any, Mapping, Optional
from urllib.parse import quote

import numpy as np
from PIL import Image, ImageOps, UnidentifiedImageError
from sqlalchemy.orm import defer, object_session
from sqlmodel import Session, func, select

from .. import access, bounds
from ..precision import significant
from ..access import Actor
from ..errors import InputError
from ..ingest.conditions import parse_quantity
from ..models import IMAGE_TYPES, ArchiveStep, Attachment, AttachmentRead, AuditEvent, RawFile
from . import audit
from .accounts import hide_people
from .comments import Target, target_of
from .errors import Duplicate, NotFound
from .measurements import _display_name

#: Bounded work per request: a gallery shows its newest attachments up to this many.
GALLERY_LIMIT = 200
MAX_CAPTION = 2000
MAX_REASON = 500
ARCHIVE_ACTIONS = ("attachment.archive", "attachment.restore")
MAX_MAGNIFICATION = 10_000.0  # past any light microscope (common practice: objectives up to 100x, eyepieces 10-25x)

#: File signatures (see the module docstring for their sources).
_SIGNATURES: tuple[tuple[str, bytes], ...] = (
    ("PNG", b"\x89PNG\r\n\x1a\n"), ("JPEG", b"\xff\xd8\xff"), ("TIFF", b"II*\x00"), ("TIFF", b"MM\x00*"))
#: What a browser or script may claim, by content type and by file-name ending.
_CLAIMED_TYPES = {"image/png": "PNG", "image/jpeg": "JPEG", "image/jpg": "JPEG", "image/pjpeg": "JPEG",
                  "image/tiff": "TIFF", "image/tif": "TIFF"}
_CLAIMED_ENDINGS = {".png": "PNG", ".jpg": "JPEG", ".jpeg": "JPEG", ".jpe": "JPEG", ".tif": "TIFF", ".tiff": "TIFF"}
_UNSTATED_TYPES = {"", "application/octet-stream", "binary/octet-stream"}
# What Pillow raises on bytes it cannot decode (truncated data, broken chunks, bad markers).
_DECODE_ERRORS = (OSError, SyntaxError, ValueError, EOFError, IndexError, UnidentifiedImageError)
_POLARISER = {"": None, "crossed": True, "yes": True, "uncrossed": False, "parallel": False, "none": False,
              "no": False}
_MAGNIFICATION_RE = re.compile(r"\s*[x\u00d7]?\s*((?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*[x\u00d7]?\s*")


@dataclass(frozen=True)
class CheckedImage:
    """An upload that is the image it claims to be, with its thumbnail."""

    image_format: str  # a key of IMAGE_TYPES
    width_px: int
    height_px: int
    thumbnail: bytes  # JPEG
    thumb_width_px: int
    thumb_height_px: int


def sniff(raw: bytes) -> Optional[str]:
    """The image type the bytes' signature names (``"PNG"``, ``"JPEG"``, ``"TIFF"``), or None."""
    for name, signature in _SIGNATURES:
        if raw.startswith(signature):
            return name
    return None


def claimed_format(content_type: Optional[str], filename: Optional[str]) -> Optional[str]:
    """The type an upload claims: its content type, else (when that says nothing) its file-name ending;
    None when it claims none. A claim of anything but PNG, JPEG or TIFF is refused naming ``file``."""
    ctype = (content_type or "").split(";", 1)[0].strip().lower()
    if ctype in _CLAIMED_TYPES:
        return _CLAIMED_TYPES[ctype]
    ending = "." + (filename or "").rsplit(".", 1)[-1].lower() if "." in (filename or "") else ""
    if ctype in _UNSTATED_TYPES:
        if ending in _CLAIMED_ENDINGS:
            return _CLAIMED_ENDINGS[ending]
        if not ending:
            return None
    raise InputError(f"an attachment is a PNG, JPEG or TIFF image; this file is {ctype or ending}", field="file")


def _eight_bit(im: Image.Image) -> Image.Image:
    """Greyscale of 16-bit or float pixels (scientific cameras) stretched to 8 bits between their minimum
    and maximum, as an image viewer's automatic contrast shows them; other modes to RGB or L."""
    if im.mode in ("I;16", "I;16B", "I;16L", "I;16N", "I", "F"):
        a = np.asarray(im, dtype=np.float64)
        lo, hi = float(a.min()), float(a.max())
        scaled = np.zeros(a.shape) if hi <= lo else (a - lo) * (255.0 / (hi - lo))
        return Image.fromarray(scaled.round().astype(np.uint8), mode="L")
    return im if im.mode in ("RGB", "L") else im.convert("RGB")


def check_image(raw: bytes, *, claimed: Optional[str]) -> CheckedImage:
    """The upload as a checked image with its thumbnail, or an :class:`InputError` naming ``file``:
    bytes of no image type, bytes of another type than claimed, too many pixels, damaged or truncated."""
    found = sniff(raw)
    if found is None:
        raise InputError("the bytes are not a PNG, JPEG or TIFF image (no known file signature)", field="file")
    if claimed is not None and claimed != found:
        raise InputError(f"the file claims to be {claimed} but its bytes are {found}", field="file")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(raw), formats=[found]) as im:
                width, height = im.size
                if width * height > bounds.MAX_IMAGE_PIXELS:
                    raise InputError(f"the image claims {width} x {height} pixels; at most "
                                     f"{bounds.MAX_IMAGE_PIXELS:,} pixels are accepted", field="file")
                im.verify()  # chunk checksums (PNG) and structure, before decoding
            with Image.open(io.BytesIO(raw), formats=[found]) as im:
                im.load()  # every pixel of the first frame: a truncated file fails here
                thumb = _eight_bit(ImageOps.exif_transpose(im))
                thumb.thumbnail((bounds.THUMBNAIL_PX, bounds.THUMBNAIL_PX))
                out = io.BytesIO()
                thumb.save(out, format="JPEG", quality=85)
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as exc:
        raise InputError(f"the image has too many pixels to decode safely ({exc})", field="file") from exc
    except _DECODE_ERRORS as exc:
        raise InputError(f"the {found} image is damaged or truncated ({exc})", field="file") from exc
    return CheckedImage(found, width, height, out.getvalue(), thumb.width, thumb.height)


def _text(form: Mapping[str, Any], name: str) -> str:
    value = form.get(name)
    return "" if value is None else str(value).strip()


def parse_metadata(form: Mapping[str, Any]) -> dict[str, Any]:
    """Caption, magnification, scale bar (any length unit, stored in µm), polariser, temperature (any
    temperature unit, stored in K) from form fields; an :class:`InputError` names the field."""
    out: dict[str, Any] = {"caption": _text(form, "caption"), "magnification": None, "scale_bar_um": None,
                           "polariser_crossed": None, "t_K": None}
    if len(out["caption"]) > MAX_CAPTION:
        raise InputError(f"a caption is at most {MAX_CAPTION} characters", field="caption")
    if text := _text(form, "magnification"):
        m = _MAGNIFICATION_RE.fullmatch(text)
        value = float(m.group(1)) if m else None
        if value is None or not 0 < value <= MAX_MAGNIFICATION:
            raise InputError(f"'{text[:40]}' is not a magnification from 0 to {MAX_MAGNIFICATION:g}; write e.g. '10x'",
                             field="magnification")
        out["magnification"] = value
    if text := _text(form, "scale_bar"):
        out["scale_bar_um"] = parse_quantity(text, field="scale_bar", unit="um", example="100 um")
    polariser = _text(form, "polariser").lower()
    if polariser not in _POLARISER:
        raise InputError(f"'{polariser[:40]}' is not 'crossed', 'uncrossed' or empty", field="polariser")
    out["polariser_crossed"] = _POLARISER[polariser]
    if text := _text(form, "temperature"):
        out["t_K"] = parse_quantity(text, field="temperature", unit="K", example="298 K", temperature=True)
    return out


def may_read(actor: Optional[Actor], target: Target) -> bool:
    return actor is not None and access.may_see_structure(actor, target.compound)


def attach_image(*, session: Session, target: Target, raw: bytes, filename: Optional[str],
                 content_type: Optional[str], form: Mapping[str, Any], actor: Actor) -> Attachment:
    """Check and store an image on ``target`` (raw bytes once per checksum, the thumbnail, the metadata)
    in one commit with its AuditEvent; nothing is stored when the image or a field is refused."""
    if not may_read(actor, target):
        raise NotFound(f"no {target.kind} {target.ref}")
    checked = check_image(raw, claimed=claimed_format(content_type, filename))
    meta = parse_metadata(form)
    sha = hashlib.sha256(raw).hexdigest()
    same = session.exec(select(Attachment.id).where(Attachment.target == target.kind,
                                                    Attachment.target_id == target.row.id,
                                                    Attachment.sha256 == sha)).first()
    if same is not None:
        raise Duplicate(f"this image is attached to {target.kind} {target.ref} already", existing=same)
    rawfile = session.exec(select(RawFile).where(RawFile.sha256 == sha)).first()
    if rawfile is None:
        rawfile = RawFile(sha256=sha, size=len(raw), filename=_display_name(filename), data=raw,
                          content_type=IMAGE_TYPES[checked.image_format])
        session.add(rawfile)
        session.flush()
    att = Attachment(target=target.kind, target_id=target.row.id, compound_id=target.compound.id,
                     raw_file_id=rawfile.id, sha256=sha, image_format=checked.image_format,
                     width_px=checked.width_px, height_px=checked.height_px, thumbnail=checked.thumbnail,
                     thumb_width_px=checked.thumb_width_px, thumb_height_px=checked.thumb_height_px,
                     created_by=actor.label, **meta)
    session.add(att)
    session.flush()
    audit.record(session, actor=actor.label, action="attachment.create", entity="attachment", code=str(att.id),
                 compound_id=target.compound.id,
                 after={k: v for k, v in audit.snapshot(att).items() if k != "thumbnail"})
    session.commit()
    session.refresh(att)
    return att


def get_attachment(session: Session, attachment_id: int, *, actor: Optional[Actor]) -> tuple[Attachment, Target]:
    """One attachment and its target, as ``actor`` may see it (an embargoed one is not found)."""
    att = session.get(Attachment, attachment_id)
    if att is None:
        raise NotFound(f"no attachment {attachment_id}")
    target = target_of(session, att)
    if not may_read(actor, target):
        raise NotFound(f"no attachment {attachment_id}")
    return att, target


def original(session: Session, att: Attachment) -> RawFile:
    return session.get(RawFile, att.raw_file_id)


def attachment_read(att: Attachment, target: Target, *, filename: str, size: int, actor: Optional[Actor],
                    history: Optional[list[ArchiveStep]] = None) -> AttachmentRead:
    """The API shape; ``history`` (the archive steps) is looked up when not given."""
    if history is None:
        history = archive_history(object_session(att), [att.id]).get(att.id, [])
    read = AttachmentRead(
        id=att.id, target=att.target, ref=target.ref, compound=target.compound.code, filename=filename,
        sha256=att.sha256, media_type=IMAGE_TYPES[att.image_format], size_bytes=size, width_px=att.width_px,
        height_px=att.height_px, thumb_width_px=att.thumb_width_px, thumb_height_px=att.thumb_height_px,
        caption=att.caption, magnification=att.magnification, scale_bar_um=att.scale_bar_um,
        polariser_crossed=att.polariser_crossed, t_K=att.t_K, created_by=att.created_by, created_at=att.created_at,
        original_url=f"/api/v1/attachments/{att.id}/original", thumbnail_url=f"/api/v1/attachments/{att.id}/thumbnail",
        archived=att.archived, archive_history=history)
    return hide_people(read, sees_people=actor is not None and actor.sees_people)


def gallery(session: Session, target: Target, *, actor: Optional[Actor],
            include_archived: bool = False) -> dict[str, Any]:
    """The attachments on ``target``, oldest first, as ``actor`` may see them (none, ``withheld``, for a
    caller who may not see an embargoed compound); archived ones only with ``include_archived``."""
    if not may_read(actor, target):
        return {"items": [], "withheld": True}
    query = (select(Attachment, RawFile.filename, RawFile.size).join(RawFile, RawFile.id == Attachment.raw_file_id)
             .where(Attachment.target == target.kind, Attachment.target_id == target.row.id))
    if not include_archived:
        query = query.where(Attachment.archived == False)  # noqa: E712 - SQL expression
    rows = session.exec(query.options(defer(Attachment.thumbnail))
                        .order_by(Attachment.created_at.desc(), Attachment.id.desc()).limit(GALLERY_LIMIT)).all()
    histories = archive_history(session, [a.id for a, _, _ in rows])
    return {"items": [attachment_read(a, target, filename=name, size=size, actor=actor,
                                      history=histories.get(a.id, []))
                      for a, name, size in reversed(rows)], "withheld": False}


def archive_history(session: Session, ids: list[int]) -> dict[int, list[ArchiveStep]]:
    """Every archive and restore of the attachments ``ids``, oldest first, from the audit trail
    (the one record of who, when and why)."""
    if not ids:
        return {}
    events = session.exec(select(AuditEvent).where(AuditEvent.entity == "attachment",
                                                   AuditEvent.action.in_(ARCHIVE_ACTIONS),
                                                   AuditEvent.entity_code.in_([str(i) for i in ids]))
                          .order_by(AuditEvent.at, AuditEvent.id)).all()
    out: dict[int, list[ArchiveStep]] = {}
    for e in events:
        out.setdefault(int(e.entity_code), []).append(ArchiveStep(
            action=e.action.split(".", 1)[1], at=e.at, by=e.actor, reason=(e.after or {}).get("reason", "")))
    return out


def set_archived(*, session: Session, attachment: Attachment, archived: bool, reason: Optional[str],
                 actor: Actor) -> Attachment:
    """Archive or restore an attachment, saying why; the flag changes, the bytes stay, and the AuditEvent
    keeps who, when and the reason. Asking for the state it is in already changes nothing (409)."""
    text = (reason or "").strip()
    verb = "archived" if archived else "restored"
    if not text:
        raise InputError(f"say why the image is {verb}", field="reason")
    if len(text) > MAX_REASON:
        raise InputError(f"a reason is at most {MAX_REASON} characters", field="reason")
    if attachment.archived == archived:
        raise Duplicate(f"attachment {attachment.id} is {verb} already", existing=attachment.id)
    attachment.archived = archived
    session.add(attachment)
    audit.record(session, actor=actor.label, action=ARCHIVE_ACTIONS[0] if archived else ARCHIVE_ACTIONS[1],
                 entity="attachment", code=str(attachment.id), compound_id=attachment.compound_id,
                 before={"archived": not archived}, after={"archived": archived, "reason": text})
    session.commit()
    session.refresh(attachment)
    return attachment


def live_of_compound(session: Session, compound_id: int) -> list[tuple[Attachment, Target, RawFile]]:
    """The compound's attachments not archived, on itself and on its batches, samples and measurements
    that are not archived, oldest first, with their originals (for the report pack and freezes)."""
    rows = session.exec(select(Attachment).where(Attachment.compound_id == compound_id,
                                                 Attachment.archived == False)  # noqa: E712
                        .options(defer(Attachment.thumbnail))
                        .order_by(Attachment.created_at, Attachment.id).limit(GALLERY_LIMIT * 10)).all()
    out = []
    for att in rows:
        target = target_of(session, att)
        if getattr(target.row, "archived", False):
            continue
        out.append((att, target, original(session, att)))
    return out


def count_of_compound(session: Session, compound_id: int) -> int:
    """How many images hang on the compound and its batches, samples and measurements, archived or not."""
    return session.exec(select(func.count(Attachment.id)).where(Attachment.compound_id == compound_id)).one()


#: What a pack's manifest and a freeze record of an attachment: where it hangs, its bytes, what it shows.
def record_of(att: Attachment, target: Target, raw: RawFile) -> dict[str, Any]:
    return {"id": att.id, "target": att.target, "ref": target.ref, "raw_file": att.raw_file_id,
            "sha256": att.sha256, "filename": raw.filename, "media_type": IMAGE_TYPES[att.image_format],
            "size_bytes": raw.size, "width_px": att.width_px, "height_px": att.height_px, "caption": att.caption,
            "magnification": att.magnification, "scale_bar_um": att.scale_bar_um,
            "polariser_crossed": att.polariser_crossed, "t_K": att.t_K, "created_by": att.created_by,
            "created_at": att.created_at.isoformat()}


def pack_path(record: Mapping[str, Any]) -> str:
    """The original's path in a pack: ``attachments/<id>-<file name>``."""
    name = re.sub(r"[^A-Za-z0-9._-]", "_", record["filename"] or f"image.{record['media_type'].split('/')[1]}")[:80]
    return f"attachments/{record['id']}-{name}"


def metadata_line(a: "AttachmentRead | Attachment") -> str:
    """The caption's second line: magnification, scale bar, polarisers, temperature (what is stated)."""
    parts = []
    if a.magnification is not None:
        parts.append(f"{significant(a.magnification, 3)}\u00d7")
    if a.scale_bar_um is not None:
        value, unit = (a.scale_bar_um / 1000, "mm") if a.scale_bar_um >= 1000 else (a.scale_bar_um, "\u00b5m")
        parts.append(f"scale bar {significant(value, 3)} {unit}")
    if a.polariser_crossed is not None:
        parts.append("crossed polarisers" if a.polariser_crossed else "polarisers not crossed")
    if a.t_K is not None:
        parts.append(f"{significant(a.t_K, 4)} K")
    return " \u00b7 ".join(parts)


def page_url(target: Target) -> str:
    """The page whose gallery shows ``target``'s images (a batch has its own page)."""
    if target.kind == "batch":
        return f"/batches/{quote(target.ref)}#attachments"
    return target.page_at("attachments")


def gallery_panel(session: Session, target: Target, *, actor: Optional[Actor], error: str = "",
                  form: Optional[Mapping[str, Any]] = None, archive_error: Optional[tuple[int, str]] = None
                  ) -> dict[str, Any]:
    """What the gallery partial shows: the images with their metadata line, the archived ones apart
    (labelled, with who, when and why), whether the caller may add or archive one, the form's URL and
    (after a refusal) what was typed; ``archive_error``: (attachment id, message) of a refused archive."""
    data = gallery(session, target, actor=actor, include_archived=True)
    items = [{"a": a, "meta": metadata_line(a), "last": a.archive_history[-1] if a.archive_history else None}
             for a in data["items"]]
    return {"target": target.kind, "ref": target.ref, "post_url": target.route("attachments"),
            "images": [it for it in items if not it["a"].archived],
            "archived": [it for it in items if it["a"].archived], "withheld": data["withheld"],
            "archive_error": archive_error or (None, ""),
            "may_post": not data["withheld"] and access.allows(actor, access.WRITE), "error": error,
            "form": dict(form or {}), "dom_id": f"attachments-{target.kind}-{target.ref}"}


__all__ = ["CheckedImage", "archive_history", "attach_image", "attachment_read", "check_image", "claimed_format",
           "count_of_compound", "gallery", "gallery_panel", "get_attachment", "live_of_compound", "metadata_line", "original", "pack_path",
           "page_url", "parse_metadata", "record_of", "set_archived", "sniff"]
