"""A person's edit of an automatic analysis (an NMR spectrum's integrated peak list), kept beside it.

The raw file and the automatic results are never changed. An edit is a correction like a corrected
condition (:func:`server.services.measurements.revise_measurement`): a new measurement from the same file
that supersedes the old one, carrying in ``Measurement.correction`` the replaced result keys with who,
when, why and the analysis version the edit was made against. A revert is one more correction whose
``results`` are empty: the automatic analysis stands again. Each is audited (``measurement.correct`` /
``measurement.correct_revert``), and the chain of superseded rows is the history.
"""

from __future__ import annotations

from typing import Any, Optional

from sqlmodel import Session

from ..errors import InputError
from ..kinds import KINDS
from ..models import Measurement, utcnow
from . import measurements
from .accounts import shown_name
from .errors import Duplicate

MAX_REASON = 2000


def effective_results(results: dict[str, Any], correction: Optional[dict[str, Any]]) -> dict[str, Any]:
    """The results as they stand: the automatic ones with a person's edited keys laid over them."""
    return {**results, **((correction or {}).get("results") or {})}


def _stamp(m: Measurement, reason: str, actor: str, results: dict[str, Any]) -> dict[str, Any]:
    reason = (reason or "").strip()
    if not reason:
        raise InputError("say why the analysis is corrected", field="reason")
    if len(reason) > MAX_REASON:
        raise InputError(f"the reason is longer than {MAX_REASON} characters", field="reason")
    return {"results": results, "reason": reason, "by": actor, "at": utcnow().isoformat(),
            "analysis_version": m.analysis_version}


def correct(*, session: Session, measurement: Measurement, edit: Any, reason: str, actor: str) -> Measurement:
    """Store ``edit`` (for an NMR spectrum: the list of signals) as a correction of ``measurement``'s analysis.

    Raises InputError (422, naming the field) on a bad edit or no reason, Duplicate (409) when the
    measurement was corrected already; nothing is stored then."""
    m = measurement
    kind = KINDS.get(m.kind)
    if kind is None or kind.correct is None:
        raise InputError(f"the results of a {m.kind} measurement are not edited by hand", field="kind")
    if m.superseded_by_id is not None:
        newest = measurements.newest_of(session, m)
        raise Duplicate(f"measurement {m.id} was corrected already; edit the newest, measurement {newest.id}",
                        existing=newest.id)
    done = measurements.reanalyse_one(session, m)  # the stored file as read, in process: it passed its budget
    stamp = _stamp(m, reason, actor, kind.correct(done.parsed, done.result, edit))
    return measurements.revise_measurement(session=session, measurement=m, form={}, actor=actor, correction=stamp,
                                           action="measurement.correct")


def revert(*, session: Session, measurement: Measurement, reason: str, actor: str) -> Measurement:
    """Let the automatic analysis stand again: a correction with no edited keys. 422 when nothing is edited."""
    m = measurement
    if not ((m.correction or {}).get("results")):
        raise InputError("the automatic analysis stands already: there is no edit to revert", field="correction")
    if m.superseded_by_id is not None:
        newest = measurements.newest_of(session, m)
        raise Duplicate(f"measurement {m.id} was corrected already; revert the newest, measurement {newest.id}",
                        existing=newest.id)
    return measurements.revise_measurement(session=session, measurement=m, form={}, actor=actor,
                                           correction=_stamp(m, reason, actor, {}),
                                           action="measurement.correct_revert")


def history(session: Session, m: Measurement, *, viewer: Any = None) -> list[dict[str, Any]]:
    """The edits and reverts that led to ``m``, newest first: one entry per measurement of the chain whose
    correction differs from the one before it (``edited`` or ``reverted``), with who, when, why and the
    analysis version; names as :func:`server.services.accounts.shown_name` shows them to ``viewer``."""
    chain = [m]
    while chain[-1].supersedes_id is not None and len(chain) < 1000:
        chain.append(session.get(Measurement, chain[-1].supersedes_id))
    out = []
    for row, before in zip(chain, chain[1:] + [None]):
        c = row.correction
        if c is None or (before is not None and before.correction == c):
            continue
        out.append({"measurement": row.id, "edited": bool(c.get("results")), "by": shown_name(c.get("by", ""), viewer),
                    "at": c.get("at"), "reason": c.get("reason", ""), "analysis_version": c.get("analysis_version")})
    return out
