"""Sample pages: one specimen with its history and series plots."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import PageActor, SessionDep
from ..kinds import KINDS
from ..services import attachments, comments, samples
from .render import render

router = APIRouter(include_in_schema=False)


@router.get("/samples/{code}", response_class=HTMLResponse)
def sample_page(code: str, request: Request, session: SessionDep, actor: PageActor):
    sample = samples.get_sample(session, code)
    return render(request, "pages/sample.html", {**samples.sample_page(session, sample), "kinds": KINDS,
                   "thread": comments.thread_panel(session, comments.resolve(session, "sample", sample.code), actor=actor),
                   "gallery": attachments.gallery_panel(session, comments.resolve(session, "sample", sample.code),
                                                        actor=actor)},
                  actor=actor)
