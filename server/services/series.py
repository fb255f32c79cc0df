"""Measurement series of one sample: found automatically, or stated, and fitted.

Measurements of one sample and kind that differ in one swept variable (temperature,
frequency or field amplitude) while the others stay put form a series; a temperature run
holds the frequency only, since the drive amplitude is often lowered as Ec falls. A temperature
series runs on heating or on cooling: the direction is the stated ``sweep`` condition of its
measurements where one is given, else the order of upload (a run turns where the temperature
turns). Stated series (``state_series``, e.g. from an import profile that read several blocks
of one file) are kept as rows and shown beside the automatic ones. Fits are in
:mod:`server.analysis.series`.
"""

from __future__ import annotations

from typing import Any, Iterable, Optional, Sequence

from sqlmodel import Session, select

from .. import merit
from ..analysis import series as fits
from ..errors import InputError
from ..models import SERIES_VARIABLES, Batch, Compound, Measurement, MeasurementSeries, Sample, is_live
from ..ingest.conditions import SWEEP_DIRECTIONS
from . import audit
from .samples import FIELD_KEYS, live_measurements, samples_of_compound

MIN_POINTS = 3  # fewer measurements are not a series
#: Values within these of each other count as the same setting (our own tolerances: a
#: controller holds a temperature to well under 1 K; drive settings repeat to about 1 %).
SAME_T_K = 1.0
SAME_REL = 0.05
#: Kinds whose series are fitted (the Pr and Ec keys of their results).
PR_KEYS: dict[str, str] = {"pe_loop": "pr_uC_cm2", "pund": "pr_pund_uC_cm2"}


def _value(m: Measurement, variable: str) -> Optional[float]:
    if variable == "temperature":
        return m.temperature_K
    if variable == "frequency":
        f = (m.conditions or {}).get("frequency_Hz")
        return f if f is not None else (m.results or {}).get("frequency_Hz")
    key = FIELD_KEYS.get(m.kind)
    v = (m.results or {}).get(key) if key else None
    return abs(v) if isinstance(v, (int, float)) else None


def _same(a: Optional[float], b: Optional[float], variable: str) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if variable == "temperature":
        return abs(a - b) <= SAME_T_K
    return abs(a - b) <= SAME_REL * max(abs(a), abs(b))


def _groups(ms: Sequence[Measurement], held: tuple[str, ...]) -> list[list[Measurement]]:
    """Measurements (in upload order) grouped by the settings that must stay put."""
    groups: list[tuple[list[Optional[float]], list[Measurement]]] = []
    for m in ms:
        key = [_value(m, v) for v in held]
        for gkey, members in groups:
            if all(_same(a, b, v) for a, b, v in zip(key, gkey, held)):
                members.append(m)
                break
        else:
            groups.append((key, [m]))
    return [members for _, members in groups]


def _distinct(ms: Sequence[Measurement], variable: str) -> int:
    values: list[float] = []
    for m in ms:
        v = _value(m, variable)
        if v is not None and not any(_same(v, w, variable) for w in values):
            values.append(v)
    return len(values)


def _runs(ms: Sequence[Measurement]) -> list[tuple[str, list[Measurement]]]:
    """Split a temperature group into heating and cooling runs by upload order; the turning
    point belongs to both runs."""
    pts = [m for m in ms if m.temperature_K is not None]
    runs: list[tuple[str, list[Measurement]]] = []
    current: list[Measurement] = []
    direction = ""
    for m in pts:
        if not current:
            current = [m]
            continue
        step = m.temperature_K - current[-1].temperature_K
        if abs(step) <= SAME_T_K:
            current.append(m)
            continue
        d = "heating" if step > 0 else "cooling"
        if direction and d != direction:
            runs.append((direction, current))
            current = [current[-1], m]
        else:
            current.append(m)
        direction = d
    if current and direction:
        runs.append((direction, current))
    return runs


