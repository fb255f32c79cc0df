"""What each job kind does: ``HANDLERS`` maps a job kind to its handler.

A handler computes (``handler(params, progress, should_cancel) -> dict``, no database) and may
carry a ``store(session, job, result)`` step that the queue runs in the transaction marking the
job done (see :mod:`server.jobs.worker`). Keeping the two apart means the long computation holds
no database connection, and its rows appear if and only if the job is done.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, Optional

from sqlmodel import Session

from ..analysis import xtb
from ..errors import InputError
from ..models import Job
from ..services import estimates
from .queue import StoreFn

XTB_ESTIMATE = "xtb_estimate"


@dataclass(frozen=True)
class JobHandler:
    """A job kind's computation (``run``) and its optional storage step (``store``)."""

    run: Callable[[dict[str, Any], Callable[[float, str], None], Callable[[], bool]], Mapping[str, Any]]
    store: Optional[StoreFn] = None
    description: str = ""

    def __call__(self, params: dict[str, Any], progress: Callable[[float, str], None],
                 should_cancel: Callable[[], bool]) -> Mapping[str, Any]:
        return self.run(params, progress, should_cancel)


def run_xtb_estimate(params: dict[str, Any], progress: Callable[[float, str], None],
                     should_cancel: Callable[[], bool]) -> dict[str, Any]:
    """GFN2-xTB bowl-inversion estimate of ``params["smiles"]`` (see :func:`server.analysis.xtb.estimate_barrier`).

    params: ``compound_id`` (int), ``smiles`` (str), ``truncate_side_chains`` (bool, default True).
    Returns ``XtbEstimate.to_dict()``: barrier_kcal_mol, bowl_depth_A, dipole_D, dipole_axial_D,
    planar, model, method, converged, ..., flags, version.
    """
    smiles = params.get("smiles")
    if not isinstance(smiles, str) or not smiles.strip():
        raise InputError("the estimate job has no SMILES to compute", field="smiles")
    truncate = params.get("truncate_side_chains", True)
    if not isinstance(truncate, bool):
        raise InputError(f"truncate_side_chains must be true or false, got {truncate!r}",
                         field="truncate_side_chains")
    estimate = xtb.estimate_barrier(smiles, truncate_side_chains=truncate, progress=progress,
                                    should_cancel=should_cancel)
    return estimate.to_dict()


def store_xtb_estimate(session: Session, job: Job, result: dict[str, Any]) -> dict[str, Any]:
    """Store the estimate as a BarrierEstimate of the job's compound; its id joins the job result."""
    row = estimates.store_estimate(session, job=job, estimate_dict=result)
    return {"estimate_id": row.id}


HANDLERS: Mapping[str, JobHandler] = {
    XTB_ESTIMATE: JobHandler(run=run_xtb_estimate, store=store_xtb_estimate,
                             description="GFN2-xTB bowl-inversion barrier estimate (tblite)"),
}
