"""Compound pages: the registry table and its export, registration, the compound page and its
forms (edit, archive, barriers, verdict override, estimates), the rates table and the timeline."""

from __future__ import annotations

from typing import Optional
from urllib.parse import quote

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from pydantic import ValidationError

from ..chem import scaffold as chem_scaffold
from ..deps import PageActor, PageAdmin, PageWriter, SessionDep, SettingsDep
from ..errors import InputError
from ..ingest.conditions import parse_quantity
from ..jobs import queue
from ..models import CompoundCreate, CompoundUpdate, SideChainSpec
from ..bounds import BUILT_CHAIN_CARBONS, whole_number
from ..services import attachments, barriers, comments, estimates, exports, freezes, notifications, planning_pages, registry, status, verdicts, views
from ..services.compound_page import compound_page as compound_page_data
from ..services.timeline import lab_timeline
from ..services.errors import Duplicate
from ..kinds import KINDS
from .render import fragment_or_redirect, redirect, render

router = APIRouter(include_in_schema=False)

CHAIN_KINDS = ("alkoxy", "alkylthio", "alkyl")


@router.get("/")
def home() -> RedirectResponse:
    return RedirectResponse("/compounds", status_code=303)


# --- the registry table ------------------------------------------------------------------------


@router.get("/compounds", response_class=HTMLResponse)
def compound_list(request: Request, session: SessionDep, actor: PageActor):
    """The registry table: filters, sort and page live in the query string, so every view is a link.

    Bad input (a SMARTS RDKit cannot read, a number that is not one) answers 422 with the error and
    no table: a list shown under the error would be another view than the one in the form. The form
    keeps every value as typed, the bad one included, so it can be corrected in place."""
    q, error = views.parse_view_or_error(request.query_params)
    result = None
    if error is None:
        try:
            result = views.query_view(session, q, actor=actor, count=False)
            q = result.query  # a "previous" that reached the top is the first page
        except InputError as exc:
            error = exc
    form = {**q.values, "substructure": q.substructure, "similar": q.similar, "threshold": q.threshold}
    if error is not None and error.field in views.PARAM_LABELS:
        form[error.field] = request.query_params.get(error.field, "")
    return render(
        request, "pages/compounds.html",
        {"result": result, "q": q, "form": form, "error": _view_error(error),
         "choices": views.filter_choices(session), "sorts": views.SORTS, "link": q.link()},
        partial="partials/compound_table.html", actor=actor, status_code=422 if error else 200,
    )


@router.get("/compounds/count", response_class=HTMLResponse)
def compound_count(request: Request, session: SessionDep, actor: PageActor):
    """How many compounds a view lists: what the registry page asks for once its first rows are shown
    (the count reads every matching row, the page only the rows it shows). The same query string as
    the list; the answer depends on the caller exactly as the list does (views.count_view)."""
    error = None
    try:
        q = views.parse_view(request.query_params)
        total = views.count_view(session, q, actor=actor)
    except InputError as exc:
        q, error, total = views.ViewQuery(), exc, None
    result = views.ViewResult(rows=[], total=total, query=q)
    return render(request, "pages/compound_count.html",
                  {"result": result, "oob": True, "error": _view_error(error), "link": q.link(after=None, before=None)},
                  partial="partials/compound_count.html", actor=actor, status_code=422 if error else 200)


def _view_error(error: Optional[InputError]) -> Optional[dict]:
    """An error as the registry page shows it: the box it is about, the plain message, the library's words."""
    if error is None:
        return None
    label = views.PARAM_LABELS.get(error.field or "")
    return {"field": error.field if label else None, "label": label,
            "message": error.message if label else str(error), "detail": error.detail if label else None}


@router.get("/compounds/export.{fmt}")
def compound_export(fmt: str, request: Request, session: SessionDep, actor: PageActor):
    """The current view (all pages) as CSV or XLSX, units in the column headers."""
    q = views.parse_view(request.query_params)
    frame = views.export_frame(views.query_view(session, q, actor=actor, paged=False), actor=actor)
    body, media = exports.table_bytes(frame, fmt, sheet="compounds", formula_columns=views.EXPORT_FORMULA_COLUMNS)
    return Response(body, media_type=media,
                    headers={"Content-Disposition": f'attachment; filename="remanence-compounds.{fmt}"'})


