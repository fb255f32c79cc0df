"""HTML pages for people: thin handlers that parse a form, call one service, render."""

from __future__ import annotations

from datetime import date
from typing import Annotated, Optional
from urllib.parse import quote

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from pydantic import ValidationError
from sqlmodel import select

from ..bounds import BUILT_CHAIN_CARBONS, whole_number
from ..chem import scaffold as chem_scaffold
from ..deps import Actor, OptionalActor, SessionDep, SettingsDep, check_csrf
from ..errors import InputError
from ..models import BATCH_STATES, BatchCreate, CompoundCreate, CompoundUpdate, Scaffold, ScaffoldCreate, SideChainSpec
from ..plots import figure_json, summary
from ..jobs import queue
from ..services import accounts, barriers, estimates, exports, measurements, registry, verdicts, views
from ..services.kinds import KINDS
from ..analysis.verdict import LABELS as VERDICT_LABELS
from ..services.errors import Duplicate
from ..security import same_token
from .render import redirect, render

router = APIRouter(include_in_schema=False)

PAGE_SIZE = 50
CHAIN_KINDS = ("alkoxy", "alkylthio", "alkyl")


class LoginRequired(Exception):
    def __init__(self, next_url: str) -> None:
        self.next_url = next_url


class PageForbidden(Exception):
    def __init__(self, message: str) -> None:
        self.message = message


def page_actor(request: Request, actor: OptionalActor) -> Actor:
    if actor is None:
        raise LoginRequired(request.url.path + (f"?{request.url.query}" if request.url.query else ""))
    return actor


async def page_writer(request: Request, actor: Annotated[Actor, Depends(page_actor)]) -> Actor:
    if not actor.can_write:
        raise PageForbidden("Your account can read the registry but not change it; ask an admin for a member role.")
    await check_csrf(request, actor)
    return actor


PageActor = Annotated[Actor, Depends(page_actor)]
PageWriter = Annotated[Actor, Depends(page_writer)]


def _safe_next(url: str | None) -> str:
    # Only same-site paths: never redirect to another host after login.
    if url and url.startswith("/") and not url.startswith("//") and "\\" not in url:
        return url
    return "/compounds"


# --- login -------------------------------------------------------------------------------------


@router.get("/login", response_class=HTMLResponse)
def login_form(request: Request, next: str = "/compounds") -> HTMLResponse:
    return render(request, "pages/login.html", {"next": _safe_next(next), "error": None})


@router.post("/login", response_class=HTMLResponse)
def login(
    request: Request,
    session: SessionDep,
    settings: SettingsDep,
    username: Annotated[str, Form()] = "",
    password: Annotated[str, Form()] = "",
    csrf_token: Annotated[str, Form()] = "",
    next: Annotated[str, Form()] = "/compounds",
):
    if not same_token(csrf_token, request.session.get("csrf")):
        return render(request, "pages/login.html", {"next": _safe_next(next), "error": "The form expired; try again."},
                      status_code=403)
    user = accounts.authenticate(session=session, username=username, password=password)
    if user is None:
        return render(
            request, "pages/login.html",
            {"next": _safe_next(next), "error": "Wrong user name or password (or too many tries: wait five minutes)."},
            status_code=401,
        )
    request.session.clear()
    request.session["uid"] = user.id
    request.session["pw"] = user.password_hash[-16:]  # a password change ends old sessions
    return redirect(_safe_next(next))


@router.post("/logout")
async def logout(request: Request, actor: OptionalActor):
    await check_csrf(request, actor)
    request.session.clear()
    return redirect("/login")


@router.get("/")
def home() -> RedirectResponse:
    return RedirectResponse("/compounds", status_code=303)


# --- compounds ---------------------------------------------------------------------------------


@router.get("/compounds", response_class=HTMLResponse)
def compound_list(request: Request, session: SessionDep, actor: PageActor):
    """The registry table: filters, sort and page live in the query string, so every view is a link."""
    error = None
    try:
        q = views.parse_view(request.query_params)
        result = views.query_view(session, q, see_embargoed=actor.can_see_embargoed)
    except InputError as exc:
        error, q = str(exc), views.ViewQuery()
        result = views.query_view(session, q, see_embargoed=actor.can_see_embargoed)
    return render(
        request, "pages/compounds.html",
        {"result": result, "q": q, "error": error, "choices": views.filter_choices(session), "sorts": views.SORTS,
         "verdict_labels": VERDICT_LABELS, "link": q.link()},
        partial="partials/compound_table.html", actor=actor, status_code=422 if error else 200,
    )