def _temperature_series(ms: Sequence[Measurement]) -> list[dict[str, Any]]:
    out = []
    # The drive amplitude is often lowered as Ec falls on heating: a temperature run holds only the frequency.
    for group in _groups(ms, ("frequency",)):
        stated = {d: [m for m in group if (m.conditions or {}).get("sweep") == d] for d in SWEEP_DIRECTIONS}
        rest = [m for m in group if (m.conditions or {}).get("sweep") not in SWEEP_DIRECTIONS]
        candidates = [(d, members, "stated sweep") for d, members in stated.items()]
        candidates += [(d, members, "upload order") for d, members in _runs(rest)]
        for direction, members, basis in candidates:
            if _distinct(members, "temperature") >= MIN_POINTS:
                out.append({"variable": "temperature", "direction": direction, "direction_from": basis,
                            "members": members})
    return out


def _other_series(ms: Sequence[Measurement], variable: str) -> list[dict[str, Any]]:
    held = tuple(v for v in SERIES_VARIABLES if v != variable)
    out = []
    for group in _groups(ms, held):
        if _distinct(group, variable) >= MIN_POINTS:
            members = sorted(group, key=lambda m: (_value(m, variable) is None, _value(m, variable) or 0.0, m.id))
            out.append({"variable": variable, "direction": None, "direction_from": None, "members": members})
    return out


def fit_series(kind: str, variable: str, members: Sequence[Measurement],
               beside: Sequence[Measurement] = ()) -> dict[str, Any]:
    """The fits a series of this kind and variable has (empty when none applies); ``beside``: the
    sample's other measurements, whose PUND can make a loop's numbers apparent (``server/merit.py``)."""
    pr_key = PR_KEYS.get(kind)
    if pr_key is None:
        return {}
    x = [_value(m, variable) for m in members]
    ec = [(m.results or {}).get("ec_kV_cm") for m in members]
    out: dict[str, Any] = {"method": fits.METHOD, "analysis_version": fits.VERSION}
    if variable == "temperature":
        # A loop whose Pr is only apparent (server/merit.py) has no remanence to speak of: Pr = 0 there.
        pr = [((m.results or {}).get(pr_key) or 0.0) if (kind == "pund" or merit.is_figure_of_merit(m, beside))
              else 0.0 for m in members]
        out["pr_T"] = fits.fit_pr_temperature(x, pr).to_dict()
        if kind == "pe_loop":
            out["ec_T"] = fits.fit_ec_trend(x, ec, variable="temperature").to_dict()
    elif variable == "frequency" and kind == "pe_loop":
        out["ec_f"] = fits.fit_ec_trend(x, ec, variable="frequency").to_dict()
    return out


def _entry(kind: str, s: dict[str, Any], stated_id: Optional[int] = None,
           beside: Sequence[Measurement] = ()) -> dict[str, Any]:
    members = s["members"]
    return {"variable": s["variable"], "direction": s["direction"], "direction_from": s["direction_from"],
            "kind": kind, "measurements": [m.id for m in members], "stated": stated_id is not None,
            "id": stated_id, "values": [_value(m, s["variable"]) for m in members],
            "fit": fit_series(kind, s["variable"], members, beside)}


def sample_series(session: Session, sample: Sample) -> list[dict[str, Any]]:
    """Every series of the sample: stated ones first, then the automatic ones not already stated."""
    ms = live_measurements(session, sample)
    by_id = {m.id: m for m in ms}
    out: list[dict[str, Any]] = []
    stated_sets = set()
    rows = session.exec(select(MeasurementSeries).where(MeasurementSeries.sample_id == sample.id)
                        .order_by(MeasurementSeries.id)).all()
    for row in rows:
        members = [by_id[i] for i in row.measurement_ids if i in by_id]  # retired members drop out
        if not members:
            continue
        stated_sets.add((row.kind, row.variable, frozenset(m.id for m in members)))
        out.append(_entry(row.kind, {"variable": row.variable, "direction": row.direction or None,
                                     "direction_from": "stated" if row.direction else None,
                                     "members": members}, stated_id=row.id, beside=ms))
    for kind in sorted({m.kind for m in ms}):
        of_kind = [m for m in ms if m.kind == kind]
        found = _temperature_series(of_kind) + _other_series(of_kind, "frequency") + _other_series(of_kind, "field")
        for s in found:
            if (kind, s["variable"], frozenset(m.id for m in s["members"])) not in stated_sets:
                out.append(_entry(kind, s, beside=ms))
    return out


