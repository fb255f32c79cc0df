"""Paper freeze pages: the list with the freeze form, one freeze with what moved since, the
publication form (dataset DOI, deposition numbers)."""

from __future__ import annotations

import re

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import PageActor, PageWriter, RowId, SessionDep
from ..errors import InputError
from ..services import freezes
from ..services.errors import Duplicate
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def _list(request: Request, session, actor, *, error: str = "", form=None, status_code: int = 200):  # noqa: ANN001
    items = [freezes.freeze_read(session, f, actor=actor, with_diff=False) for f in freezes.list_freezes(session)]
    return render(request, "pages/freezes.html", {"freezes": items, "error": error,
                                                  "form": form or {"name": "", "compounds": "",
                                                                   "view": request.query_params.get("view", "")}},
                  actor=actor, status_code=status_code)


@router.get("/freezes", response_class=HTMLResponse)
def freeze_list(request: Request, session: SessionDep, actor: PageActor):
    return _list(request, session, actor)


@router.post("/freezes", response_class=HTMLResponse)
async def freeze_create(request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    name, text, view = (str(form.get(k) or "") for k in ("name", "compounds", "view"))
    try:
        freeze = freezes.create_freeze(session=session, name=name, codes=re.split(r"[\s,;]+", text), view=view,
                                       actor=actor)
    except (InputError, Duplicate) as exc:
        return _list(request, session, actor, error=str(exc), form={"name": name, "compounds": text, "view": view},
                     status_code=409 if isinstance(exc, Duplicate) else 422)
    return redirect(f"/freezes/{freeze.id}", request)


def _page(request: Request, session, actor, freeze, *, error: str = "", status_code: int = 200):  # noqa: ANN001
    return render(request, "pages/freeze.html", {"f": freezes.freeze_read(session, freeze, actor=actor),
                                                 "error": error}, actor=actor, status_code=status_code)


@router.get("/freezes/{freeze_id}", response_class=HTMLResponse)
def freeze_page(freeze_id: RowId, request: Request, session: SessionDep, actor: PageActor):
    return _page(request, session, actor, freezes.get_freeze(session, freeze_id))


def parse_depositions(text: str) -> list[dict]:
    """Lines "CCDC 2345678" or "CCDC 2345678, 12" (the crystal measurement's id) as the service takes them."""
    out = []
    for line in text.splitlines():
        if not line.strip():
            continue
        number, _, mid = line.partition(",")
        mid = mid.strip()
        out.append({"number": number.strip(), "measurement": int(mid) if mid.isdigit() and len(mid) < 10 else
                    (mid or None)})
    return out


@router.post("/freezes/{freeze_id}/publication", response_class=HTMLResponse)
async def freeze_publication(freeze_id: RowId, request: Request, session: SessionDep, actor: PageWriter):
    freeze = freezes.get_freeze(session, freeze_id)
    form = await request.form()
    try:
        freezes.set_publication(session=session, freeze=freeze, dataset_doi=str(form.get("dataset_doi") or ""),
                                depositions=parse_depositions(str(form.get("depositions") or "")), actor=actor)
    except InputError as exc:
        session.rollback()
        return _page(request, session, actor, freeze, error=str(exc), status_code=422)
    return redirect(f"/freezes/{freeze.id}", request)
