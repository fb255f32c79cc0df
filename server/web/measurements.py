"""Measurement pages: the upload form of a batch and the page of one measurement."""

from __future__ import annotations

from typing import Annotated, Optional

from fastapi import APIRouter, File, Form, Request, UploadFile
from fastapi.responses import HTMLResponse
from ..budget import pool_for
from ..deps import PageActor, PageWriter, RowId, SessionDep, SettingsDep
from .. import merit
from ..errors import InputError
from ..ingest.conditions import CONDITION_EXAMPLES
from ..kinds import KINDS, needed_by
from ..models import SAMPLE_FORMS, Batch, Compound, SampleCreate
from ..services import accounts, attachments, comments, corrections, import_profiles, measurements, planning_pages, profiled_uploads, registry, samples
from ..services.errors import Archived, Duplicate, Forbidden
from .render import redirect, render

router = APIRouter(include_in_schema=False)

FIELDS = measurements.FORM_FIELDS
NEW_SAMPLE = "new"  # the sample choice that describes a new sample inline


def _inline_sample(session, batch, new: dict[str, str], actor):  # noqa: ANN001, ANN202
    """The sample described on the upload form, added to the session for the upload's one commit."""
    data = SampleCreate(**{k: (v.strip() or None) for k, v in new.items() if k != "form"}, form=new["form"].strip())
    return samples.add_sample(session=session, batch=batch, data=data, actor=actor.label)


def _upload_context(session, batch: Batch, compound: Compound, form: dict, error: Optional[str] = None,
                    preview: Optional[dict] = None) -> dict:
    return {"batch": batch, "c": compound, "kinds": KINDS, "needed_by": needed_by(), "examples": CONDITION_EXAMPLES,
            "form": form, "error": error, "samples": samples.samples_of_batch(session, batch),
            "sample_forms": SAMPLE_FORMS, "new_sample": NEW_SAMPLE, "preview": preview,
            "profiles": import_profiles.list_profiles(session)}


@router.get("/batches/{code}/upload", response_class=HTMLResponse)
def upload_form(code: str, request: Request, session: SessionDep, actor: PageWriter, kind: str = "pe_loop",
                sample: str = ""):
    batch = registry.get_batch(session, code)
    compound = registry.compound_of(session, batch)
    return render(request, "pages/upload.html",
                  _upload_context(session, batch, compound, {"kind": kind, "sample": sample}), actor=actor)


