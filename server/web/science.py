"""Compound-page science: barriers (entry, rates at a chosen T and f) and verdict overrides."""

from __future__ import annotations

from typing import Optional
from urllib.parse import quote

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import RowId, SessionDep
from ..errors import InputError
from ..ingest.conditions import parse_quantity
from sqlmodel import select

from ..analysis.calibration import calibrate
from ..deps import is_htmx
from ..jobs import queue
from ..models import Compound
from ..plots import figure_json
from ..plots.kinetics import calibration_figure
from ..services import barriers, estimates, registry, verdicts
from ..services.errors import NotFound
from .pages import PageActor, PageForbidden, PageWriter, _scaffolds
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def barrier_rows(session, compound, *, t_K: float, frequency_Hz: Optional[float]) -> list[dict]:  # noqa: ANN001
    """Each barrier with its inversion rate at t_K (and whether it keeps up with frequency_Hz)."""
    rows = []
    for b in barriers.list_barriers(session, compound):
        row = barriers.barrier_read(session, b)
        row["rate"] = barriers.rates(b, t_K=t_K, frequency_Hz=frequency_Hz) if b.dg_kcal_mol is not None else None
        rows.append(row)
    return rows


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
                  {"c": compound, "barriers": barrier_rows(session, compound, t_K=t_K, frequency_Hz=f_Hz),
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
async def override(code: str, request: Request, session: SessionDep, actor: PageWriter):
    if not actor.is_admin:
        raise PageForbidden("Only an admin may override a verdict.")
    compound = registry.get_compound(session, code)
    form = await request.form()
    new = str(form.get("code", "")) or None
    try:
        verdicts.set_override(session=session, compound=compound, code=new, reason=str(form.get("reason", "")),
                              actor=actor.label)
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    return redirect(f"/compounds/{quote(code)}#verdict", request)


# --- computed estimates and the queue ----------------------------------------------------------


def _job_context(session, job) -> dict:  # noqa: ANN001
    return {"job": queue.job_read(job, session=session)}


@router.post("/compounds/{code}/estimate", response_class=HTMLResponse)
async def queue_estimate(code: str, request: Request, session: SessionDep, actor: PageWriter):
    compound = registry.get_compound(session, code)
    form = await request.form()
    try:
        job = estimates.queue_estimate(session=session, compound=compound,
                                       truncate_side_chains=form.get("full_chains") != "on", actor=actor.label)
    except InputError as exc:
        return render(request, "partials/job.html", {"job": None, "error": str(exc)}, status_code=422, actor=actor)
    if is_htmx(request):
        return render(request, "partials/job.html", _job_context(session, job), actor=actor)
    return redirect(f"/compounds/{quote(code)}#estimates", request)


@router.get("/jobs/{job_id}/panel", response_class=HTMLResponse)
def job_panel(job_id: RowId, request: Request, session: SessionDep, actor: PageActor):
    """The job's status; while queued or running it polls itself, so the bar advances without a reload."""
    return render(request, "partials/job.html", _job_context(session, queue.get_job(session, job_id)), actor=actor)


@router.post("/jobs/{job_id}/cancel", response_class=HTMLResponse)
async def cancel_job(job_id: RowId, request: Request, session: SessionDep, actor: PageWriter):
    try:
        job = queue.cancel(session, job_id, actor=actor.label)
    except InputError as exc:
        return render(request, "pages/error.html", {"status": 422, "detail": str(exc)}, status_code=422, actor=actor)
    if is_htmx(request):
        return render(request, "partials/job.html", _job_context(session, job), actor=actor)
    return redirect("/queue", request)


@router.get("/queue", response_class=HTMLResponse)
def queue_page(request: Request, session: SessionDep, actor: PageActor):
    return render(request, "pages/queue.html",
                  {"summary": estimates.queue_summary(session), "scaffolds": _scaffolds(session), "error": None},
                  partial="partials/queue_body.html", actor=actor)


@router.post("/queue", response_class=HTMLResponse)
async def queue_many(request: Request, session: SessionDep, actor: PageWriter):
    form = await request.form()
    codes = [c.strip() for c in str(form.get("codes", "")).replace(",", " ").split() if c.strip()]
    scaffold = str(form.get("scaffold", "")).strip()
    try:
        if codes:
            compounds = [registry.get_compound(session, c) for c in codes]
        elif scaffold:
            sc = registry.get_scaffold(session, scaffold)
            compounds = list(session.exec(select(Compound).where(Compound.scaffold_id == sc.id,
                                                                 Compound.archived == False)  # noqa: E712
                                          .order_by(Compound.number)).all())
        else:
            raise InputError("choose a scaffold or list compound codes", field="codes")
        estimates.queue_estimates(session=session, compounds=compounds,
                                  truncate_side_chains=form.get("full_chains") != "on", actor=actor.label)
    except (InputError, NotFound) as exc:
        return render(request, "pages/queue.html",
                      {"summary": estimates.queue_summary(session), "scaffolds": _scaffolds(session),
                       "error": str(exc)}, status_code=422, actor=actor)
    return redirect("/queue", request)


@router.get("/calibration", response_class=HTMLResponse)
def calibration_page(request: Request, session: SessionDep, actor: PageActor):
    """Measured against computed barriers across compounds, with the fit and its prediction band."""
    pairs = barriers.calibration_pairs(session)
    cal = calibrate([p["measured"] for p in pairs], [p["computed"] for p in pairs], labels=[p["code"] for p in pairs])
    fig = figure_json(calibration_figure(cal, [p["code"] for p in pairs])) if pairs else None
    predictions = barriers.calibrated_estimates(session, cal)
    return render(request, "pages/calibration.html",
                  {"cal": cal, "pairs": pairs, "figure": fig, "predictions": predictions}, actor=actor)