@router.get("/compounds/export.{fmt}")
def compound_export(fmt: str, request: Request, session: SessionDep, actor: PageActor):
    """The current view (all pages) as CSV or XLSX, units in the column headers."""
    q = views.parse_view(request.query_params)
    frame = views.export_frame(views.query_view(session, q, paged=False, see_embargoed=actor.can_see_embargoed),
                               hide_structures_of_embargoed=not actor.can_see_embargoed)
    body, media = exports.table_bytes(frame, fmt, sheet="compounds")
    return Response(body, media_type=media,
                    headers={"Content-Disposition": f'attachment; filename="remanence-compounds.{fmt}"'})


def _scaffolds(session) -> list[Scaffold]:  # noqa: ANN001
    return list(session.exec(select(Scaffold).order_by(Scaffold.code)).all())


def _new_form_context(session, form: dict, error: Optional[str] = None, preview=None) -> dict:  # noqa: ANN001
    return {
        "form": form,
        "error": error,
        "preview": preview,
        "scaffolds": _scaffolds(session),
        "chain_kinds": CHAIN_KINDS,
        "branched_forms": sorted(chem_scaffold.BRANCHED_FORMS),
    }


def _compound_create(form: dict) -> CompoundCreate:
    """Form fields -> CompoundCreate (the same shape the JSON API takes)."""
    chain = None
    if not (form.get("smiles") or "").strip() and form.get("scaffold") and form.get("chain_kind"):
        carbons = form.get("chain_carbons") or None
        carbons_int = whole_number("chain_carbons", carbons, lo=BUILT_CHAIN_CARBONS[0],
                                   hi=BUILT_CHAIN_CARBONS[1]) if carbons else None
        try:
            chain = SideChainSpec(kind=form["chain_kind"], carbons=carbons_int,
                                  branched_form=form.get("branched_form") or None)
        except ValidationError as exc:
            raise InputError(exc.errors()[0]["msg"], field="chain_carbons") from None
    return CompoundCreate(
        smiles=form.get("smiles") or None,
        label=form.get("label", ""),
        scaffold=form.get("scaffold") or None,
        side_chain=chain,
        notes=form.get("notes", ""),
        embargoed=form.get("embargoed") in ("on", "true", "1"),
    )


FORM_FIELDS = ("smiles", "label", "scaffold", "chain_kind", "chain_carbons", "branched_form", "notes", "embargoed")


async def _form_dict(request: Request) -> dict:
    form = await request.form()
    return {k: (form.get(k) if isinstance(form.get(k), str) else "") for k in FORM_FIELDS}


@router.get("/compounds/new", response_class=HTMLResponse)
def compound_new_form(request: Request, session: SessionDep, actor: PageWriter):
    return render(request, "pages/compound_new.html", _new_form_context(session, {}), actor=actor)


@router.post("/compounds/preview", response_class=HTMLResponse)
async def compound_preview(request: Request, session: SessionDep, actor: PageWriter):
    """Live preview for the registration form (htmx): drawing, formula, masses, side chains, or the error."""
    form = await _form_dict(request)
    preview, error, built = None, None, None
    try:
        data = _compound_create(form)
        text = registry.resolve_structure(session=session, data=data)
        built = None if data.smiles else text
        preview = registry.preview(session=session, text=text)
    except InputError as exc:
        error = str(exc) if (form.get("smiles") or form.get("chain_kind")) else None
    return render(request, "partials/preview.html",
                  {"preview": preview, "error": error, "built_smiles": built}, actor=actor)


@router.post("/compounds/new", response_class=HTMLResponse)
async def compound_create(request: Request, session: SessionDep, settings: SettingsDep, actor: PageWriter):
    form = await _form_dict(request)
    try:
        compound = registry.register_compound(session=session, settings=settings, data=_compound_create(form),
                                              actor=actor.label)
    except InputError as exc:
        return render(request, "pages/compound_new.html", _new_form_context(session, form, str(exc)),
                      status_code=422, actor=actor)
    except Duplicate as exc:
        msg = f"{exc} - open it instead of registering it twice."
        ctx = _new_form_context(session, form, msg)
        ctx["existing"] = exc.existing
        return render(request, "pages/compound_new.html", ctx, status_code=409, actor=actor)
    return redirect(f"/compounds/{quote(compound.code)}", request)


