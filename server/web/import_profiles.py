"""The import-profile pages: the list, and the editor that writes a profile from a sample file."""

from __future__ import annotations

from functools import partial

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from starlette.concurrency import run_in_threadpool

from ..budget import pool_for
from ..deps import PageActor, PageWriter, SessionDep, SettingsDep
from ..errors import InputError
from ..ingest.columns import QUANTITIES
from ..ingest.conditions import CONDITION_FIELDS, TEXT_FIELDS
from ..ingest.profiles import mapped_quantities, sketch
from ..kinds import KINDS
from ..services import import_profiles, measurements, profiled_uploads
from ..services.errors import Duplicate
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def _context(session, form: dict, *, draft=None, preview=None, error=None, editing=None,  # noqa: ANN001
             versions=()) -> dict:
    """What the list/editor page shows. The mapping chosen so far is looked up by the file's column name (and
    the header line's key), so it stays on its column when a sample file is read again or the edit page opens
    a stored version before any file is chosen (then the rows come from the form itself)."""
    slots = range(import_profiles.EDITOR_SLOTS)
    mapping = {form[f"source_{i}"]: (form.get(f"to_{i}") or "", form.get(f"unit_{i}") or "")
               for i in slots if form.get(f"source_{i}")}
    cond_mapping = {form[f"cond_key_{i}"]: (form.get(f"cond_to_{i}") or "", form.get(f"cond_unit_{i}") or "")
                    for i in slots if form.get(f"cond_key_{i}")}
    file_units = {name: unit for _, name, unit in draft["header"]} if draft else {}
    choices = {source: _choice(to, given or file_units.get(source) or "") for source, (to, given) in mapping.items()
               if to and to != "ignore" and to not in _QUANTITY_NAMES}
    return {"profiles": import_profiles.list_profiles(session), "form": form, "draft": draft, "preview": preview,
            "choices": choices,
            "error": error, "kinds": {k: v for k, v in KINDS.items() if v.table}, "quantities": QUANTITIES,
            "condition_fields": CONDITION_FIELDS + TEXT_FIELDS, "mapping": mapping, "cond_mapping": cond_mapping,
            "editing": editing, "versions": versions,
            "action": f"/import-profiles/{editing.name}" if editing is not None else "/import-profiles"}


_QUANTITY_NAMES = frozenset(q.name for q in QUANTITIES)


def _described(q) -> str:  # noqa: ANN001 - a CanonicalQuantity
    return f"{q.label} ({q.unit or 'no unit'})"


def _choice(to: str, unit: str) -> dict:
    """How the drop-down shows a mapping that names a symbol or alias (``T``, ``Q``), not a canonical column:
    ``selected`` the one column it reads with this unit; else ``label`` (the option kept, in words) and ``note``
    (why the unit does not settle it, and what to pick)."""
    try:
        found = mapped_quantities(to, unit)
    except InputError as exc:
        return {"selected": None, "label": f"{to}: not read as it stands", "note": str(exc)}
    if len(found) == 1:
        return {"selected": found[0].name, "label": "", "note": ""}
    either = " or ".join(_described(q) for q in found)
    return {"selected": None, "label": f"{to}: {either}, by each file's unit",
            "note": f"'{to}' names more than one column: {either}. With no unit here, each file's header or units "
                    "row decides which; pick one of them to fix it."}


@router.get("/import-profiles", response_class=HTMLResponse)
def profiles_page(request: Request, session: SessionDep, actor: PageActor):
    return render(request, "pages/import_profiles.html", _context(session, {"delimiter": ",", "decimal": "."}),
                  actor=actor)


async def _form_and_file(request: Request, settings) -> tuple[dict, bytes]:  # noqa: ANN001
    form = await request.form()
    upload = form.get("file")
    raw = measurements.read_upload(upload, settings.max_upload_bytes) if hasattr(upload, "file") else b""
    return {k: v for k, v in form.items() if isinstance(v, str)}, raw


@router.post("/import-profiles/draft", response_class=HTMLResponse)
async def draft(request: Request, session: SessionDep, settings: SettingsDep, actor: PageWriter):
    """Read the sample file with the settings chosen so far: its first lines, the header row's columns to map,
    and (with a mapping) the preview of what the profile reads. Nothing is stored. The edit page posts here
    too (the dry run of an edit before it is saved)."""
    form, raw = await _form_and_file(request, settings)
    draft = preview = error = None
    try:
        if not raw:
            raise InputError("choose a sample file of the instrument", field="file")
        look = partial(sketch, encoding=form.get("encoding") or "auto", delimiter=form.get("delimiter") or ",",
                       skip_lines=int(form.get("skip_lines") or 0) if (form.get("skip_lines") or "0").isdigit() else 0,
                       start_after=form.get("start_after") or None, units_row=form.get("units_row") == "on")
        # In a thread, in the budget's child process: the first look decodes the whole file and runs the typed
        # start pattern over it, which must not hold this (async) route or the web process.
        draft = await run_in_threadpool(pool_for(settings).run, look, raw)
        spec = import_profiles.spec_from_form(form)
        if spec["columns"]:
            preview = await run_in_threadpool(profiled_uploads.preview_profile, spec, raw, budget=pool_for(settings))
    except InputError as exc:
        error = str(exc)
    return render(request, "pages/import_profiles.html", _context(session, form, draft=draft, preview=preview,
                                                                  error=error),
                  partial="partials/profile_draft.html", status_code=422 if error and draft is None else 200,
                  actor=actor)


@router.post("/import-profiles", response_class=HTMLResponse)
async def save(request: Request, session: SessionDep, settings: SettingsDep, actor: PageWriter):
    form, raw = await _form_and_file(request, settings)
    try:
        import_profiles.create_profile(session=session, data=import_profiles.spec_from_form(form), actor=actor.label)
    except (InputError, Duplicate) as exc:
        session.rollback()
        return render(request, "pages/import_profiles.html", _context(session, form, error=str(exc)),
                      partial="partials/profile_draft.html", status_code=422, actor=actor)
    return redirect("/import-profiles", request)


@router.get("/import-profiles/{name}", response_class=HTMLResponse)
def edit_page(request: Request, name: str, session: SessionDep, actor: PageActor):
    """One profile: its newest version in the editor, and every earlier version (a version is never changed;
    saving makes the next one)."""
    versions = import_profiles.profile_versions(session, name)
    return render(request, "pages/import_profiles.html",
                  _context(session, import_profiles.form_from_spec(versions[0].spec), editing=versions[0],
                           versions=versions), actor=actor)


@router.post("/import-profiles/{name}", response_class=HTMLResponse)
async def save_edit(request: Request, name: str, session: SessionDep, settings: SettingsDep, actor: PageWriter):
    """Save the edit page as the next version (audited); nothing changed keeps the newest version."""
    versions = import_profiles.profile_versions(session, name)
    form, _ = await _form_and_file(request, settings)
    try:
        import_profiles.edit_from_form(session=session, name=name, form=form, actor=actor.label)
    except (InputError, Duplicate) as exc:
        session.rollback()
        return render(request, "pages/import_profiles.html",
                      _context(session, {**form, "name": name}, error=str(exc), editing=versions[0],
                               versions=versions),
                      partial="partials/profile_draft.html", status_code=422, actor=actor)
    return redirect(f"/import-profiles/{name}", request)
