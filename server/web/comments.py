"""Comment threads on pages: post (htmx or plain form), edit, archive. The thread itself is
``partials/comments.html``, included by the compound, sample and measurement pages."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import PageWriter, RowId, SessionDep
from ..errors import InputError
from ..services import comments
from .render import fragment_or_redirect, render

router = APIRouter(include_in_schema=False)

PARTIAL = "partials/comments.html"


async def _post(request: Request, session, kind: str, ref: str, actor):  # noqa: ANN001, ANN202
    target = comments.resolve(session, kind, ref)
    body = str((await request.form()).get("body") or "")
    try:
        comments.post_comment(session=session, target=target, body=body, actor=actor)
    except InputError as exc:
        return render(request, PARTIAL, {"thread": comments.thread_panel(session, target, actor=actor, error=str(exc),
                                                                         draft=body)},
                      actor=actor, status_code=422)
    return fragment_or_redirect(request, PARTIAL, {"thread": comments.thread_panel(session, target, actor=actor)},
                                target.page_url, actor=actor)


@router.post("/compounds/{code}/comments", response_class=HTMLResponse)
async def compound_comment(code: str, request: Request, session: SessionDep, actor: PageWriter):
    return await _post(request, session, "compound", code, actor)


@router.post("/batches/{code}/comments", response_class=HTMLResponse)
async def batch_comment(code: str, request: Request, session: SessionDep, actor: PageWriter):
    return await _post(request, session, "batch", code, actor)


@router.post("/samples/{code}/comments", response_class=HTMLResponse)
async def sample_comment(code: str, request: Request, session: SessionDep, actor: PageWriter):
    return await _post(request, session, "sample", code, actor)


@router.post("/measurements/{measurement_id}/comments", response_class=HTMLResponse)
async def measurement_comment(measurement_id: RowId, request: Request, session: SessionDep, actor: PageWriter):
    return await _post(request, session, "measurement", str(measurement_id), actor)


@router.post("/comments/{comment_id}/edit", response_class=HTMLResponse)
async def edit(comment_id: RowId, request: Request, session: SessionDep, actor: PageWriter):
    comment = comments.get_comment(session, comment_id, actor=actor)
    target = comments.target_of(session, comment)
    body = str((await request.form()).get("body") or "")
    try:
        comments.edit_comment(session=session, comment=comment, body=body, actor=actor)
    except InputError as exc:
        return render(request, PARTIAL, {"thread": comments.thread_panel(session, target, actor=actor, error=str(exc))},
                      actor=actor, status_code=422)
    return fragment_or_redirect(request, PARTIAL, {"thread": comments.thread_panel(session, target, actor=actor)},
                                target.page_url, actor=actor)


@router.post("/comments/{comment_id}/archive", response_class=HTMLResponse)
async def archive(comment_id: RowId, request: Request, session: SessionDep, actor: PageWriter):
    comment = comments.get_comment(session, comment_id, actor=actor)
    target = comments.target_of(session, comment)
    comments.set_archived(session=session, comment=comment, archived=True, actor=actor)
    return fragment_or_redirect(request, PARTIAL, {"thread": comments.thread_panel(session, target, actor=actor)},
                                target.page_url, actor=actor)