def state_series(*, session: Session, sample: Sample, variable: str, measurement_ids: Iterable[int],
                 direction: Optional[str] = None, notes: str = "", actor: str, commit: bool = True) -> MeasurementSeries:
    """Record that these measurements of ``sample`` form one series (an import profile's blocks,
    or a person's statement); ids are kept in the order given. ``commit=False``: part of the caller's
    transaction (the upload that stored the blocks commits once)."""
    ids = list(dict.fromkeys(int(i) for i in measurement_ids))
    if variable not in SERIES_VARIABLES:
        raise InputError(f"variable must be one of {', '.join(SERIES_VARIABLES)}", field="variable")
    if direction and (variable != "temperature" or direction not in SWEEP_DIRECTIONS):
        raise InputError("direction is heating or cooling, for a temperature series only", field="direction")
    if len(ids) < 2:
        raise InputError("a series needs at least two measurements", field="measurements")
    ms = session.exec(select(Measurement).where(Measurement.id.in_(ids))).all()
    found = {m.id: m for m in ms}
    for i in ids:
        m = found.get(i)
        if m is None or m.sample_id != sample.id:
            raise InputError(f"measurement {i} is not a measurement of sample {sample.code}", field="measurements")
        if not is_live(session, m):
            raise InputError(f"measurement {i} is archived or superseded; state series of live measurements",
                             field="measurements")
    kinds = {found[i].kind for i in ids}
    if len(kinds) != 1:
        raise InputError(f"a series is of one kind; these are {', '.join(sorted(kinds))}", field="measurements")
    row = MeasurementSeries(sample_id=sample.id, kind=kinds.pop(), variable=variable, direction=direction or "",
                            measurement_ids=ids, notes=notes, created_by=actor)
    session.add(row)
    session.flush()
    batch = session.get(Batch, sample.batch_id)
    audit.record(session, actor=actor, action="series.create", entity="sample", code=sample.code,
                 compound_id=batch.compound_id, after=audit.snapshot(row))
    if commit:
        session.commit()
        session.refresh(row)
    return row


def _pr_fits(entries: Sequence[dict[str, Any]]) -> list[fits.PrTemperatureFit]:
    out = []
    for e in entries:
        d = e["fit"].get("pr_T")
        if d and d.get("tc_K") is not None:
            out.append(fits.PrTemperatureFit(points=d["points"], switching_points=d["switching_points"],
                                             tc_K=d["tc_K"], tc_err_K=d["tc_err_K"], beta=d["beta"],
                                             beta_err=d["beta_err"], apparent=d["apparent"]))
    return out


def combine_series_tc(entries: Sequence[dict[str, Any]]) -> Optional[dict[str, Any]]:
    """A Curie temperature estimate from series entries (:func:`sample_series`), with the
    ``measurement_ids`` of the series that gave a Tc."""
    est = fits.combine_tc(_pr_fits(entries))
    if est is None:
        return None
    ids = sorted({i for e in entries if ((e["fit"].get("pr_T") or {}).get("tc_K") is not None
                                         and (e["fit"].get("pr_T") or {}).get("tc_err_K"))
                  for i in e["measurements"]})
    return {**est, "measurement_ids": ids}


def compound_tc(session: Session, compound: Compound) -> Optional[dict[str, Any]]:
    """The compound's Curie temperature estimated from every Pr(T) series of its samples
    (:func:`server.analysis.series.combine_tc`); None when no series gives a Tc with an error.
    The verdict can use it as the compound's transition temperature."""
    return combine_series_tc(compound_series_entries(session, compound))


def compound_series_entries(session: Session, compound: Compound) -> list[dict[str, Any]]:
    """Every series of every sample of the compound (:func:`sample_series`)."""
    return [e for s, _ in samples_of_compound(session, compound) for e in sample_series(session, s)]


def transition_K(session: Session, sample: Sample) -> Optional[dict[str, Any]]:
    """The transition temperature the sample's history is judged against: its own Pr(T) series,
    else the compound's estimate; None when neither gives one."""
    own = combine_series_tc(sample_series(session, sample))
    if own is not None:
        return {**own, "from": "this sample's Pr(T) series"}
    batch = session.get(Batch, sample.batch_id)
    est = compound_tc(session, session.get(Compound, batch.compound_id))
    return {**est, "from": "the compound's Pr(T) series"} if est is not None else None
