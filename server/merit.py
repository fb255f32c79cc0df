"""Whether a loop's Pr and Ec are figures of merit or only apparent values: the one rule.

A closed P-E curve always yields numbers called Pr and Ec, but a lossy or leaky dielectric draws
one too, with an apparent Pr of eps0 eps'' E0 + sigma E0 / omega (J. F. Scott, J. Phys.: Condens.
Matter 20, 021001 (2008), DOI 10.1088/0953-8984/20/02/021001). So a P-E loop's numbers count as
figures of merit only when

1. its own analysis judged it ``switching`` (a saturated remanent loop; ``analysis/hysteresis.py``)
   and listed none of its Pr/Ec keys as apparent, and
2. no live PUND of the same sample within ``SAME_TEMPERATURE_K`` found no switching: PUND subtracts
   the non-switching (dielectric and leakage) part, so a loop it contradicts is a loop of leakage or
   loss (the compound verdict lists the same pair as a conflict, ``analysis/verdict.py``).

Every view that shows, plots, ranks or takes a maximum of loop numbers asks this module: the
compound's Pr(T) figure and its series fits, the registry's "largest Pr" and the status page's hits
(``CompoundStats.pr_max_*``, filled by ``kinds/pe_loop.py``), the key-results column and the
measurement page (greyed and labelled *apparent*). Loops that fail the rule keep their numbers, shown
as apparent, never as a figure of merit.

Measurements may be given as ``Measurement`` rows or as the dicts of ``measurement_read``.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any, Optional

from .analysis.phases import SAME_TEMPERATURE_K

#: Kinds whose results carry switching figures of merit, and those keys.
MERIT_KEYS: dict[str, tuple[str, ...]] = {
    "pe_loop": ("pr_uC_cm2", "pr_pos_uC_cm2", "pr_neg_uC_cm2", "ec_kV_cm", "ec_pos_kV_cm", "ec_neg_kV_cm",
                "ps_uC_cm2", "squareness"),
}


def _get(m: Any, name: str) -> Any:
    return m.get(name) if isinstance(m, Mapping) else getattr(m, name, None)


def _sample(m: Any) -> Any:
    return m.get("sample") if isinstance(m, Mapping) else m.sample_id


def own_reason(m: Any) -> Optional[str]:
    """Why ``m``'s own analysis makes its loop numbers apparent; None when it does not (or for a
    measurement of a kind without loop figures of merit)."""
    kind = _get(m, "kind")
    if kind not in MERIT_KEYS:
        return None
    verdict = _get(m, "verdict") or ""
    listed = set((_get(m, "results") or {}).get("apparent") or ())
    if verdict != "switching":
        return f"the loop is judged {verdict.replace('_', ' ') or 'without a verdict'}, not switching"
    if listed & set(MERIT_KEYS[kind]):
        return "its analysis lists Pr and Ec as apparent"
    return None


def contradicting_pund(m: Any, others: Iterable[Any]) -> Optional[Any]:
    """The live PUND of the same sample, at the same temperature (within SAME_TEMPERATURE_K), that
    found no switching, if there is one (the first by id)."""
    t = _get(m, "temperature_K")
    found = [o for o in others if _get(o, "kind") == "pund" and _get(o, "verdict") == "no_switching"
             and _sample(o) == _sample(m) and not _get(o, "archived")
             and ((t is None and _get(o, "temperature_K") is None)
                  or (t is not None and _get(o, "temperature_K") is not None
                      and abs(_get(o, "temperature_K") - t) <= SAME_TEMPERATURE_K))]
    return min(found, key=lambda o: _get(o, "id") or 0, default=None)


def apparent_reason(m: Any, others: Iterable[Any] = ()) -> Optional[str]:
    """Why ``m``'s loop numbers are only apparent (the rule of the module docstring); None when they are
    figures of merit or ``m`` is of a kind without them."""
    reason = own_reason(m)
    if reason is not None or _get(m, "kind") not in MERIT_KEYS:
        return reason
    pund = contradicting_pund(m, others)
    if pund is not None:
        t = _get(pund, "temperature_K")
        at = f" at {t:g} K" if t is not None else ""
        return f"PUND of the same sample (measurement {_get(pund, 'id')}){at} shows no switching"
    return None


def is_figure_of_merit(m: Any, others: Iterable[Any] = ()) -> bool:
    """Whether ``m`` is a loop whose Pr and Ec are figures of merit (``others``: the measurements
    beside it, of which PUND of the same sample is read)."""
    return _get(m, "kind") in MERIT_KEYS and apparent_reason(m, others) is None


def apparent_reasons(ms: Iterable[Any]) -> dict[int, str]:
    """For every loop among ``ms`` whose numbers are only apparent: its id -> why."""
    ms = list(ms)
    out = {}
    for m in ms:
        reason = apparent_reason(m, ms)
        if reason is not None:
            out[_get(m, "id")] = reason
    return out


def apparent_keys(m: Any, reason: Optional[str]) -> frozenset[str]:
    """The result keys of ``m`` to show as apparent: those its analysis lists, and all its figure-of-merit
    keys when ``reason`` (from :func:`apparent_reason`) says the whole loop is apparent."""
    listed = set((_get(m, "results") or {}).get("apparent") or ())
    if reason is not None:
        listed |= set(MERIT_KEYS.get(_get(m, "kind"), ()))
    return frozenset(listed)
