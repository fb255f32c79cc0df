"""Variable-temperature powder-pattern runs of a compound: where the pattern changes, for the phase model.

A run is a temperature series of ``pxrd`` measurements of one sample (heating or cooling,
:mod:`server.services.series`). The patterns are read again from their raw files (the source of truth),
background-subtracted as the analysis does it, and compared step by step
(:func:`server.analysis.pxrd.pattern_changes`). Each change is a phase boundary; each unchanged step a
scanned interval (:func:`server.analysis.phases.pattern_scans`). Work is bounded: at most
:data:`MAX_PATTERNS` patterns per compound are read, and results are cached per set of files.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np
from sqlmodel import Session

from ..analysis import phases, pxrd
from ..kinds import KINDS
from ..models import Measurement, RawFile
from . import import_profiles

#: Patterns read per compound at most (bounded work per request; a run of 2-K steps over 200 K is 100).
MAX_PATTERNS = 120

_CACHE: dict[tuple, tuple[list[Any], list[phases.Scan]]] = {}


def _net(session: Session, m: Measurement) -> tuple[np.ndarray, np.ndarray]:
    raw = session.get(RawFile, m.raw_file_id)
    parsed = (import_profiles.stored_block(session, name=m.profile_name, version=m.profile_version, block=m.block,
                                           raw=raw.data).table if m.profile_name else KINDS["pxrd"].read(raw.data,
                                                                                                         raw.filename))
    return pxrd.net_pattern(parsed.frame)


def runs_of(session: Session, entries: Sequence[dict[str, Any]]) -> tuple[list[Any], list[phases.Scan]]:
    """Pattern changes and unchanged steps of every PXRD temperature series among ``entries``
    (:func:`server.services.series.compound_series_entries`)."""
    runs = [e for e in entries if e["kind"] == "pxrd" and e["variable"] == "temperature"]
    changes: list[Any] = []
    scans: list[phases.Scan] = []
    budget = MAX_PATTERNS
    for e in runs:
        ms = [session.get(Measurement, i) for i in e["measurements"]]
        ms = [m for m in ms if m is not None and m.temperature_K is not None]
        if len(ms) < 2 or len(ms) > budget:
            continue
        budget -= len(ms)
        key = tuple((m.id, m.sha256, m.temperature_K) for m in ms) + (e["direction"],)
        if key not in _CACHE:
            pats = [(m.id, float(m.temperature_K), *_net(session, m)) for m in ms]
            found = pxrd.pattern_changes(pats, scan=e["direction"] or "heating")
            steps = phases.pattern_scans([(m.id, float(m.temperature_K)) for m in ms], found, e["direction"] or "")
            if len(_CACHE) > 64:
                _CACHE.pop(next(iter(_CACHE)))
            _CACHE[key] = (found, steps)
        found, steps = _CACHE[key]
        changes += found
        scans += steps
    return changes, scans