@router.post("/batches/{code}/upload", response_class=HTMLResponse)
def upload(
    code: str,
    request: Request,
    session: SessionDep,
    settings: SettingsDep,
    actor: PageWriter,
    file: Annotated[UploadFile, File()],
    kind: Annotated[str, Form()] = "",
    area: Annotated[str, Form()] = "",
    thickness: Annotated[str, Form()] = "",
    mass: Annotated[str, Form()] = "",
    rate: Annotated[str, Form()] = "",
    temperature: Annotated[str, Form()] = "",
    frequency: Annotated[str, Form()] = "",
    instrument: Annotated[str, Form()] = "",
    operator: Annotated[str, Form()] = "",
    notes: Annotated[str, Form()] = "",
    endo: Annotated[str, Form()] = "",
    spectrometer: Annotated[str, Form()] = "",
    nucleus: Annotated[str, Form()] = "",
    solvent: Annotated[str, Form()] = "",
    sweep: Annotated[str, Form()] = "",
    sample: Annotated[str, Form()] = "",
    profile: Annotated[str, Form(max_length=60)] = "",
    action: Annotated[str, Form()] = "",
    new_form: Annotated[str, Form()] = "",
    new_thickness: Annotated[str, Form()] = "",
    new_electrode_area: Annotated[str, Form()] = "",
    new_electrode: Annotated[str, Form()] = "",
    new_axis: Annotated[str, Form()] = "",
):
    batch = registry.get_batch(session, code)
    compound = registry.compound_of(session, batch)
    form = {"kind": kind, "area": area, "thickness": thickness, "mass": mass, "rate": rate,
            "temperature": temperature, "frequency": frequency, "instrument": instrument, "operator": operator,
            "notes": notes, "endo": endo, "sweep": sweep, "spectrometer": spectrometer, "nucleus": nucleus,
            "solvent": solvent, "profile": profile}
    new = {"form": new_form, "thickness": new_thickness, "electrode_area": new_electrode_area,
           "electrode": new_electrode, "axis": new_axis}
    conditions = {k: (v or None) for k, v in form.items() if k not in ("kind", "profile")}
    if action == "preview":
        # The dry run: read and analysed as the upload would be, nothing stored; the form stays as filled.
        try:
            raw = measurements.read_upload(file, settings.max_upload_bytes)
            row, kind_name = profiled_uploads.resolve_profile(session, profile_name=profile, kind_name=None if profile
                                                              else kind)
            target = samples.get_sample_of_batch(session, batch, sample) if sample and sample != NEW_SAMPLE else None
            preview = profiled_uploads.dry_run(session=session, batch=batch, sample=target, kind_name=kind_name,
                                               profile_row=row, raw=raw, filename=file.filename, form=conditions,
                                               actor=actor, with_figure=True, budget=pool_for(settings))
            preview["kind"] = kind_name
            error = None
        except (InputError, Forbidden, Archived) as exc:
            preview, error = None, str(exc)
        return render(request, "pages/upload.html",
                      _upload_context(session, batch, compound, {**form, "sample": sample,
                                                                 **{f"new_{k}": v for k, v in new.items()}},
                                      preview=preview or {"error": error}),
                      partial="partials/upload_preview.html", status_code=200 if preview else 422, actor=actor)
    try:
        raw = measurements.read_upload(file, settings.max_upload_bytes)
        if profile:
            row, _ = profiled_uploads.resolve_profile(session, profile_name=profile, kind_name=None)
            # A new sample described inline is added in the upload's own transaction (flushed, not committed):
            # a refused file, or a block that cannot be read, leaves no sample and no series behind.
            target = _inline_sample(session, batch, new, actor) if sample == NEW_SAMPLE else (
                samples.get_sample_of_batch(session, batch, sample) if sample else None)
            body, _ = profiled_uploads.upload_profiled(session=session, batch=batch, sample=target, profile_row=row,
                                                       raw=raw, filename=file.filename, form=conditions, actor=actor,
                                                       budget=pool_for(settings))
            ms = body["measurements"]
            return redirect(f"/measurements/{ms[0]['id']}" if len(ms) == 1 else f"/samples/{ms[0]['sample']}",
                            request)
        if sample == NEW_SAMPLE:
            # Described inline: added in the upload's own transaction, so a refused file leaves no sample.
            target = _inline_sample(session, batch, new, actor)
        else:
            target = samples.get_sample_of_batch(session, batch, sample) if sample else None
        m, _ = measurements.upload_measurement(
            session=session, batch=batch, sample=target, kind_name=kind, raw=raw, filename=file.filename,
            form=conditions, actor=actor.label, budget=pool_for(settings),
        )
    except (InputError, Forbidden, Duplicate, Archived) as exc:
        session.rollback()
        return render(request, "pages/upload.html",
                      _upload_context(session, batch, compound,
                                      {**form, "sample": sample, **{f"new_{k}": v for k, v in new.items()}}, str(exc)),
                      partial="partials/upload_form.html", status_code=409 if isinstance(exc, Archived) else 422, actor=actor)
    return redirect(f"/measurements/{m.id}", request)


# The conditions the correction form offers: (form field, label, stored key, unit shown).
REVISE_FIELDS = (("area", "Electrode area", "area_cm2", "cm^2"), ("thickness", "Thickness", "thickness_um", "um"),
                 ("temperature", "Temperature", "temperature_K", "K"), ("frequency", "Frequency", "frequency_Hz", "Hz"),
                 ("mass", "Mass", "mass_mg", "mg"), ("rate", "Rate", "rate_K_min", "K/min"))