# --- registration ------------------------------------------------------------------------------


def _new_form_context(session, form: dict, error: Optional[str] = None, preview=None) -> dict:  # noqa: ANN001
    return {
        "form": form,
        "error": error,
        "preview": preview,
        "scaffolds": registry.list_scaffolds(session),
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
        state="planned" if form.get("planned") in ("on", "true", "1") else None,
        rationale=form.get("rationale", ""),
        priority=whole_number("priority", form.get("priority"), lo=1, hi=5) if form.get("priority") else None,
    )


FORM_FIELDS = ("smiles", "label", "scaffold", "chain_kind", "chain_carbons", "branched_form", "notes", "embargoed",
               "planned", "rationale", "priority")


async def _form_dict(request: Request) -> dict:
    form = await request.form()
    return {k: (form.get(k) if isinstance(form.get(k), str) else "") for k in FORM_FIELDS}


@router.get("/compounds/new", response_class=HTMLResponse)
def compound_new_form(request: Request, session: SessionDep, actor: PageWriter):
    return render(request, "pages/compound_new.html", _new_form_context(session, {}), actor=actor)


@router.post("/compounds/preview", response_class=HTMLResponse)
async def compound_preview(request: Request, session: SessionDep, actor: PageWriter):
    """Live preview for the registration form (htmx): drawing, formula, masses, side chains, the scaffold
    the structure is built on (the largest registered one, saying so when several match), or the error."""
    form = await _form_dict(request)
    preview, error, built = None, None, None
    try:
        data = _compound_create(form)
        text = registry.resolve_structure(session=session, data=data)
        built = None if data.smiles else text
        preview = registry.preview(session=session, text=text, scaffold=data.scaffold)
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


# --- one compound ------------------------------------------------------------------------------


@router.get("/compounds/{code}", response_class=HTMLResponse)
def compound_page(code: str, request: Request, session: SessionDep, actor: PageActor):
    compound = registry.get_compound(session, code)
    ctx = compound_page_data(session, compound, actor=actor)
    ctx.update(kinds=KINDS, planning=planning_pages.compound_section(session, compound, actor=actor),
               thread=comments.thread_panel(session, comments.resolve(session, "compound", compound.code),
                                            actor=actor),
               gallery=attachments.gallery_panel(session, comments.resolve(session, "compound", compound.code),
                                                 actor=actor),
               compound_freezes=freezes.freezes_of_compound(session, compound, actor=actor),
               following=notifications.is_following(session, actor, compound))
    return render(request, "pages/compound.html", ctx, actor=actor)


