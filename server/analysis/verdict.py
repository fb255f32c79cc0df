"""From the analyses of one compound to a verdict on ferroelectricity, with the reasons.

The rules are the textbook definition made operational: a ferroelectric has a spontaneous
polarisation that an applied field can switch (IEEE Std 180-1986; Lines and Glass,
*Principles and Applications of Ferroelectrics and Related Materials*, OUP 1977, ch. 1).
So the evidence must show both

* a **polar phase**: a crystal structure in one of the ten polar classes
  (International Tables for Crystallography Vol. A), and
* **switching** in that phase: a PUND difference (switched minus non-switched charge) or a
  saturated P-E loop judged ferroelectric. Closed loops alone can come from leakage or
  dielectric loss (J. F. Scott, J. Phys.: Condens. Matter 20, 021001 (2008),
  DOI 10.1088/0953-8984/20/02/021001), so a PUND without switching at the same temperature
  overrides nothing: it is reported as a conflict for a person to look at.

Temperatures tie the pieces together. Transitions (DSC peaks, dielectric anomalies) split the
temperature axis into phases; a structure and a switching measurement count as the same phase
when no transition lies between their temperatures (an unknown temperature is assumed to be
the same phase, and the reason says so).

Verdict codes (stable; labels, order and colours in :mod:`server.verdict_codes`):

=============================  ==============================================================
``polar_switching_supported``  polar structure and switching in the same phase: the evidence
                               supports a ferroelectric phase (a screening result, not a proof)
``switching_phase_unknown``    switching, but no polar structure known for that phase
``polar_unswitched``           polar structure, no switching seen (pyroelectric at most)
``nonpolar``                   only non-polar structures, no switching
``transition_only``            DSC/dielectric anomaly, no polarity evidence
``no_switching_seen``          switching looked for and not seen; no structure, no transition
``conflicting``                evidence that cannot all be true: review
``untested``                   nothing conclusive yet (inconclusive loops are listed)
=============================  ==============================================================
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

from server.analysis.results import Flag, Result
from server.errors import AnalysisError
from server.verdict_codes import LABELS

METHOD = (
    "Evidence supports a ferroelectric phase only when a polar phase (ITA Vol. A polar classes) and field switching in "
    "that phase (PUND or a saturated loop; Scott, J. Phys.: Condens. Matter 20, 021001 (2008)) "
    "are both shown; phases delimited by DSC/dielectric transitions."
)
VERSION = "verdict/1.1"  # 1.1: top code polar_switching_supported (was proven_ferroelectric)

#: Two measurements within this many kelvin count as the same temperature (common practice:
#: thermometry of a P-E stage and a DSC pan differ by a few kelvin).
SAME_TEMPERATURE_K = 5.0


_KIND_NAMES = {"pe_loop": "P-E loop", "pund": "PUND", "dielectric": "dielectric", "dsc": "DSC", "crystal": "crystal"}
_TRANSITION_KEYS = ("t_peak_K", "peak_K", "transitions_K", "tc_K")


@dataclass(frozen=True)
class Evidence:
    """One analysed measurement, as the verdict needs it.

    ``verdict`` is the analysis verdict (pe_loop: ``"ferroelectric"``, ``"inconclusive"``, ...;
    pund: ``"switching"`` / ``"no_switching"``; crystal: ``"polar"`` / ``"centrosymmetric"`` /
    ``"non_polar_acentric"``). ``details`` carries e.g. ``t_peak_K`` (dielectric), ``peak_K``
    (DSC, list) or ``space_group`` (crystal).
    """

    kind: str
    measurement_id: int
    verdict: str
    temperature_K: float | None = None
    details: Mapping[str, Any] = field(default_factory=dict)
    flags: tuple[Flag, ...] = ()


@dataclass(frozen=True)
class UsedEvidence(Result):
    """What one measurement contributed."""

    measurement_id: int
    kind: str
    role: str
    temperature_K: float | None


@dataclass(frozen=True)
class Transition:
    """A transition temperature merged over measurements within SAME_TEMPERATURE_K."""

    t_K: float
    sources: tuple[str, ...]
    measurement_ids: tuple[int, ...]

    def label(self) -> str:
        return f"{self.t_K:.0f} K ({', '.join(_KIND_NAMES.get(s, s) for s in self.sources)})"


@dataclass(frozen=True)
class Conflict(Result):
    """Two pieces of evidence that cannot both hold."""

    message: str
    measurement_ids: tuple[int, ...]


@dataclass(frozen=True)
class CompoundVerdict(Result):
    """The verdict, why, and which measurements it rests on."""

    code: str
    label: str
    reason: str
    switching_temperatures_K: tuple[float, float] | None
    transitions_K: tuple[float, ...]
    transitions: tuple[Transition, ...]
    used: tuple[UsedEvidence, ...]
    conflicts: tuple[Conflict, ...]
    version: str = VERSION


# --------------------------------------------------------------------------------------


def _role(ev: Evidence) -> str:
    kind, v = ev.kind, ev.verdict
    if kind == "pund":
        return {"switching": "switching", "no_switching": "no_switching"}.get(v, "inconclusive")
    if kind == "pe_loop":
        if v == "ferroelectric":
            return "switching"
        if v == "inconclusive":
            return "inconclusive"
        return "loop_not_ferroelectric"
    if kind == "crystal":
        return {
            "polar": "polar_phase",
            "centrosymmetric": "centrosymmetric_phase",
            "non_polar_acentric": "non_polar_acentric_phase",
        }.get(v, "not_used")
    if kind in ("dielectric", "dsc"):
        return "transition" if _transition_temps(ev) else "no_transition"
    return "not_used"


def _transition_temps(ev: Evidence) -> list[float]:
    temps: list[float] = []
    for key in _TRANSITION_KEYS:
        value = ev.details.get(key)
        if value is None:
            continue
        values = value if isinstance(value, (list, tuple)) else [value]
        for t in values:
            if t is None:
                continue
            t = float(t)
            if not (math.isfinite(t) and t > 0):
                raise AnalysisError(
                    f"{_KIND_NAMES.get(ev.kind, ev.kind)} measurement {ev.measurement_id}: transition "
                    f"temperature {t} K is not a positive number",
                    field=key,
                )
            temps.append(t)
    return temps


def _merge_transitions(evidence: Sequence[Evidence]) -> tuple[Transition, ...]:
    points = sorted(
        (t, ev.kind, ev.measurement_id)
        for ev in evidence
        if ev.kind in ("dielectric", "dsc")
        for t in _transition_temps(ev)
    )
    clusters: list[list[tuple[float, str, int]]] = []
    for p in points:
        if clusters and p[0] - clusters[-1][-1][0] <= SAME_TEMPERATURE_K:
            clusters[-1].append(p)
        else:
            clusters.append([p])
    out = []
    for c in clusters:
        out.append(
            Transition(
                t_K=sum(p[0] for p in c) / len(c),
                sources=tuple(sorted({p[1] for p in c}, key=lambda k: ("dsc", "dielectric").index(k))),
                measurement_ids=tuple(sorted({p[2] for p in c})),
            )
        )
    return tuple(out)


def _between(t1: float, t2: float, transitions: Sequence[Transition]) -> list[Transition]:
    lo, hi = sorted((t1, t2))
    return [tr for tr in transitions if lo < tr.t_K < hi]


def _same_phase(t1: float | None, t2: float | None, transitions: Sequence[Transition]) -> bool:
    """Same phase unless a transition lies strictly between the two temperatures (unknown: same)."""
    if t1 is None or t2 is None:
        return True
    return not _between(t1, t2, transitions)


def _same_temperature(t1: float | None, t2: float | None) -> bool:
    """Within SAME_TEMPERATURE_K; two unrecorded temperatures are taken as the same conditions."""
    if t1 is None and t2 is None:
        return True
    if t1 is None or t2 is None:
        return False
    return abs(t1 - t2) <= SAME_TEMPERATURE_K


def _t_range(temps: Sequence[float]) -> str:
    lo, hi = min(temps), max(temps)
    return f"{lo:.0f} K" if round(lo) == round(hi) else f"{lo:.0f}-{hi:.0f} K"


def describe_temperatures(what: str, temps_K: Sequence[float | None], transitions: Sequence[Transition]) -> str:
    """Phrase such as ``"switching seen at 300-340 K, above the transition at 290 K (DSC)"``.

    Mentions the nearest transition below the range, the nearest above it and any inside it.
    """
    known = [t for t in temps_K if t is not None]
    if not known:
        return f"{what} (temperature not recorded)"
    lo, hi = min(known), max(known)
    text = f"{what} at {_t_range(known)}"
    if len(known) < len(temps_K):
        text += " (and at unrecorded temperatures)"
    below = [tr for tr in transitions if tr.t_K < lo]
    above = [tr for tr in transitions if tr.t_K > hi]
    inside = [tr for tr in transitions if lo <= tr.t_K <= hi]
    parts = []
    if below:
        parts.append(f"above the transition at {below[-1].label()}")
    for tr in inside:
        parts.append(f"across the transition at {tr.label()}")
    if above:
        parts.append(f"below the transition at {above[0].label()}")
    if parts:
        text += ", " + " and ".join(parts)
    return text


def _structure_phrase(ev: Evidence) -> str:
    name = {"polar": "polar", "centrosymmetric": "centrosymmetric", "non_polar_acentric": "non-polar acentric"}[
        ev.verdict
    ]
    sg = ev.details.get("space_group")
    sg_text = f" ({sg})" if sg else ""
    t = f" at {ev.temperature_K:.0f} K" if ev.temperature_K is not None else " at an unrecorded temperature"
    return f"{name} structure{sg_text}{t} (measurement {ev.measurement_id})"


def _ids(items: Sequence[Evidence]) -> str:
    """``"measurement 3"`` or ``"measurements 3, 4"``."""
    ids = ", ".join(str(e.measurement_id) for e in items)
    return f"measurement{'s' if len(items) > 1 else ''} {ids}"


def decide(evidence: Sequence[Evidence]) -> CompoundVerdict:
    """Combine the analysed measurements of one compound into a verdict.

    Parameters
    ----------
    evidence : sequence of Evidence
        Any order; unknown kinds are listed as ``not_used``.

    Returns
    -------
    CompoundVerdict
        ``code`` and ``label`` (see module table), a one- or two-sentence ``reason``,
        ``switching_temperatures_K`` (min, max) where switching was seen, ``transitions_K``
        (merged DSC/dielectric transitions), ``used`` (each measurement with its role) and
        ``conflicts``.

    Notes
    -----
    Conflicts (verdict ``conflicting``): (1) switching claimed (PUND or a loop judged
    ferroelectric) while a PUND at the same temperature (within 5 K) shows none;
    (2) switching in a phase whose only known structures are non-polar (centrosymmetric or
    non-polar acentric classes cannot switch a polarisation). A non-polar structure that a
    transition separates from the switching temperatures is no conflict: the switching phase
    is then unknown. Inconclusive loops are listed but count as no evidence either way.

    References
    ----------
    IEEE Std 180-1986, Standard Definitions of Primary Ferroelectric Terms.
    J. F. Scott, J. Phys.: Condens. Matter 20, 021001 (2008), DOI 10.1088/0953-8984/20/02/021001.
    International Tables for Crystallography Vol. A (2016), DOI 10.1107/97809553602060000114.
    """
    for ev in evidence:
        if ev.temperature_K is not None and not (math.isfinite(ev.temperature_K) and ev.temperature_K > 0):
            raise AnalysisError(
                f"measurement {ev.measurement_id}: temperature {ev.temperature_K} K is not a positive number",
                field="temperature",
            )
    roles = [(ev, _role(ev)) for ev in evidence]
    transitions = _merge_transitions(evidence)
    used = tuple(UsedEvidence(ev.measurement_id, ev.kind, role, ev.temperature_K) for ev, role in roles)

    switching = [ev for ev, r in roles if r == "switching"]
    pund_none = [ev for ev, r in roles if r == "no_switching"]
    negatives = [ev for ev, r in roles if r in ("no_switching", "loop_not_ferroelectric")]
    inconclusive = [ev for ev, r in roles if r == "inconclusive"]
    polar = [ev for ev, r in roles if r == "polar_phase"]
    nonpolar = [ev for ev, r in roles if r in ("centrosymmetric_phase", "non_polar_acentric_phase")]
    structures = polar + nonpolar

    conflicts: list[Conflict] = []
    for s in switching:
        for p in pund_none:
            if p.measurement_id != s.measurement_id and _same_temperature(s.temperature_K, p.temperature_K):
                conflicts.append(
                    Conflict(
                        f"{_KIND_NAMES[s.kind]} (measurement {s.measurement_id}) shows switching"
                        f"{_at(s.temperature_K)} but PUND (measurement {p.measurement_id}) shows none"
                        f"{_at(p.temperature_K)}",
                        (s.measurement_id, p.measurement_id),
                    )
                )
    for s in switching:
        same = [st for st in structures if _same_phase(s.temperature_K, st.temperature_K, transitions)]
        if same and not any(st.verdict == "polar" for st in same):
            st = same[0]
            conflicts.append(
                Conflict(
                    f"{_KIND_NAMES[s.kind]} (measurement {s.measurement_id}) shows switching"
                    f"{_at(s.temperature_K)} but the {_structure_phrase(st)} is in the same phase; "
                    "a non-polar phase cannot switch",
                    (s.measurement_id, st.measurement_id),
                )
            )

    switch_temps = [s.temperature_K for s in switching if s.temperature_K is not None]
    switching_range = (min(switch_temps), max(switch_temps)) if switch_temps else None
    common = dict(
        switching_temperatures_K=switching_range,
        transitions_K=tuple(t.t_K for t in transitions),
        transitions=transitions,
        used=used,
    )

    def verdict(code: str, reason: str, conf: Sequence[Conflict] = ()) -> CompoundVerdict:
        return CompoundVerdict(code=code, label=LABELS[code], reason=reason, conflicts=tuple(conf), **common)

    listed = f" Inconclusive P-E loops ({_ids(inconclusive)}) were not counted." if inconclusive else ""

    if conflicts:
        reason = conflicts[0].message[0].upper() + conflicts[0].message[1:] + "."
        if len(conflicts) > 1:
            reason += f" {len(conflicts) - 1} more conflict(s) listed; check samples, contacts and the structure."
        else:
            reason += " Check the samples, the electrodes and the structure."
        return verdict("conflicting", reason, conflicts)

    switch_text = describe_temperatures("switching seen", [s.temperature_K for s in switching], transitions)
    if switching:
        methods = sorted({_KIND_NAMES[s.kind] for s in switching})
        matched = [
            st for st in polar if any(_same_phase(s.temperature_K, st.temperature_K, transitions) for s in switching)
        ]
        if matched:
            st = matched[0]
            note = ""
            if st.temperature_K is None or any(s.temperature_K is None for s in switching):
                note = " Some temperatures are not recorded, so the same phase was assumed."
            return verdict(
                "polar_switching_supported",
                f"{_cap(_structure_phrase(st))} and switching by {' and '.join(methods)} "
                f"({_ids(switching)}): {switch_text}, in the same phase.{note}{listed}",
            )
        if structures:
            others = "; ".join(_structure_phrase(st) for st in structures)
            where = (
                f" Known structures ({others}) lie across a transition from the switching temperatures: "
                "determine the structure of the switching phase."
            )
        else:
            where = " No crystal structure is known, so polarity of the switching phase is not shown."
        return verdict(
            "switching_phase_unknown",
            f"Switching by {' and '.join(methods)} ({_ids(switching)}): {switch_text}.{where}{listed}",
        )

    if polar:
        st = polar[0]
        tested = (
            f" No switching seen ({_ids(negatives)})."
            if negatives
            else " Switching not yet measured."
        )
        return verdict(
            "polar_unswitched",
            f"{_cap(_structure_phrase(st))}: pyroelectric at most until switching is shown.{tested}{listed}",
        )
    if nonpolar:
        phrases = "; ".join(_structure_phrase(st) for st in nonpolar)
        tail = (
            " A non-polar acentric class can be piezoelectric but not ferroelectric."
            if any(st.verdict == "non_polar_acentric" for st in nonpolar)
            else ""
        )
        return verdict("nonpolar", f"Only non-polar phases known: {phrases}; no switching seen.{tail}{listed}")
    if transitions:
        trs = ", ".join(t.label() for t in transitions)
        tested = f" No switching seen ({_ids(negatives)})." if negatives else ""
        return verdict(
            "transition_only",
            f"Transition(s) at {trs}, but no structure and no switching to show a polar phase.{tested}{listed}",
        )
    if negatives:
        neg_text = describe_temperatures("no switching", [n.temperature_K for n in negatives], transitions)
        return verdict(
            "no_switching_seen",
            f"{_cap(neg_text)} ({_ids(negatives)}); no structure or transition known.{listed}",
        )
    if inconclusive:
        return verdict("untested", f"Only inconclusive P-E loops ({_ids(inconclusive)}) so far.")
    return verdict("untested", "No polarity, switching or transition measurements analysed yet.")


def _at(t: float | None) -> str:
    return f" at {t:.0f} K" if t is not None else " (temperature not recorded)"


def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]
