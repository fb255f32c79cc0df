"""The comparison page (/compare?codes=A,B&kind=...) and its figure as SVG or PDF (/compare.svg, .pdf)."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, Response

from ..deps import PageActor, SessionDep
from ..services import compare
from .render import render

router = APIRouter(include_in_schema=False)

FORMATS = {"svg": "image/svg+xml", "pdf": "application/pdf"}


def _build(session, actor, codes: Optional[str], kind: Optional[str], reduced: bool):
    return compare.comparison(session, compare.parse_codes(codes), compare.parse_kind(kind), actor=actor,
                              reduced=reduced)


@router.get("/compare", response_class=HTMLResponse)
def compare_page(request: Request, session: SessionDep, actor: PageActor, codes: Optional[str] = None,
                 kind: Optional[str] = None, reduced: bool = False):
    data = _build(session, actor, codes, kind, reduced)
    query = request.url.query
    return render(request, "pages/compare.html",
                  {**data, "figure_json": compare.figure_as_json(data) if data["rows"] else None,
                   "query": query, "codes": codes, "kinds": compare.OVERLAY_KINDS, "reduced": reduced},
                  actor=actor)


@router.get("/compare.{fmt}")
def compare_figure(fmt: str, session: SessionDep, actor: PageActor, codes: Optional[str] = None,
                   kind: Optional[str] = None, reduced: bool = False) -> Response:
    if fmt not in FORMATS:
        return Response(f"no format {fmt}; use svg or pdf", status_code=404, media_type="text/plain")
    data = _build(session, actor, codes, kind, reduced)
    return Response(compare.figure_file(data, fmt), media_type=FORMATS[fmt],
                    headers={"Content-Disposition": f'inline; filename="comparison-{data["kind"].name}.{fmt}"'})
