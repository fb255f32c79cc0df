"""Samples: the physical specimens of a batch, and what was done to each of them.

A sample is pressed, cast, cut or grown from one batch and carries the geometry that uploads
default from (electrode area, thickness). Its history is computed from its live measurements,
in the order they were taken: the highest field and temperature seen so far, whether the
sample was poled, and flags on loops taken after it went above its transition or beyond the
highest field it had seen.
"""

from __future__ import annotations

from typing import Any, Optional

from sqlalchemy import func
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, select

from .. import merit
from ..errors import InputError
from ..ingest.conditions import parse_quantity
from ..models import (SAMPLE_FORMS, Batch, Compound, Measurement, Sample, SampleCreate, live_measurement)
from . import audit
from .errors import NotFound

#: Kinds that apply a switching field to the sample, and the result key of the largest field.
FIELD_KEYS: dict[str, str] = {"pe_loop": "emax_kV_cm", "pund": "e_pulse_kV_cm"}
#: Relative margin before a field counts as beyond the previous highest (drive settings repeat
#: to about 1 %; our own margin).
FIELD_MARGIN = 0.02


def sample_code(batch: Batch, seq: int) -> str:
    return f"{batch.code}-S{seq:02d}"


def _quantity(text: Optional[str], *, field: str, unit: str, example: str, temperature: bool = False) -> Optional[float]:
    if text is None or not str(text).strip():
        return None
    return parse_quantity(str(text), field=field, unit=unit, example=example, temperature=temperature)


def _sample_values(data: SampleCreate) -> dict[str, Any]:
    """Validate everything before anything is stored (InputError naming the field)."""
    if data.form not in SAMPLE_FORMS:
        raise InputError(f"form must be one of {', '.join(SAMPLE_FORMS)}", field="form")
    prep = data.preparation
    values: dict[str, Any] = {
        "form": data.form,
        "thickness_um": _quantity(data.thickness, field="thickness", unit="um", example="150 um"),
        "electrode_area_mm2": _quantity(data.electrode_area, field="electrode_area", unit="mm^2",
                                        example="0.785 mm^2"),
        "electrode": (data.electrode or "").strip(),
        "axis": (data.axis or "").strip(),
        "notes": data.notes or "",
    }
    if prep is not None:
        values.update(
            pressing_load_kN=_quantity(prep.pressing_load, field="preparation.pressing_load", unit="kN",
                                       example="5 kN"),
            anneal_K=_quantity(prep.anneal_temperature, field="preparation.anneal_temperature", unit="K",
                               example="350 K", temperature=True),
            anneal_min=_quantity(prep.anneal_time, field="preparation.anneal_time", unit="min", example="2 h"),
            deposition=(prep.deposition or "").strip(),
            cell_gap_um=_quantity(prep.cell_gap, field="preparation.cell_gap", unit="um", example="10 um"),
            preparation_notes=prep.notes or "",
        )
    if values["axis"] and data.form != "single_crystal":
        raise InputError("a crystal axis or face is given only for a single_crystal sample", field="axis")
    if values.get("cell_gap_um") is not None and data.form != "cell":
        raise InputError("a cell gap is given only for a cell sample", field="preparation.cell_gap")
    return values


def _next_seq(session: Session, batch: Batch) -> int:
    return (session.exec(select(func.max(Sample.seq)).where(Sample.batch_id == batch.id)).one() or 0) + 1


def add_sample(*, session: Session, batch: Batch, data: SampleCreate, actor: str) -> Sample:
    """Validate and add a described sample to the session (flushed, not committed), so an upload
    can be filed under it in the same transaction. InputError before anything is added."""
    values = _sample_values(data)
    seq = _next_seq(session, batch)
    sample = Sample(code=sample_code(batch, seq), batch_id=batch.id, seq=seq, created_by=actor, **values)
    session.add(sample)
    session.flush()
    audit.record(session, actor=actor, action="sample.create", entity="sample", code=sample.code,
                 compound_id=batch.compound_id, after=audit.snapshot(sample))
    return sample


def create_sample(*, session: Session, batch: Batch, data: SampleCreate, actor: str) -> Sample:
    """Record a described sample of ``batch`` (code ``<batch>-Snn``, never reused)."""
    _sample_values(data)  # refuse bad input before taking a number
    for _ in range(5):
        try:
            sample = add_sample(session=session, batch=batch, data=data, actor=actor)
        except IntegrityError:
            session.rollback()  # another sample took the number first
            continue
        session.commit()
        session.refresh(sample)
        return sample
    raise RuntimeError("could not allocate a sample number after 5 attempts")


