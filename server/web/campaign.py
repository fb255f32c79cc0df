"""Campaign-level pages: structure-property explorer, side-chain outcome map, status page, timelines."""

from __future__ import annotations

from typing import Optional

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..analysis.verdict import LABELS as VERDICT_LABELS
from ..deps import OptionalActor, SessionDep, SettingsDep, check_csrf
from ..errors import InputError
from ..ingest.conditions import parse_quantity
from ..plots import figure_json
from ..plots.explorer import explorer_figure
from ..services import explore, registry, status, views
from .pages import LoginRequired, PageActor, PageForbidden
from .render import redirect, render

router = APIRouter(include_in_schema=False)


@router.get("/explorer", response_class=HTMLResponse)
def explorer(request: Request, session: SessionDep, actor: PageActor, x: str = "carbons",
             y: str = "barrier_measured", group: str = "verdict", trend: str = "", t: str = ""):
    """Any numeric property against any other, coloured by a grouping, over the filtered registry."""
    error, fig, n = None, None, 0
    t_K: Optional[float] = None
    try:
        q = views.parse_view(request.query_params)
        if t.strip():
            t_K = parse_quantity(t, field="t", unit="K", example="300 K or 25 degC", temperature=True)
        points = explore.explore(session, q, x=x, y=y, group=group, t_K=t_K)
        n = len(points)
        xt, yt = explore.PROPERTIES[x].title, explore.PROPERTIES[y].title
        if t_K is not None:
            xt += f" at {t_K:.0f} K" if explore.PROPERTIES[x].temperature_dependent else ""
            yt += f" at {t_K:.0f} K" if explore.PROPERTIES[y].temperature_dependent else ""
        fig = figure_json(explorer_figure(points, x_title=xt, y_title=yt, with_trend=bool(trend)))
    except InputError as exc:
        error, q = str(exc), views.ViewQuery()
    return render(request, "pages/explorer.html",
                  {"figure": fig, "error": error, "n": n, "properties": explore.PROPERTIES,
                   "groupings": explore.GROUPINGS, "x": x, "y": y, "group": group, "trend": trend, "t": t,
                   "q": q, "filter_link": q.link(page=None)},
                  partial="partials/explorer_plot.html", actor=actor, status_code=422 if error else 200)


@router.get("/outcomes", response_class=HTMLResponse)
def outcomes(request: Request, session: SessionDep, actor: PageActor, by: str = "scaffold"):
    """Which side chains gave which outcome, per scaffold or bridge."""
    error, omap = None, None
    try:
        q = views.parse_view(request.query_params)
        omap = explore.outcome_map(session, q, by=by)
    except InputError as exc:
        error = str(exc)
    return render(request, "pages/outcomes.html",
                  {"map": omap, "error": error, "by": by, "labels": VERDICT_LABELS, "order": explore.OUTCOME_ORDER},
                  actor=actor, status_code=422 if error else 200)


@router.get("/status", response_class=HTMLResponse)
def status_page(request: Request, session: SessionDep, settings: SettingsDep, actor: OptionalActor):
    """The group status page; public when the admin (or REMANENCE_PUBLIC_STATUS) says so."""
    public = status.public_status_enabled(session, settings)
    if actor is None and not public:
        raise LoginRequired("/status")
    data = status.summary(session, see_embargoed=actor is not None and actor.can_see_embargoed)
    return render(request, "pages/status.html", {"s": data, "public": public, "labels": VERDICT_LABELS},
                  partial="partials/status_body.html", actor=actor)


@router.post("/status/public")
async def toggle_public(request: Request, session: SessionDep, actor: PageActor):
    if not actor.is_admin:
        raise PageForbidden("Only an admin may publish the status page.")
    await check_csrf(request, actor)
    form = await request.form()
    status.set_public_status(session=session, enabled=form.get("enabled") == "on", actor=actor.label)
    return redirect("/status", request)


@router.get("/compounds/{code}/timeline", response_class=HTMLResponse)
def timeline(code: str, request: Request, session: SessionDep, actor: PageActor):
    compound = registry.get_compound(session, code)
    events = status.timeline(session, compound)
    return render(request, "pages/timeline.html", {"c": compound, "events": events},
                  partial="partials/timeline.html", actor=actor)
