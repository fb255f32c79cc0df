"""Comment threads: ``GET``/``POST /api/v1/{compounds|batches|samples|measurements}/{id-or-code}/comments``,
and one comment's edit, archive, restore and history."""

from __future__ import annotations

from fastapi import APIRouter
from pydantic import Field

from ...deps import Reader, RowId, SessionDep, Writer
from ...models import CommentIn, CommentPage, CommentRead
from ...services import comments
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND, Closed

router = APIRouter(tags=["comments"])

READ = {**AUTH_ERRORS, **NOT_FOUND}
WRITE = {**AUTH_ERRORS, **NOT_FOUND, **INPUT_ERRORS}


class EarlierText(Closed):
    at: str = Field(description="when it was replaced, ISO 8601, UTC")
    by: str
    body: str


class CommentHistory(Closed):
    comment: CommentRead
    earlier: list[EarlierText] = Field(description="every earlier text, oldest first, from the audit trail")


def _page(session, kind: str, ref: str, actor) -> CommentPage:  # noqa: ANN001
    return CommentPage(**comments.thread(session, comments.resolve(session, kind, ref), actor=actor))


def _post(session, kind: str, ref: str, data: CommentIn, actor) -> CommentRead:  # noqa: ANN001
    target = comments.resolve(session, kind, ref)
    return comments.comment_read(comments.post_comment(session=session, target=target, body=data.body, actor=actor),
                                 target)


@router.get("/compounds/{code}/comments", response_model=CommentPage, responses=READ)
def compound_comments(code: str, session: SessionDep, actor: Reader) -> CommentPage:
    """The compound's live comments, oldest first (``withheld`` for an embargoed compound the caller may not see)."""
    return _page(session, "compound", code, actor)


@router.post("/compounds/{code}/comments", status_code=201, response_model=CommentRead, responses=WRITE)
def post_compound_comment(code: str, data: CommentIn, session: SessionDep, actor: Writer) -> CommentRead:
    """Comment on a compound: Markdown (raw HTML shown as text); ``@name`` mentions accounts."""
    return _post(session, "compound", code, data, actor)


@router.get("/batches/{code}/comments", response_model=CommentPage, responses=READ)
def batch_comments(code: str, session: SessionDep, actor: Reader) -> CommentPage:
    return _page(session, "batch", code, actor)


@router.post("/batches/{code}/comments", status_code=201, response_model=CommentRead, responses=WRITE)
def post_batch_comment(code: str, data: CommentIn, session: SessionDep, actor: Writer) -> CommentRead:
    return _post(session, "batch", code, data, actor)


@router.get("/samples/{sample_code}/comments", response_model=CommentPage, responses=READ)
def sample_comments(sample_code: str, session: SessionDep, actor: Reader) -> CommentPage:
    return _page(session, "sample", sample_code, actor)


@router.post("/samples/{sample_code}/comments", status_code=201, response_model=CommentRead, responses=WRITE)
def post_sample_comment(sample_code: str, data: CommentIn, session: SessionDep, actor: Writer) -> CommentRead:
    return _post(session, "sample", sample_code, data, actor)


@router.get("/measurements/{measurement_id}/comments", response_model=CommentPage, responses=READ)
def measurement_comments(measurement_id: RowId, session: SessionDep, actor: Reader) -> CommentPage:
    return _page(session, "measurement", str(measurement_id), actor)


@router.post("/measurements/{measurement_id}/comments", status_code=201, response_model=CommentRead, responses=WRITE)
def post_measurement_comment(measurement_id: RowId, data: CommentIn, session: SessionDep, actor: Writer) -> CommentRead:
    return _post(session, "measurement", str(measurement_id), data, actor)


def _one(session, comment_id: int, actor) -> tuple:  # noqa: ANN001
    comment = comments.get_comment(session, comment_id, actor=actor)
    return comment, comments.target_of(session, comment)


@router.patch("/comments/{comment_id}", response_model=CommentRead, responses=WRITE)
def edit_comment(comment_id: RowId, data: CommentIn, session: SessionDep, actor: Writer) -> CommentRead:
    """Replace a comment's text (its author or an admin); the old text stays in the audit trail."""
    comment, target = _one(session, comment_id, actor)
    return comments.comment_read(comments.edit_comment(session=session, comment=comment, body=data.body, actor=actor),
                                 target)


@router.post("/comments/{comment_id}/archive", response_model=CommentRead, responses=READ)
def archive_comment(comment_id: RowId, session: SessionDep, actor: Writer) -> CommentRead:
    """Take a comment out of its thread (its author or an admin); nothing is deleted."""
    comment, target = _one(session, comment_id, actor)
    return comments.comment_read(comments.set_archived(session=session, comment=comment, archived=True, actor=actor),
                                 target)


@router.post("/comments/{comment_id}/restore", response_model=CommentRead, responses=READ)
def restore_comment(comment_id: RowId, session: SessionDep, actor: Writer) -> CommentRead:
    comment, target = _one(session, comment_id, actor)
    return comments.comment_read(comments.set_archived(session=session, comment=comment, archived=False, actor=actor),
                                 target)


@router.get("/comments/{comment_id}/history", responses=READ)
def comment_history(comment_id: RowId, session: SessionDep, actor: Reader) -> CommentHistory:
    """The comment now and every earlier text, oldest first, from the audit trail."""
    comment, target = _one(session, comment_id, actor)
    return {"comment": comments.comment_read(comment, target).model_dump(mode="json"),
            "earlier": [{**e, "at": e["at"].isoformat()} for e in comments.edit_history(session, comment)]}
