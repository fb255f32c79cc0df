"""Planning pages: targets and the next-to-make ranking, the claim, a batch's route and lineage (with the
step and precursor forms and the copy of an earlier route), and the reagent table with its hazard data."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse
from pydantic import ValidationError

from ..deps import PageActor, PageWriter, SessionDep
from ..errors import InputError
from ..models.planning import ReagentCreate, ReagentUse, RouteStepIn
from ..services import planning, planning_pages, registry, routes
from ..services.errors import Duplicate, NotFound
from .render import redirect, render

router = APIRouter(include_in_schema=False)


@router.get("/planning", response_class=HTMLResponse)
def planning_page(request: Request, session: SessionDep, actor: PageActor, goal: str = "tc", state: str = "open",
                  t_ref_K: Optional[float] = None):
    """Targets by priority with predictions and estimate status; the ranking by the chosen goal (Pr at
    ``t_ref_K``)."""
    try:
        if state != "open":
            planning.targets(session, actor=actor, states=(state,))  # checks the state name
        ctx = planning_pages.planning_page(session, actor=actor, goal=goal, state=state, t_ref_K=t_ref_K)
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    return render(request, "pages/planning.html", ctx, actor=actor)


@router.post("/planning/{code}/claim")
def claim(code: str, request: Request, session: SessionDep, actor: PageWriter):
    """A chemist takes a target: it is assigned to them and moves to in synthesis."""
    compound = registry.get_compound(session, code)
    try:
        planning.claim(session=session, compound=compound, actor=actor)
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    return redirect("/planning", request)


def _route_page(request: Request, session, batch, actor, error: str = "", status: int = 200):  # noqa: ANN001
    ctx = planning_pages.route_page(session, batch, actor=actor)
    ctx["error"] = error
    return render(request, "pages/route.html", ctx, actor=actor, status_code=status)


@router.get("/planning/routes/{batch_code}", response_class=HTMLResponse)
def route_page(batch_code: str, request: Request, session: SessionDep, actor: PageActor):
    """A batch's synthesis: steps with their reagents' hazard data, what it was made from, what was made from it."""
    return _route_page(request, session, registry.get_batch(session, batch_code), actor)


def _number(text, field: str):  # noqa: ANN001, ANN202
    text = (text or "").strip()
    if not text:
        return None
    try:
        return float(text)
    except ValueError:
        raise InputError(f"{field}: '{text}' is not a number", field=field) from None


def _reagent_lines(text: str) -> list[ReagentUse]:
    """One reagent a line: 'name; amount; equivalents' (amount and equivalents optional)."""
    uses = []
    for n, line in enumerate((text or "").splitlines(), 1):
        if not line.strip():
            continue
        parts = [p.strip() for p in line.split(";")]
        eq = _number(parts[2], f"reagent line {n}: equivalents") if len(parts) > 2 else None
        uses.append(ReagentUse(reagent=parts[0], amount=parts[1] if len(parts) > 1 and parts[1] else None,
                               equivalents=eq))
    return uses


@router.post("/planning/routes/{batch_code}/steps")
async def add_step(batch_code: str, request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    batch = registry.get_batch(session, batch_code)
    try:
        step = RouteStepIn(description=form.get("description") or "", solvent=form.get("solvent") or "",
                           temperature=(form.get("temperature") or "").strip() or None,
                           time=(form.get("time") or "").strip() or None,
                           yield_pct=_number(form.get("yield_pct"), "yield_pct"),
                           reagents=_reagent_lines(form.get("reagents") or ""))
        routes.add_step(session=session, batch=batch, step=step, actor=actor.label)
    except ValidationError as exc:
        session.rollback()
        first = exc.errors()[0]
        where = ".".join(str(x) for x in first["loc"])
        return _route_page(request, session, batch, actor, f"{where}: {first['msg']}", 422)
    except InputError as exc:
        session.rollback()
        return _route_page(request, session, batch, actor, exc.message, 422)
    return redirect(f"/planning/routes/{batch.code}", request)


@router.post("/planning/routes/{batch_code}/precursors")
async def add_precursor(batch_code: str, request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    batch = registry.get_batch(session, batch_code)
    try:
        routes.add_precursor(session=session, batch=batch, precursor_code=form.get("precursor") or "", actor=actor.label)
    except InputError as exc:
        session.rollback()
        return _route_page(request, session, batch, actor, exc.message, 422)
    return redirect(f"/planning/routes/{batch.code}", request)


@router.post("/planning/routes/{batch_code}/copy")
async def copy_route(batch_code: str, request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    batch = registry.get_batch(session, batch_code)
    try:
        code = (form.get("source") or "").strip()
        try:
            source = registry.get_batch(session, code)
        except NotFound:
            raise InputError(f"no batch {code!r}", field="source") from None
        routes.copy_route(session=session, batch=batch, source=source, actor=actor.label)
    except InputError as exc:
        session.rollback()
        return _route_page(request, session, batch, actor, exc.message, 422)
    return redirect(f"/planning/routes/{batch.code}", request)


@router.get("/planning/reagents", response_class=HTMLResponse)
def reagents_page(request: Request, session: SessionDep, actor: PageActor):
    return render(request, "pages/reagents.html", {**planning_pages.reagents_page(session), "error": ""}, actor=actor)


@router.post("/planning/reagents")
async def add_reagent(request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    try:
        data = ReagentCreate(name=(form.get("name") or "").strip() or "?", smiles=form.get("smiles") or "",
                             hazard_codes=[c for c in (form.get("hazard_codes") or "").replace(",", " ").split() if c],
                             hazard_statements=form.get("hazard_statements") or "",
                             pictograms=form.getlist("pictograms"), sds_source=form.get("sds_source") or "")
        if data.name == "?":
            raise InputError("give the reagent's name", field="name")
        routes.create_reagent(session=session, data=data, actor=actor.label)
    except (InputError, Duplicate, ValidationError) as exc:
        session.rollback()
        msg = str(exc) if not isinstance(exc, ValidationError) else (
            f"{'.'.join(str(x) for x in exc.errors()[0]['loc'])}: {exc.errors()[0]['msg']}")
        ctx = {**planning_pages.reagents_page(session), "error": msg}
        return render(request, "pages/reagents.html", ctx, actor=actor, status_code=409 if isinstance(exc, Duplicate) else 422)
    return redirect("/planning/reagents", request)
