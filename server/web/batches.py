"""Batch pages: the form that records a new batch of a compound; the batch page (identity evidence, its SI
paragraph, and the member's confirmation)."""

from __future__ import annotations

from datetime import date
from urllib.parse import quote

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from pydantic import ValidationError

from ..deps import PageActor, PageWriter, SessionDep
from ..errors import InputError
from ..models import BATCH_STATES, BatchCreate
from ..services import accounts, attachments, comments, identity, registry
from .render import redirect, render

router = APIRouter(include_in_schema=False)

BATCH_FIELDS = ("made_on", "chemist", "scale_mg", "yield_pct", "purity_pct", "state", "notes")


def _batch_create(form: dict) -> BatchCreate:
    values: dict = {}
    for key in BATCH_FIELDS:
        raw = (form.get(key) or "").strip()
        if raw == "":
            continue
        if key in ("scale_mg", "yield_pct", "purity_pct"):
            try:
                values[key] = float(raw)
            except ValueError:
                raise InputError(f"{raw!r} is not a number", field=key) from None
        elif key == "made_on":
            try:
                values[key] = date.fromisoformat(raw)
            except ValueError:
                raise InputError(f"{raw!r} is not a date (YYYY-MM-DD)", field=key) from None
        else:
            values[key] = raw
    try:
        return BatchCreate(**values)
    except ValidationError as exc:
        err = exc.errors()[0]
        raise InputError(err["msg"], field=str(err["loc"][0])) from None


@router.get("/compounds/{code}/batches/new", response_class=HTMLResponse)
def batch_new_form(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    form = {"made_on": date.today().isoformat(), "chemist": accounts.signing_name(session, actor), "state": "made"}
    return render(request, "pages/batch_new.html",
                  {"c": compound, "form": form, "error": None, "states": BATCH_STATES}, actor=actor)


@router.post("/compounds/{code}/batches/new", response_class=HTMLResponse)
async def batch_create(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    raw = await request.form()
    form = {k: str(raw.get(k, "")) for k in BATCH_FIELDS}
    try:
        registry.add_batch(session=session, compound=compound, data=_batch_create(form), actor=actor.label)
    except InputError as exc:
        return render(request, "pages/batch_new.html",
                      {"c": compound, "form": form, "error": str(exc), "states": BATCH_STATES},
                      status_code=422, actor=actor)
    return redirect(f"/compounds/{quote(code)}", request)



@router.get("/batches/{code}", response_class=HTMLResponse)
def batch_page(code: str, request: Request, session: SessionDep, actor: PageActor):
    return render(request, "pages/batch.html", {**identity.batch_page(session=session, code=code, actor=actor),
                                                "error": None, "gallery": _gallery(session, code, actor)}, actor=actor)


def _gallery(session, code: str, actor) -> dict:  # noqa: ANN001
    return attachments.gallery_panel(session, comments.resolve(session, "batch", code), actor=actor)


@router.post("/batches/{code}/identity", response_class=HTMLResponse)
async def batch_identity_set(code: str, request: Request, session: SessionDep, actor: PageWriter):
    """The confirm / withdraw form (``action`` = ``confirm`` or ``withdraw``, ``note``)."""
    form = await request.form()
    action, note = str(form.get("action", "")), str(form.get("note", ""))
    try:
        if action not in ("confirm", "withdraw"):
            raise InputError("action must be confirm or withdraw", field="action")
        identity.set_identity(session=session, code=code, confirmed=action == "confirm", note=note, actor=actor)
    except InputError as exc:
        return render(request, "pages/batch.html",
                      {**identity.batch_page(session=session, code=code, actor=actor), "error": str(exc),
                       "note": note, "gallery": _gallery(session, code, actor)}, status_code=422, actor=actor)
    return redirect(f"/batches/{quote(code)}", request)