def default_sample(session: Session, batch: Batch) -> Optional[Sample]:
    """The batch's default sample, if a file was ever posted to the batch itself."""
    return session.exec(select(Sample).where(Sample.batch_id == batch.id, Sample.is_default == True)).first()  # noqa: E712


def ensure_default_sample(session: Session, batch: Batch, *, actor: str) -> Sample:
    """The batch's default sample, added to the session (not committed) if it is new.

    Call it before anything else is added: losing a race to a concurrent first upload rolls
    the session back and returns the sample the other request stored.
    """
    found = default_sample(session, batch)
    if found is not None:
        return found
    seq = _next_seq(session, batch)
    sample = Sample(code=sample_code(batch, seq), batch_id=batch.id, seq=seq, is_default=True, created_by=actor,
                    notes="default sample: files posted to the batch without a described specimen")
    session.add(sample)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        found = default_sample(session, batch)
        if found is None:
            raise
        return found
    audit.record(session, actor=actor, action="sample.create", entity="sample", code=sample.code,
                 compound_id=batch.compound_id, after=audit.snapshot(sample))
    return sample


def sample_defaults(sample: Optional[Sample]) -> dict[str, Optional[float]]:
    """The conditions an upload to ``sample`` takes when it gives none (canonical units)."""
    if sample is None:
        return {}
    area = sample.electrode_area_mm2 / 100.0 if sample.electrode_area_mm2 is not None else None
    return {"area_cm2": area, "thickness_um": sample.thickness_um}


def get_sample(session: Session, code: str) -> Sample:
    sample = session.exec(select(Sample).where(Sample.code == code)).first()
    if sample is None:
        raise NotFound(f"no sample {code}")
    return sample


def get_sample_of_batch(session: Session, batch: Batch, code: str) -> Sample:
    """A sample chosen on the upload form of ``batch``: it must be one of that batch's."""
    sample = session.exec(select(Sample).where(Sample.code == code, Sample.batch_id == batch.id)).first()
    if sample is None:
        raise InputError(f"{code!r} is not a sample of batch {batch.code}", field="sample")
    return sample


def batch_of(session: Session, sample: Sample) -> Batch:
    return session.get(Batch, sample.batch_id)


def samples_of_batch(session: Session, batch: Batch) -> list[Sample]:
    return list(session.exec(select(Sample).where(Sample.batch_id == batch.id).order_by(Sample.seq)).all())


def samples_of_compound(session: Session, compound: Compound) -> list[tuple[Sample, Batch]]:
    rows = session.exec(select(Sample, Batch).join(Batch, Batch.id == Sample.batch_id)
                        .where(Batch.compound_id == compound.id).order_by(Batch.seq, Sample.seq)).all()
    return [(s, b) for s, b in rows]


def with_counts(session: Session, rows: list[Sample]) -> list[tuple[Sample, int]]:
    """Each sample with the number of its live measurements."""
    if not rows:
        return []
    counts = dict(session.exec(select(Measurement.sample_id, func.count()).where(
        Measurement.sample_id.in_([s.id for s in rows]), live_measurement()).group_by(Measurement.sample_id)).all())
    return [(s, counts.get(s.id, 0)) for s in rows]


def live_measurements(session: Session, sample: Sample) -> list[Measurement]:
    """The sample's live measurements in the order they were taken (a correction keeps the
    place of the measurement it corrects)."""
    rows = list(session.exec(select(Measurement).where(Measurement.sample_id == sample.id, live_measurement())).all())
    return sorted(rows, key=lambda m: (_taken_at(session, m), m.id))


def apparent_reason(session: Session, m: Measurement) -> Optional[str]:
    """Why this measurement's loop numbers are only apparent (``server/merit.py``, read against the
    live measurements of its sample), or None when they are figures of merit or it is no loop."""
    if m.kind not in merit.MERIT_KEYS:
        return None
    return merit.apparent_reason(m, live_measurements(session, session.get(Sample, m.sample_id)))


def _taken_at(session: Session, m: Measurement):
    first = m
    seen = 0
    while first.supersedes_id is not None and seen < 1000:
        first = session.get(Measurement, first.supersedes_id)
        seen += 1
    return first.created_at


