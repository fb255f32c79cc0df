"""The import-profile pages: the list, and the editor that writes a profile from a sample file."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from starlette.concurrency import run_in_threadpool

from ..budget import pool_for
from ..deps import PageActor, PageWriter, SessionDep, SettingsDep
from ..errors import InputError
from ..ingest.columns import QUANTITIES
from ..ingest.conditions import CONDITION_FIELDS, TEXT_FIELDS
from ..ingest.profiles import sketch
from ..kinds import KINDS
from ..services import import_profiles, measurements, profiled_uploads
from ..services.errors import Duplicate
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def _context(session, form: dict, *, draft=None, preview=None, error=None) -> dict:  # noqa: ANN001
    return {"profiles": import_profiles.list_profiles(session), "form": form, "draft": draft, "preview": preview,
            "error": error, "kinds": {k: v for k, v in KINDS.items() if v.table}, "quantities": QUANTITIES,
            "condition_fields": CONDITION_FIELDS + TEXT_FIELDS}


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
    and (with a mapping) the preview of what the profile reads. Nothing is stored."""
    form, raw = await _form_and_file(request, settings)
    draft = preview = error = None
    try:
        if not raw:
            raise InputError("choose a sample file of the instrument", field="file")
        draft = sketch(raw, encoding=form.get("encoding") or "auto", delimiter=form.get("delimiter") or ",",
                       skip_lines=int(form.get("skip_lines") or 0) if (form.get("skip_lines") or "0").isdigit() else 0,
                       start_after=form.get("start_after") or None, units_row=form.get("units_row") == "on")
        spec = import_profiles.spec_from_form(form)
        if spec["columns"]:
            # In a thread: this route is async, and the budgeted analysis waits for its child process.
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
