"""Working together: comment threads on compounds, batches, samples and measurements."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Optional

import sqlalchemy as sa
from pydantic import StringConstraints
from sqlmodel import Field, SQLModel

from .types import UTCDateTime, utcnow

#: What a comment can be written on; every target belongs to exactly one compound (the embargo's unit).
COMMENT_TARGETS: tuple[str, ...] = ("compound", "batch", "sample", "measurement")


class Comment(SQLModel, table=True):
    """One comment, Markdown source as written (rendered safely when shown); edits keep their
    history in the audit trail, and a comment is archived, never deleted."""

    id: Optional[int] = Field(default=None, primary_key=True)
    target: str = Field(max_length=20)  # one of COMMENT_TARGETS
    target_id: int
    compound_id: int = Field(foreign_key="compound.id", index=True)
    body: str = Field(sa_type=sa.Text)
    created_by: str = Field(max_length=160)  # the actor label, "user:alice" or "token:7 (script)"
    author_user_id: Optional[int] = Field(default=None, foreign_key="user.id")
    mentions: list[str] = Field(default_factory=list, sa_type=sa.JSON)  # user names resolved at the last write
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    edited_at: Optional[datetime] = Field(default=None, sa_type=UTCDateTime)
    archived: bool = False

    __table_args__ = (sa.Index("ix_comment_target", "target", "target_id"),)


class CommentIn(SQLModel):
    """``POST /api/v1/{compounds|batches|samples|measurements}/{ref}/comments`` and comment edits."""

    body: str = Field(min_length=1, max_length=20000, description="Markdown; raw HTML is shown as text")


class CommentRead(SQLModel):
    id: int
    target: str
    ref: str = Field(description="the code (compound, batch, sample) or id (measurement) commented on")
    compound: str
    body: str
    html: str = Field(description="the body rendered from Markdown, sanitised")
    created_by: str
    mentions: list[str]
    created_at: datetime
    edited_at: Optional[datetime]
    archived: bool


class CommentPage(SQLModel):
    items: list[CommentRead]
    withheld: bool = Field(description="true when the compound is embargoed and the caller may not see it")


# --- paper freezes -----------------------------------------------------------------------------


class PaperFreeze(SQLModel, table=True):
    """A named set of compounds frozen for a paper: what the paper used, kept apart from the live rows
    (re-analysis rewrites ``measurement.results``; the frozen copies in ``paperfreezecompound`` stay)."""

    id: Optional[int] = Field(default=None, primary_key=True)
    name: str = Field(max_length=200, unique=True)
    created_by: str = Field(max_length=160)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    dataset_doi: str = Field(default="", max_length=200)
    # [{"number": "CCDC 2345678", "measurement": 12}]: deposited structures, each naming its crystal measurement
    depositions: list[dict[str, Any]] = Field(default_factory=list, sa_type=sa.JSON)


class PaperFreezeCompound(SQLModel, table=True):
    """One compound of a freeze: its verdict then, and every live measurement then (id, raw-file
    SHA-256, kind, analysis version, results, verdict, flag codes), copied, never updated."""

    id: Optional[int] = Field(default=None, primary_key=True)
    freeze_id: int = Field(foreign_key="paperfreeze.id", index=True)
    compound_id: int = Field(foreign_key="compound.id", index=True)
    verdict: dict[str, Any] = Field(default_factory=dict, sa_type=sa.JSON)
    measurements: list[dict[str, Any]] = Field(default_factory=list, sa_type=sa.JSON)
    # The images on the compound, its batches, samples and measurements at freeze time (not archived then):
    # id, target, ref, raw file and SHA-256, caption and metadata; copied, never updated (migration 0029).
    attachments: list[dict[str, Any]] = Field(default_factory=list, sa_type=sa.JSON)

    __table_args__ = (sa.UniqueConstraint("freeze_id", "compound_id", name="uq_paperfreezecompound"),)


class FreezeCreate(SQLModel):
    """``POST /api/v1/freezes``: the compounds by code, or a registry view (its link or query string)."""

    name: str = Field(min_length=1, max_length=200, description='e.g. "bowl-chains manuscript"')
    # Codes are letters, digits and - _ . (e.g. RVZ-00012); anything else is refused (422) before a query.
    compounds: list[Annotated[str, StringConstraints(min_length=1, max_length=60, pattern=r"^[A-Za-z0-9._-]+$")]] = \
        Field(default_factory=list, max_length=200, description="compound codes (or give `view`)")
    view: str = Field(default="", max_length=4000,
                      description="a registry view instead of codes: its link (/compounds?chain_kind=alkoxy) or query "
                                  "string; the compounds it shows the caller now, every page of it, are frozen")


class FreezePublication(SQLModel):
    """``POST /api/v1/freezes/{freeze_id}/publication``: what was deposited once published."""

    dataset_doi: Optional[str] = Field(default=None, max_length=200, description="e.g. 10.5281/zenodo.1234567")
    depositions: Optional[list[dict[str, Any]]] = Field(
        default=None, max_length=200, description='[{"number": "CCDC 2345678", "measurement": 12}]')


# --- image attachments ---------------------------------------------------------------------------

#: The image types an attachment may be, by the media type they are served with.
IMAGE_TYPES: dict[str, str] = {"PNG": "image/png", "JPEG": "image/jpeg", "TIFF": "image/tiff"}


class Attachment(SQLModel, table=True):
    """An image (micrograph, photo of a pellet) on a compound, batch, sample or measurement.

    The original bytes are a ``rawfile`` row, stored unchanged with their SHA-256 like an instrument
    file; the thumbnail is derived (JPEG, made on upload). The metadata are what the picture needs to be
    read: magnification or scale bar length, crossed polarisers or not, the temperature."""

    id: Optional[int] = Field(default=None, primary_key=True)
    target: str = Field(max_length=20)  # one of COMMENT_TARGETS
    target_id: int
    compound_id: int = Field(foreign_key="compound.id", index=True)
    raw_file_id: int = Field(foreign_key="rawfile.id")
    sha256: str = Field(max_length=64)
    image_format: str = Field(max_length=10)  # a key of IMAGE_TYPES, sniffed from the bytes
    width_px: int
    height_px: int
    thumbnail: bytes = Field(sa_type=sa.LargeBinary)
    thumb_width_px: int
    thumb_height_px: int
    caption: str = Field(default="", max_length=2000)
    magnification: Optional[float] = None  # e.g. 10 for a 10x objective
    scale_bar_um: Optional[float] = None  # the length the image's scale bar stands for
    polariser_crossed: Optional[bool] = None  # None: not stated
    t_K: Optional[float] = None
    created_by: str = Field(max_length=160)
    created_at: datetime = Field(default_factory=utcnow, sa_type=UTCDateTime)
    # Archived like a measurement: the flag here, who, when and why in the attachment.archive /
    # attachment.restore AuditEvents (migration 0029); the bytes stay.
    archived: bool = False

    __table_args__ = (sa.Index("ix_attachment_target", "target", "target_id"),)


class ArchiveStep(SQLModel):
    action: str = Field(description="archive or restore")
    at: datetime
    by: str
    reason: str


class AttachmentRead(SQLModel):
    id: int
    target: str
    ref: str = Field(description="the code (compound, batch, sample) or id (measurement) it is attached to")
    compound: str
    filename: str
    sha256: str = Field(description="SHA-256 of the original bytes, stored unchanged")
    media_type: str
    size_bytes: int
    width_px: int
    height_px: int
    thumb_width_px: int
    thumb_height_px: int
    caption: str
    magnification: Optional[float]
    scale_bar_um: Optional[float]
    polariser_crossed: Optional[bool]
    t_K: Optional[float]
    created_by: str
    created_at: datetime
    original_url: str
    thumbnail_url: str
    archived: bool = False
    archive_history: list[ArchiveStep] = Field(
        default_factory=list, description="every archive and restore, oldest first: who, when and why")


class ArchiveIn(SQLModel):
    """``POST /api/v1/attachments/{id}/archive`` and ``/restore``: why (kept in the audit trail)."""

    reason: str = Field(min_length=1, max_length=500, description="why it is archived or restored")


class AttachmentPage(SQLModel):
    items: list[AttachmentRead]
    withheld: bool = Field(description="true when the compound is embargoed and the caller may not see it")
