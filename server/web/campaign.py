"""Campaign-level pages: structure-property explorer, side-chain outcome map, status page, the
barrier calibration, and the estimate queue with its job panels."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from .. import access
from ..deps import OptionalActor, PageActor, PageAdmin, PageWriter, RowId, SessionDep, SettingsDep
from ..errors import InputError, OverLimit
from ..ingest.conditions import parse_quantity
from ..jobs import queue
from ..services import barriers, estimates, explore, registry, status, views
from ..services.errors import NotFound
from .render import fragment_or_redirect, redirect, render

router = APIRouter(include_in_schema=False)


@router.get("/explorer", response_class=HTMLResponse)
def explorer(request: Request, session: SessionDep, actor: PageActor, x: str = "carbons",
             y: str = "barrier_measured", group: str = "verdict", trend: str = "", t: str = ""):
    """Any numeric property against any other, coloured by a grouping, over the filtered registry."""
    error, fig, n, mixed_out = None, None, 0, 0
    t_K: Optional[float] = None
    try:
        q = views.parse_view(request.query_params)
        if t.strip():
            t_K = parse_quantity(t, field="t", unit="K", example="300 K or 25 degC", temperature=True)
        points = explore.explore(session, q, actor=actor, x=x, y=y, group=group, t_K=t_K)
        n = len(points)
        mixed_out = explore.mixed_left_out(session, q, actor=actor, x=x, y=y)
        fig = explore.explorer_figure_json(points, x=x, y=y, t_K=t_K, with_trend=bool(trend), group=group)
    except InputError as exc:
        error, q = str(exc), views.ViewQuery()
    return render(request, "pages/explorer.html",
                  {"figure": fig, "error": error, "n": n, "mixed_out": mixed_out, "properties": explore.PROPERTIES,
                   "groupings": explore.GROUPINGS, "x": x, "y": y, "group": group, "trend": trend, "t": t,
                   "q": q, "filter_link": q.link(page=None)},
                  partial="partials/explorer_plot.html", actor=actor, status_code=422 if error else 200)


@router.get("/outcomes", response_class=HTMLResponse)
def outcomes(request: Request, session: SessionDep, actor: PageActor, by: str = "scaffold"):
    """Which side chains gave which outcome, per scaffold or bridge."""
    error, omap = None, None
    try:
        q = views.parse_view(request.query_params)
        omap = explore.outcome_map(session, q, actor=actor, by=by)
    except InputError as exc:
        error = str(exc)
    return render(request, "pages/outcomes.html",
                  {"map": omap, "error": error, "by": by},
                  actor=actor, status_code=422 if error else 200)


@router.get("/status", response_class=HTMLResponse)
def status_page(request: Request, session: SessionDep, settings: SettingsDep, actor: OptionalActor,
                view: str = ""):
    """The group status page; public when the admin (or REMANENCE_PUBLIC_STATUS) says so.

    A visitor without a login who follows the address before it is public is told that the page is
    private (403), not shown a bare login form. ``?view=visitor`` shows an admin exactly what a visitor
    would see (the preview of the publish panel)."""
    public = status.public_status_enabled(session, settings)
    if actor is None and not public:
        return render(request, "pages/status_private.html", {}, actor=None, status_code=403)
    preview = view == "visitor" and access.allows(actor, access.ADMIN)
    data = status.summary(session, actor=None if preview else actor)
    return render(request, "pages/status.html",
                  {"s": data, "public": public, "preview": preview, "error": None,
                   "public_url": str(request.url_for("status_page"))},
                  partial="partials/status_body.html", actor=None if preview else actor)


@router.post("/status/public")
async def toggle_public(request: Request, session: SessionDep, settings: SettingsDep, actor: PageAdmin):
    """Publish or withdraw the status page; publishing needs the confirmation box ticked."""
    form = await request.form()
    enabled = form.get("enabled") == "on"
    if enabled and form.get("confirm") != "on" and not status.public_status_enabled(session, settings):
        return render(request, "pages/status.html",
                      {"s": status.summary(session, actor=actor), "public": False, "preview": False,
                       "public_url": str(request.url_for("status_page")),
                       "error": "Tick the confirmation (you have looked at the visitor's preview) to publish."},
                      actor=actor, status_code=422)
    status.set_public_status(session=session, enabled=enabled, actor=actor.label)
    return redirect("/status", request)


@router.get("/calibration", response_class=HTMLResponse)
def calibration_page(request: Request, session: SessionDep, actor: PageActor):
    """Measured against computed barriers across compounds, with the fit and its prediction band."""
    return render(request, "pages/calibration.html", barriers.calibration_view(session, actor=actor), actor=actor)


# --- computed estimates and the queue ----------------------------------------------------------


def _job_context(session, job, actor) -> dict:  # noqa: ANN001
    """A job's panel as ``actor`` may see it (``access.job_as_seen``: nothing computed from an
    embargoed structure for a caller who may not see it)."""
    return {"job": access.job_as_seen(queue.job_read(job, session=session), access.withheld_codes(session, actor))}


@router.get("/jobs/{job_id}/panel", response_class=HTMLResponse)
def job_panel(job_id: RowId, request: Request, session: SessionDep, actor: PageActor):
    """The job's status; while queued or running it polls itself, so the bar advances without a reload."""
    return render(request, "partials/job.html", _job_context(session, queue.get_job(session, job_id), actor), actor=actor)


@router.post("/jobs/{job_id}/cancel", response_class=HTMLResponse)
async def cancel_job(job_id: RowId, request: Request, session: SessionDep, actor: PageWriter):
    try:
        job = queue.cancel(session, job_id, actor=actor.label,
                           allowed=lambda created_by: access.may_cancel_job(actor, created_by))
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    return fragment_or_redirect(request, "partials/job.html", _job_context(session, job, actor), "/queue", actor=actor)


@router.get("/queue", response_class=HTMLResponse)
def queue_page(request: Request, session: SessionDep, actor: PageActor):
    return render(request, "pages/queue.html",
                  {"summary": estimates.queue_summary(session, actor), "scaffolds": registry.list_scaffolds(session),
                   "error": None},
                  partial="partials/queue_body.html", actor=actor)


@router.post("/queue", response_class=HTMLResponse)
async def queue_many(request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    codes = [c.strip() for c in str(form.get("codes", "")).replace(",", " ").split() if c.strip()]
    scaffold = str(form.get("scaffold", "")).strip()
    try:
        if codes:
            estimates.check_bulk(len(codes))
            compounds = [registry.get_compound(session, c) for c in codes]
        elif scaffold:
            compounds = estimates.live_compounds_of_scaffold(session, scaffold)
        else:
            raise InputError("choose a scaffold or list compound codes", field="codes")
        estimates.queue_estimates(session=session, compounds=compounds,
                                  truncate_side_chains=form.get("full_chains") != "on", actor=actor.label)
    except (InputError, NotFound, OverLimit) as exc:
        return render(request, "pages/queue.html",
                      {"summary": estimates.queue_summary(session, actor), "scaffolds": registry.list_scaffolds(session),
                       "error": str(exc)}, status_code=exc.status if isinstance(exc, OverLimit) else 422, actor=actor)
    return redirect("/queue", request)
