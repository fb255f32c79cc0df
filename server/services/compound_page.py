"""Everything the compound page shows, gathered in one call: record, batches with their verdicts,
measurements with the summary figure and transitions table, barriers with rates, estimates,
the current calibration and running jobs."""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session

from .. import access
from ..access import Actor
from ..jobs import queue
from ..models import Compound
from ..plots import figure_json, summary
from . import barriers, estimates, measurements, registry, verdicts

# The conditions the barrier table starts at (room temperature, the common 1 kHz of P-E loops).
DEFAULT_T_K = 298.15
DEFAULT_F_HZ = 1000.0


def compound_page(session: Session, compound: Compound, *, actor: Optional[Actor]) -> dict[str, Any]:
    """The compound page's data, as ``actor`` may see it."""
    batch_rows = registry.batches_of(session, compound)
    per_batch = verdicts.batch_verdicts(session, compound)
    batches = [registry.batch_read(session, b) for b in batch_rows]
    rows, _ = measurements.list_measurements(session, compound=compound.code, limit=1000)
    # For a caller who may not see this (embargoed) compound's structure: receipts only, no estimates
    # (computed from the structure) and jobs without results (``server/access.py``).
    hide = not access.may_see_structure(actor, compound)
    items = [measurements.measurement_as_seen(session, m, actor) for m in rows]
    fig = None if hide else summary.switching_vs_temperature(items)
    jobs, _ = queue.list_jobs(session, compound_id=compound.id, limit=5)
    withheld = access.withheld_codes(session, actor)
    return {
        "c": registry.compound_read(session, compound, actor=actor),
        "batches": batches,
        "batch_verdicts": {b.code: per_batch[row.id].code for b, row in zip(batches, batch_rows) if row.id in per_batch},
        "scaffolds": registry.list_scaffolds(session),
        "measurements": items,
        "summary_figure": figure_json(fig) if fig else None,
        "transitions": summary.transitions_table(items),
        "barriers": barriers.barrier_rows(session, compound, t_K=DEFAULT_T_K, frequency_Hz=DEFAULT_F_HZ),
        "t": "298.15 K", "f": "1 kHz", "t_K": DEFAULT_T_K, "f_Hz": DEFAULT_F_HZ, "rate_error": None,
        "estimates": [] if hide else estimates.estimates_of(session, compound),
        "calibrated": barriers.current_calibration(session),
        "active_jobs": [access.job_as_seen(queue.job_read(j, session=session), withheld)
                        for j in jobs if j.state in ("queued", "running")],
    }
