"""Scaffold pages: the list of registered cores and the form that adds one."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from pydantic import ValidationError

from ..deps import PageActor, PageWriter, SessionDep
from ..errors import InputError
from ..models import ScaffoldCreate
from ..services import registry
from ..services.errors import Duplicate
from .render import redirect, render

router = APIRouter(include_in_schema=False)


@router.get("/scaffolds", response_class=HTMLResponse)
def scaffold_list(request: Request, session: SessionDep, actor: PageActor):
    items = [registry.scaffold_read(session, s, actor=actor) for s in registry.list_scaffolds(session)]
    return render(request, "pages/scaffolds.html", {"items": items, "form": {}, "error": None}, actor=actor)


@router.post("/scaffolds", response_class=HTMLResponse)
async def scaffold_create(request: Request, session: SessionDep, actor: PageWriter):
    raw = await request.form()
    form = {k: str(raw.get(k, "")) for k in ("code", "name", "smiles", "notes")}
    try:
        registry.create_scaffold(session=session, data=ScaffoldCreate(**form), actor=actor.label)
    except (InputError, Duplicate, ValidationError) as exc:
        msg = exc.errors()[0]["msg"] if isinstance(exc, ValidationError) else str(exc)
        items = [registry.scaffold_read(session, s, actor=actor) for s in registry.list_scaffolds(session)]
        return render(request, "pages/scaffolds.html", {"items": items, "form": form, "error": msg},
                      status_code=422, actor=actor)
    return redirect("/scaffolds", request)