def sample_read(session: Session, sample: Sample, *, history: bool = True) -> dict[str, Any]:
    batch = session.get(Batch, sample.batch_id)
    out: dict[str, Any] = {
        "code": sample.code,
        "batch": batch.code,
        "form": sample.form or None,
        "default": sample.is_default,
        "thickness_um": sample.thickness_um,
        "electrode_area_mm2": sample.electrode_area_mm2,
        "electrode": sample.electrode,
        "axis": sample.axis,
        "preparation": {"pressing_load_kN": sample.pressing_load_kN, "anneal_K": sample.anneal_K,
                        "anneal_min": sample.anneal_min, "deposition": sample.deposition,
                        "cell_gap_um": sample.cell_gap_um, "notes": sample.preparation_notes},
        "notes": sample.notes,
        "archived": sample.archived,
        "created_at": sample.created_at.isoformat(),
        "created_by": sample.created_by,
    }
    if history:
        from . import series  # the transition temperature comes from the sample's Pr(T) series

        out.update(sample_history(session, sample, transition_K=series.transition_K(session, sample)))
    return out


def _field_of(m: Measurement) -> Optional[float]:
    key = FIELD_KEYS.get(m.kind)
    value = (m.results or {}).get(key) if key else None
    return abs(float(value)) if isinstance(value, (int, float)) else None


def sample_history(session: Session, sample: Sample, *, transition_K: Optional[dict[str, Any]]) -> dict[str, Any]:
    """What was done to the sample, in order, with the state it was in before each measurement.

    A loop (a kind in FIELD_KEYS) applied a field; it poled the sample when its field exceeded its
    own coercive field. Going above the transition temperature (``transition_K["tc_K"]``, from
    the sample's Pr(T) series or the compound estimate) depoles it: a ferroelectric loses its
    remanent polarization above Tc (Lines and Glass 1977, ch. 1). Flags on a loop:
    ``after_transition`` (the sample was above Tc earlier), ``beyond_previous_field`` (its field
    exceeds the highest the sample had seen by more than FIELD_MARGIN).
    """
    tc = transition_K.get("tc_K") if transition_K else None
    entries = []
    max_field: Optional[float] = None
    max_t: Optional[float] = None
    poled = False
    went_above = False
    for m in live_measurements(session, sample):
        field = _field_of(m)
        t = m.temperature_K
        flags = []
        if m.kind in FIELD_KEYS:
            if went_above:
                flags.append({"code": "after_transition", "message": (
                    f"the sample was above its transition ({tc:.4g} K) before this loop: its domain state was "
                    "reset, so compare it with loops taken before only with care")})
            if field is not None and max_field is not None and field > max_field * (1 + FIELD_MARGIN):
                flags.append({"code": "beyond_previous_field", "message": (
                    f"this loop drives {field:.3g} kV/cm, beyond the {max_field:.3g} kV/cm the sample had seen: "
                    "new domains may switch and the sample may not return to its earlier state")})
        entries.append({
            "measurement": m.id, "kind": m.kind, "temperature_K": t, "field_kV_cm": field,
            "taken_at": _taken_at(session, m).isoformat(), "poled_before": poled,
            "highest_field_before_kV_cm": max_field, "highest_temperature_before_K": max_t, "flags": flags,
        })
        if field is not None:
            max_field = field if max_field is None else max(max_field, field)
            ec = (m.results or {}).get("ec_kV_cm")
            if m.verdict == "switching" and (not isinstance(ec, (int, float)) or field > abs(ec)):
                poled = True
        if t is not None:
            max_t = t if max_t is None else max(max_t, t)
            if tc is not None and t > tc:
                went_above, poled = True, False
    return {"history": entries, "highest_field_kV_cm": max_field, "highest_temperature_K": max_t,
            "transition": transition_K, "poled": poled}


def sample_page(session: Session, sample: Sample) -> dict[str, Any]:
    """Everything the sample page shows: the sample and its history, its series with their fits,
    and the Pr/Ec figure with one line per temperature series."""
    from ..plots import figure_json, summary
    from . import series as series_service
    from .measurements import measurement_read

    batch = batch_of(session, sample)
    ms = {m.id: measurement_read(session, m) for m in live_measurements(session, sample)}
    found = series_service.sample_series(session, sample)
    lines = [(f"{s['direction'] or 'series'} #{n + 1}", [ms[i] for i in s["measurements"] if i in ms])
             for n, s in enumerate(found) if s["kind"] == "pe_loop" and s["variable"] == "temperature"]
    in_series = {i for s in found if s["kind"] == "pe_loop" and s["variable"] == "temperature" for i in s["measurements"]}
    fig = summary.switching_by_series(lines, [m for i, m in ms.items() if m["kind"] == "pe_loop" and i not in in_series])
    return {"s": sample_read(session, sample), "batch": batch,
            "compound": session.get(Compound, batch.compound_id), "measurements": ms, "series": found,
            "series_figure": figure_json(fig) if fig else None}
