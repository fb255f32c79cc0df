"""Everything the compound page shows, gathered in one call: record, batches with their verdicts,
measurements with the summary figure and transitions table, barriers with rates, estimates,
the current calibration and running jobs."""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session

from .. import access, merit
from ..access import Actor
from ..jobs import queue
from ..models import Compound, CompoundStats
from ..plots import figure_json, summary
from . import barriers, estimates, measurements, phase_id, registry, samples, series, verdicts

# The conditions the barrier table starts at (room temperature, the common 1 kHz of P-E loops).
DEFAULT_T_K = 298.15
DEFAULT_F_HZ = 1000.0


def switching_lines(session: Session, items: list[dict[str, Any]], sample_rows) -> tuple[list, list, list]:  # noqa: ANN001
    """The compound's loops for the Pr/Ec-against-T figure: one line per temperature series of a
    sample, the loops in no series apart (never one line through every loop); also every series.
    Loops whose numbers are only apparent (``server/merit.py``) are left out of the figure."""
    apparent = merit.apparent_reasons(items)
    by_id = {m["id"]: m for m in items if m["id"] not in apparent}
    lines, in_series = [], set()
    all_series = []
    for sample, _ in sample_rows:
        for s in series.sample_series(session, sample):
            all_series.append(s)
            if s["kind"] == "pe_loop" and s["variable"] == "temperature":
                lines.append((f"{sample.code} {s['direction'] or ''}".strip(), [by_id[i] for i in s["measurements"]
                                                                                   if i in by_id]))
                in_series.update(s["measurements"])
    loose = [m for m in items if m["kind"] == "pe_loop" and m["id"] not in in_series and m["id"] not in apparent]
    return lines, loose, all_series


def measurements_as_seen(session: Session, compound: Compound, *, actor: Optional[Actor]) -> list[dict[str, Any]]:
    """The compound's live measurements as ``actor`` may see them (receipts for a caller who may not see
    an embargoed compound), each with ``apparent_reason`` and ``apparent_keys`` for its key results."""
    rows, _ = measurements.list_measurements(session, compound=compound.code, limit=1000)
    hide = not access.may_see_structure(actor, compound)
    items = [measurements.measurement_as_seen(session, m, actor) for m in rows]
    apparent = {} if hide else merit.apparent_reasons(items)  # receipts carry no results to grey
    for m in items:  # the key-results column greys these and labels them apparent
        m["apparent_reason"] = apparent.get(m["id"])
        m["apparent_keys"] = sorted(merit.apparent_keys(m, apparent.get(m["id"])))
    return items


def next_steps(compound: Compound, batches: list, sample_rows: list, n_measurements: int, *,
               actor: Optional[Actor]) -> Optional[dict[str, Any]]:
    """What comes after registering ``compound``: add a batch, describe a sample, upload a file.

    Each step is done or not from the data (a live batch; a live described sample, not the default
    sample an upload to the batch itself makes; a live measurement); ``current`` is the first step not
    done. Sample and upload steps point at the newest live batch. None once a file is uploaded (the
    compound is under way), for an archived compound, and for a caller who may not write.
    """
    if not access.allows(actor, access.WRITE) or compound.archived or n_measurements:
        return None
    live = [b for b in batches if not b.archived]
    batch = live[-1].code if live else None
    described = [s for s, b in sample_rows if not s.is_default and not s.archived and not b.archived]
    steps = [
        # Each link's label names its batch: the batch table's upload links sit on the same page.
        {"key": "batch", "title": "Add a batch", "label": f"Add a batch of {compound.code}", "done": bool(live),
         "href": f"/compounds/{compound.code}/batches/new",
         "detail": f"{len(live)} live batch{'es' if len(live) != 1 else ''}" if live else
         "record when, by whom and how much was made"},
        {"key": "sample", "title": "Describe a sample", "label": f"Describe a sample of batch {batch}",
         "done": bool(described),
         "href": f"/batches/{batch}/upload?sample=new#new-sample" if batch else None,
         "detail": (f"{described[-1].code}" + (f" and {len(described) - 1} more" if len(described) > 1 else "")
                    if described else "form, thickness and electrode area (or upload to the batch's default sample)")},
        {"key": "upload", "title": "Upload a file", "label": f"Upload a file to batch {batch}", "done": False,
         "href": f"/batches/{batch}/upload" if batch else None,
         "detail": "an instrument file; its kind is chosen on the form"},
    ]
    current = next(s["key"] for s in steps if not s["done"])
    for s in steps:
        s["current"] = s["key"] == current
    return {"steps": steps, "batch": batch}


def compound_page(session: Session, compound: Compound, *, actor: Optional[Actor]) -> dict[str, Any]:
    """The compound page's data, as ``actor`` may see it."""
    batch_rows = registry.batches_of(session, compound)
    per_batch = verdicts.batch_verdicts(session, compound)
    batches = [registry.batch_read(session, b) for b in batch_rows]
    # For a caller who may not see this (embargoed) compound's structure: receipts only, no estimates
    # (computed from the structure) and jobs without results (``server/access.py``).
    hide = not access.may_see_structure(actor, compound)
    items = measurements_as_seen(session, compound, actor=actor)
    sample_rows = samples.samples_of_compound(session, compound)
    lines, loose, all_series = switching_lines(session, items, sample_rows)
    fig = None if hide else summary.switching_by_series(lines, loose)
    jobs, _ = queue.list_jobs(session, compound_id=compound.id, limit=5)
    withheld = access.withheld_codes(session, actor)
    own_estimates = [] if hide else estimates.estimates_of(session, compound)
    barrier_list = barriers.barrier_rows(session, compound, t_K=DEFAULT_T_K, frequency_Hz=DEFAULT_F_HZ)
    return {
        "c": registry.compound_read(session, compound, actor=actor),
        "batches": batches,
        "batch_verdicts": {b.code: per_batch[row.id].code for b, row in zip(batches, batch_rows) if row.id in per_batch},
        "scaffolds": registry.list_scaffolds(session),
        "measurements": items,
        "samples": [{**samples.sample_read(session, s, history=False), "measurements": n}
                    for s, n in samples.with_counts(session, [s for s, _ in sample_rows])],
        "tc_estimate": series.combine_series_tc(all_series),
        "summary_figure": figure_json(fig) if fig else None,
        "apparent_loops": sum(1 for m in items if m["apparent_reason"]),
        "transitions": summary.transitions_table(items),
        "phase_map": phase_id.phase_map(session, compound, actor=actor),
        "barriers": barrier_list,
        # the measurement results behind it are withheld with the rest for a caller who may not see the compound
        "solid_vs_solution": None if hide else barriers.solid_against_solution(
            session.get(CompoundStats, compound.id), barrier_list),
        "t": "298.15 K", "f": "1 kHz", "t_K": DEFAULT_T_K, "f_Hz": DEFAULT_F_HZ, "rate_error": None,
        "estimates": own_estimates,
        "calibrated": barriers.calibrated_for(session, compound, own_estimates, actor=actor),
        "next_steps": next_steps(compound, batches, sample_rows, len(items), actor=actor),
        "active_jobs": [access.job_as_seen(queue.job_read(j, session=session), withheld)
                        for j in jobs if j.state in ("queued", "running")],
    }
