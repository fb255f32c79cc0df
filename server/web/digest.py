"""The weekly digest page (/digest) and its Markdown (/digest.md)."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response

from ..deps import PageActor, SessionDep
from ..services import digest
from .render import render

router = APIRouter(include_in_schema=False)


@router.get("/digest", response_class=HTMLResponse)
def digest_page(request: Request, session: SessionDep, actor: PageActor, since: Optional[str] = None):
    d = digest.build(session, digest.parse_since(since), actor=actor)
    return render(request, "pages/digest.html", {"d": d, "sections": digest.lines(d)}, actor=actor)


@router.get("/digest.md")
def digest_markdown(session: SessionDep, actor: PageActor, since: Optional[str] = None) -> Response:
    d = digest.build(session, digest.parse_since(since), actor=actor)
    return Response(digest.markdown(d), media_type="text/markdown; charset=utf-8",
                    headers={"Content-Disposition": f'inline; filename="digest-{d.since.isoformat()}.md"'})