#: Empty rows the peak-list form offers for new signals (a row left empty is no signal).
BLANK_SIGNAL_ROWS = 3


def _peak_list(session, m, info: dict, actor, seen: bool, rows: Optional[list[dict]] = None) -> Optional[dict]:
    """What the page shows of a kind's hand-edited results: the edit and its history, and the form's rows
    (those posted back after an error, else the signals as they stand, then empty ones)."""
    kind = KINDS.get(m.kind)
    if kind is None or kind.correct is None or not seen:
        return None
    standing = corrections.effective_results(info["results"], info["correction"]).get("signals") or []
    if rows is None:
        rows = [{k: ("" if s.get(k) is None else ", ".join(f"{j:g}" for j in s[k]) if k == "j_Hz" else s[k])
                 for k in ("from_ppm", "to_ppm", "shift_ppm", "n_H", "multiplicity", "j_Hz", "label", "assigned")}
                for s in standing]
        rows += [{"multiplicity": "m"} for _ in range(BLANK_SIGNAL_ROWS)]
    edit = info["correction"] if (info["correction"] or {}).get("results") else None
    return {"edit": edit, "by": accounts.shown_name(edit["by"], actor) if edit else "", "signals": standing,
            "history": corrections.history(session, m, viewer=actor), "rows": rows,
            "multiplicities": ("s", "d", "t", "q", "quint", "sext", "sept", "dd", "m"),
            "not_sample": ("", "solvent residual", "water", "TMS", "impurity")}


def _measurement_page(request: Request, session, m, actor, *, revise_error: Optional[str] = None, status_code=200,
                      signals_error: Optional[str] = None, signal_rows: Optional[list[dict]] = None):
    info = measurements.measurement_as_seen(session, m, actor)
    kind = KINDS.get(m.kind)
    seen = measurements.may_download_raw(session, m, actor)
    apparent = samples.apparent_reason(session, m) if seen else None
    if not seen:
        # A receipt (embargoed compound, caller who may not see it): no figure either, it draws the results.
        fig, fig_error = None, measurements.RECEIPT_WITHHELD
    else:
        try:
            fig = measurements.measurement_figure(session, m)
            fig_error = None
        except InputError as exc:
            fig, fig_error = None, str(exc)
    return render(request, "pages/measurement.html",
                  {"m": info, "kind": kind, "figure": fig, "apparent_reason": apparent,
                   "compact": kind.compact(info["results"]) if kind is not None and kind.compact else (),
                   "apparent_keys": sorted(merit.apparent_keys(info, apparent)), "figure_error": fig_error, "revise_error": revise_error,
                   "revise_fields": REVISE_FIELDS, "examples": CONDITION_EXAMPLES,
                   "peak_list": _peak_list(session, m, info, actor, seen, signal_rows), "signals_error": signals_error,
                   "thread": comments.thread_panel(session, comments.resolve(session, "measurement", str(m.id)), actor=actor),
                   "gallery": attachments.gallery_panel(session, comments.resolve(session, "measurement", str(m.id)),
                                                        actor=actor),
                   "heating": planning_pages.measurement_heating(session, m, actor=actor)}, actor=actor,
                  status_code=status_code)


@router.get("/measurements/{measurement_id}", response_class=HTMLResponse)
def measurement_page(measurement_id: RowId, request: Request, session: SessionDep, actor: PageActor):
    return _measurement_page(request, session, measurements.get_measurement(session, measurement_id), actor)