@router.get("/compounds/{code}", response_class=HTMLResponse)
def compound_page(code: str, request: Request, session: SessionDep, actor: PageActor):
    compound = registry.get_compound(session, code)
    read = registry.compound_read(session, compound, see_structure=actor.can_see_embargoed)
    batch_rows = registry.batches_of(session, compound)
    per_batch = verdicts.batch_verdicts(session, compound)
    batches = [registry.batch_read(session, b) for b in batch_rows]
    batch_verdicts = {b.code: per_batch[row.id].code for b, row in zip(batches, batch_rows) if row.id in per_batch}
    rows, _ = measurements.list_measurements(session, compound=compound.code, limit=1000)
    items = [measurements.measurement_read(session, m) for m in rows]
    fig = summary.switching_vs_temperature(items)
    from .science import barrier_rows  # late: science imports this module

    return render(request, "pages/compound.html",
                  {"c": read, "batches": batches, "scaffolds": _scaffolds(session), "measurements": items,
                   "summary_figure": figure_json(fig) if fig else None,
                   "transitions": summary.transitions_table(items), "kinds": KINDS,
                   "barriers": barrier_rows(session, compound, t_K=298.15, frequency_Hz=1000.0),
                   "t": "298.15 K", "f": "1 kHz", "t_K": 298.15, "f_Hz": 1000.0, "rate_error": None,
                   "verdict_labels": VERDICT_LABELS,
                   "estimates": estimates.estimates_of(session, compound),
                   "batch_verdicts": batch_verdicts,
                   "calibrated": _calibrated(session),
                   "active_jobs": [queue.job_read(j, session=session) for j in queue.list_jobs(
                       session, compound_id=compound.id, limit=5)[0] if j.state in ("queued", "running")]},
                  actor=actor)


def _calibrated(session):  # noqa: ANN001
    """The current calibration (measured = a + b computed), or None with fewer than three pairs."""
    from ..analysis.calibration import calibrate

    pairs = barriers.calibration_pairs(session)
    cal = calibrate([p["measured"] for p in pairs], [p["computed"] for p in pairs])
    return cal if cal.ok else None


@router.post("/compounds/{code}/edit")
async def compound_edit(code: str, request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    compound = registry.get_compound(session, code)
    data = CompoundUpdate(
        label=str(form.get("label", compound.label)),
        notes=str(form.get("notes", compound.notes)),
        scaffold=str(form.get("scaffold", "")) or None,
        embargoed=form.get("embargoed") == "on",
    )
    if data.scaffold is None:
        compound.scaffold_id = None
        data = CompoundUpdate(label=data.label, notes=data.notes, embargoed=data.embargoed)
    registry.update_compound(session=session, compound=compound, data=data, actor=actor.label)
    return redirect(f"/compounds/{quote(code)}", request)


@router.post("/compounds/{code}/archive")
async def compound_archive(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    registry.set_compound_archived(session=session, compound=compound, archived=not compound.archived,
                                   actor=actor.label)
    return redirect(f"/compounds/{quote(code)}", request)


# --- batches -----------------------------------------------------------------------------------

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
    form = {"made_on": date.today().isoformat(), "chemist": actor.name, "state": "made"}
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


# --- scaffolds ---------------------------------------------------------------------------------


@router.get("/scaffolds", response_class=HTMLResponse)
def scaffold_list(request: Request, session: SessionDep, actor: PageActor):
    items = [registry.scaffold_read(session, s) for s in _scaffolds(session)]
    return render(request, "pages/scaffolds.html", {"items": items, "form": {}, "error": None}, actor=actor)


@router.post("/scaffolds", response_class=HTMLResponse)
async def scaffold_create(request: Request, session: SessionDep, actor: PageWriter):
    raw = await request.form()
    form = {k: str(raw.get(k, "")) for k in ("code", "name", "smiles", "notes")}
    try:
        registry.create_scaffold(session=session, data=ScaffoldCreate(**form), actor=actor.label)
    except (InputError, Duplicate, ValidationError) as exc:
        msg = exc.errors()[0]["msg"] if isinstance(exc, ValidationError) else str(exc)
        items = [registry.scaffold_read(session, s) for s in _scaffolds(session)]
        return render(request, "pages/scaffolds.html", {"items": items, "form": form, "error": msg},
                      status_code=422, actor=actor)
    return redirect("/scaffolds", request)