@router.post("/compounds/{code}/edit")
async def compound_edit(code: str, request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    compound = registry.get_compound(session, code)
    # Absent fields mean "unchanged" (a partial post must not lift the embargo or clear the scaffold).
    # A present but empty scaffold field clears the scaffold: the service does it, so the audit entry's
    # "before" still shows the scaffold that was there. An unticked checkbox sends nothing, so the
    # form carries ``embargoed_field`` to say the box was shown; without it the embargo stays as it is.
    changes: dict = {}
    for name in ("label", "notes"):
        if name in form:
            changes[name] = str(form.get(name))
    if "scaffold" in form:
        changes["scaffold"] = str(form.get("scaffold")) or None
    if "embargoed_field" in form or "embargoed" in form:
        changes["embargoed"] = form.get("embargoed") in ("on", "true", "1")
    data = CompoundUpdate(**changes)
    registry.update_compound(session=session, compound=compound, data=data, actor=actor.label)
    return redirect(f"/compounds/{quote(code)}", request)


@router.post("/compounds/{code}/archive")
async def compound_archive(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    registry.set_compound_archived(session=session, compound=compound, archived=not compound.archived,
                                   actor=actor.label)
    return redirect(f"/compounds/{quote(code)}", request)


@router.get("/compounds/{code}/timeline", response_class=HTMLResponse)
def timeline(code: str, request: Request, session: SessionDep, actor: PageActor):
    compound = registry.get_compound(session, code)
    entries = lab_timeline(session, compound, actor=actor)
    return render(request, "pages/timeline.html", {"c": compound, "entries": entries},
                  partial="partials/timeline.html", actor=actor)


# --- barriers, verdict, estimates --------------------------------------------------------------


def _conditions(t: str, f: str) -> tuple[float, Optional[float]]:
    t_K = parse_quantity(t or "298.15 K", field="t", unit="K", example="300 K or 25 degC", temperature=True)
    f_Hz = parse_quantity(f, field="f", unit="Hz", example="1 kHz") if f and f.strip() else None
    return t_K, f_Hz


@router.get("/compounds/{code}/rates", response_class=HTMLResponse)
def rates_partial(code: str, request: Request, session: SessionDep, actor: PageActor, t: str = "298.15 K",
                  f: str = "1 kHz"):
    compound = registry.get_compound(session, code)
    error = None
    try:
        t_K, f_Hz = _conditions(t, f)
    except InputError as exc:
        error, t_K, f_Hz = str(exc), 298.15, None
    return render(request, "partials/barriers.html",
                  {"c": compound, "barriers": barriers.barrier_rows(session, compound, t_K=t_K, frequency_Hz=f_Hz),
                   "t": t, "f": f, "t_K": t_K, "f_Hz": f_Hz, "rate_error": error}, actor=actor)


def _optional_quantity(form, name: str, unit: str, example: str, *, positive: bool = True) -> Optional[float]:  # noqa: ANN001
    text = str(form.get(name, "") or "").strip()
    return parse_quantity(text, field=name, unit=unit, example=example, positive=positive) if text else None


def _short_text(form, name: str, limit: int) -> str:  # noqa: ANN001 - form data
    text = str(form.get(name, "") or "").strip()
    if len(text) > limit:
        raise InputError(f"'{name}' is at most {limit} characters", field=name)
    return text


@router.post("/compounds/{code}/barriers", response_class=HTMLResponse)
async def add_barrier(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    form = await request.form()
    method = str(form.get("method", ""))
    try:
        if method == "coalescence":
            data = barriers.CoalescenceIn(
                method="coalescence",
                tc_K=parse_quantity(str(form.get("tc", "")), field="tc", unit="K", example="253 K or -20 degC",
                                    temperature=True),
                dnu_Hz=parse_quantity(str(form.get("dnu", "")), field="dnu", unit="Hz", example="85 Hz"),
                j_Hz=_optional_quantity(form, "j", "Hz", "16 Hz", positive=False),
                spectrometer_MHz=_optional_quantity(form, "spectrometer", "MHz", "400 MHz"),
                nucleus=_short_text(form, "nucleus", 10), solvent=_short_text(form, "solvent", 80),
                notes=str(form.get("notes", "")))
        elif method == "imported":
            try:
                dg = float(str(form.get("dg_kcal_mol", "")))
            except ValueError:
                raise InputError("give the barrier as a number in kcal/mol", field="dg_kcal_mol") from None
            level = str(form.get("level_of_theory", "")).strip()
            if not level:
                raise InputError("name the level of theory or the source", field="level_of_theory")
            data = barriers.ImportedIn(method="imported", dg_kcal_mol=dg, level_of_theory=level,
                                       notes=str(form.get("notes", "")))
        else:
            raise InputError("choose coalescence or imported", field="method")
        barriers.add_barrier(session=session, compound=compound, data=data, actor=actor.label)
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    return redirect(f"/compounds/{quote(code)}#barriers", request)


@router.post("/compounds/{code}/verdict", response_class=HTMLResponse)
async def override(code: str, request: Request, session: SessionDep, actor: PageAdmin):
    compound = registry.get_compound(session, code)
    form = await request.form()
    new = str(form.get("code", "")) or None
    try:
        verdicts.set_override(session=session, compound=compound, code=new, reason=str(form.get("reason", "")),
                              actor=actor.label)
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    return redirect(f"/compounds/{quote(code)}#verdict", request)


@router.post("/compounds/{code}/estimate", response_class=HTMLResponse)
async def queue_estimate(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    form = await request.form()
    try:
        job = estimates.queue_estimate(session=session, compound=compound,
                                       truncate_side_chains=form.get("full_chains") != "on", actor=actor.label)
    except InputError as exc:
        return render(request, "partials/job.html", {"job": None, "error": str(exc)}, status_code=422, actor=actor)
    return fragment_or_redirect(request, "partials/job.html", {"job": queue.job_read(job, session=session)},
                                f"/compounds/{quote(code)}#estimates", actor=actor)