@router.post("/measurements/{measurement_id}/revise", response_class=HTMLResponse)
def revise(
    measurement_id: RowId,
    request: Request,
    session: SessionDep,
    settings: SettingsDep,
    actor: PageWriter,
    file: Annotated[Optional[UploadFile], File()] = None,
    area: Annotated[str, Form()] = "",
    thickness: Annotated[str, Form()] = "",
    temperature: Annotated[str, Form()] = "",
    frequency: Annotated[str, Form()] = "",
    mass: Annotated[str, Form()] = "",
    rate: Annotated[str, Form()] = "",
):
    m = measurements.get_measurement(session, measurement_id)
    form = {"area": area, "thickness": thickness, "temperature": temperature, "frequency": frequency, "mass": mass,
            "rate": rate}
    try:
        upload = file if file is not None and file.filename else None
        raw = measurements.read_upload(upload, settings.max_upload_bytes) if upload is not None else None
        new = measurements.revise_measurement(session=session, measurement=m, actor=actor.label, raw=raw,
                                              filename=upload.filename if upload is not None else None,
                                              form={k: (v or None) for k, v in form.items()},
                                              budget=pool_for(settings))
    except (InputError, Duplicate) as exc:
        session.rollback()
        return _measurement_page(request, session, m, actor, revise_error=str(exc),
                                 status_code=409 if isinstance(exc, Duplicate) else 422)
    return redirect(f"/measurements/{new.id}", request)


@router.post("/measurements/{measurement_id}/signals", response_class=HTMLResponse)
def edit_signals(
    measurement_id: RowId,
    request: Request,
    session: SessionDep,
    actor: PageWriter,
    reason: Annotated[str, Form()] = "",
    from_ppm: Annotated[list[str], Form()] = [],  # noqa: B006 - FastAPI copies defaults
    to_ppm: Annotated[list[str], Form()] = [],  # noqa: B006
    shift_ppm: Annotated[list[str], Form()] = [],  # noqa: B006
    n_H: Annotated[list[str], Form()] = [],  # noqa: B006, N803 - the result key
    multiplicity: Annotated[list[str], Form()] = [],  # noqa: B006
    j_Hz: Annotated[list[str], Form()] = [],  # noqa: B006, N803 - the result key
    label: Annotated[list[str], Form()] = [],  # noqa: B006
    assigned: Annotated[list[str], Form()] = [],  # noqa: B006
):
    """The peak-list form: one row per signal (a row with no region is left out), and why."""
    m = measurements.get_measurement(session, measurement_id)
    columns = {"from_ppm": from_ppm, "to_ppm": to_ppm, "shift_ppm": shift_ppm, "n_H": n_H,
               "multiplicity": multiplicity, "j_Hz": j_Hz, "label": label, "assigned": assigned}
    width = max((len(v) for v in columns.values()), default=0)
    rows = [{k: (v[i] if i < len(v) else "") for k, v in columns.items()} for i in range(width)]
    edit = [r for r in rows if (r["from_ppm"] or "").strip() or (r["to_ppm"] or "").strip()]
    return _peak_list_post(request, session, m, actor, rows,
                           lambda: corrections.correct(session=session, measurement=m, edit=edit, reason=reason,
                                                       actor=actor.label))


def _peak_list_post(request: Request, session, m, actor, rows: Optional[list[dict]], store):
    """Run ``store`` (an edit or a revert): to the new measurement's peak list, or the page with the error."""
    try:
        new = store()
    except (InputError, Duplicate) as exc:
        session.rollback()
        return _measurement_page(request, session, m, actor, signals_error=str(exc), signal_rows=rows,
                                 status_code=409 if isinstance(exc, Duplicate) else 422)
    return redirect(f"/measurements/{new.id}#peak-list", request)


@router.post("/measurements/{measurement_id}/signals/revert", response_class=HTMLResponse)
def revert_signals(measurement_id: RowId, request: Request, session: SessionDep, actor: PageWriter,
                   reason: Annotated[str, Form()] = ""):
    m = measurements.get_measurement(session, measurement_id)
    return _peak_list_post(request, session, m, actor, None,
                           lambda: corrections.revert(session=session, measurement=m, reason=reason, actor=actor.label))


@router.post("/measurements/{measurement_id}/archive", response_class=HTMLResponse)
def archive(measurement_id: RowId, request: Request, session: SessionDep, actor: PageWriter,
            archived: Annotated[str, Form()] = "true"):
    m = measurements.get_measurement(session, measurement_id)
    measurements.set_archived(session=session, measurement=m, archived=archived != "false", actor=actor.label)
    return redirect(f"/measurements/{m.id}", request)
