"""From the analyses of one compound to a verdict on ferroelectricity, with the reasons.

The rules are the textbook definition made operational: a ferroelectric has a spontaneous
polarisation that an applied field can switch (IEEE Std 180-1986; Lines and Glass,
*Principles and Applications of Ferroelectrics and Related Materials*, OUP 1977, ch. 1).
So the evidence must show both

* a **polar phase**: a crystal structure in one of the ten polar classes
  (International Tables for Crystallography Vol. A), and
* **switching** in that phase: a PUND difference (switched minus non-switched charge) or a
  saturated P-E loop (per-loop verdict ``switching``; weaker). Closed loops alone can come from leakage or
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

from server.analysis import phases, verdict_phase_id
from server.analysis.phases import Continuity, PhaseModel, PhaseTransition
from server.analysis.results import Flag, Result
from server.errors import AnalysisError
from server.verdict_codes import LABELS

METHOD = (
    "Evidence supports a ferroelectric phase only when a polar phase (ITA Vol. A polar classes) and field switching in "
    "that phase by PUND (a loop alone is weaker; Scott, J. Phys.: Condens. Matter 20, 021001 (2008)) "
    "are both shown in one scanned phase; phases delimited by paired DSC peaks, non-dispersive permittivity maxima "
    "and Pr -> 0, and only scanned intervals without a transition count as one phase."
)
VERSION = "verdict/2.4"  # 2.0: phase model with scanned intervals, criteria, PUND needed for the top codes;
# 2.1: the conclusion with its range and scanned phase; Pr -> 0 from the Pr(T) series fits;
# 2.2: SHG, powder patterns (matches and pattern changes) and columnar lattices as criteria and conflicts;
# 2.3: the identity criterion (every counted measurement from a batch of confirmed identity);
# 2.4: a computed planar minimum against measured switching or a dynamic-NMR barrier (for review); an SHG
# signal lost on heating is a phase boundary

SAME_TEMPERATURE_K = phases.SAME_TEMPERATURE_K


_KIND_NAMES = {"pe_loop": "P-E loop", "pund": "PUND", "dielectric": "dielectric", "dsc": "DSC", "crystal": "crystal"}
#: Loop verdicts that mean a saturated remanent loop (migration 0019 renamed the stored ``ferroelectric``).
_SATURATED_LOOP = ("switching",)
#: Transition classes that can be a ferroic (order-disorder or displacive) transition; chain melting,
#: isotropisation and decomposition are phase boundaries but no evidence of one.
FERROIC_CANDIDATES = ("solid_solid", "unclassified")
#: Crystal flags that lower a structure's weight (:mod:`server.analysis.crystal` quality checks).
QUALITY_FLAGS = ("r_factors_missing", "density_implausible", "column_too_long", "monoclinic_beta_90",
                 "absolute_structure_missing")
#: A bowl shallower than this is flat (Å; common practice: a bowl that inverts must be curved, and
#: crystal bowl depths of curved bowls are several tenths of an ångström or more; value from memory).
FLAT_BOWL_A = 0.2
#: A computed (GFN2-xTB) inversion barrier below this is a planar minimum, kcal/mol: the optimisation found
#: no bowl (our threshold; the collapsed computations of the campaign gave 0 and 0.07 kcal/mol).
PLANAR_BARRIER_KCAL_MOL = 0.1


def planar_minimum_conflicts(computed: Sequence[Mapping[str, Any]], switching: Sequence["Evidence"],
                             nmr_barriers: Sequence[Mapping[str, Any]] = ()) -> list["Conflict"]:
    """A computed planar minimum against measured bowl inversion: one conflict for review per estimate.

    A GFN2-xTB minimum that relaxed to a flat core (``planar``, or a barrier below
    :data:`PLANAR_BARRIER_KCAL_MOL`) says the bowl does not invert at all, while a switching loop or PUND, or a
    barrier measured by dynamic NMR (coalescence, Gutowsky and Holm 1956; Eyring rates), says it does. The
    measurement outweighs the computation, so the flag is not blocking: the class stays, the pair is listed.

    References
    ----------
    C. Bannwarth, S. Ehlert and S. Grimme, J. Chem. Theory Comput. 15, 1652 (2019) (GFN2-xTB).
    H. S. Gutowsky and C. H. Holm, J. Chem. Phys. 25, 1228 (1956).
    """
    measured = [b for b in nmr_barriers if isinstance(b.get("dg_kcal_mol"), (int, float))]
    out = []
    for est in computed:
        barrier = est.get("barrier_kcal_mol")
        planar = bool(est.get("planar")) or (isinstance(barrier, (int, float)) and barrier < PLANAR_BARRIER_KCAL_MOL)
        if not planar or not (switching or measured):
            continue
        depth = est.get("bowl_depth_A")
        found = ", ".join(p for p in (f"barrier {barrier:.2f} kcal/mol" if isinstance(barrier, (int, float)) else "",
                                      f"bowl depth {depth:.2f} Å" if isinstance(depth, (int, float)) else "") if p)
        against = []
        if switching:
            against.append(f"switching is measured ({_ids(switching)})")
        if measured:
            against.append("dynamic NMR measures an inversion barrier of "
                           + ", ".join(f"{b['dg_kcal_mol']:.1f} kcal/mol ({b.get('method') or 'NMR'}"
                                       + (f", measurement {b['measurement_id']})" if b.get("measurement_id") else ")")
                                       for b in measured))
        ids = [s.measurement_id for s in switching] + [int(b["measurement_id"]) for b in measured if b.get("measurement_id")]
        out.append(Conflict(
            f"the GFN2-xTB estimate #{est.get('estimate_id')} relaxed to a planar minimum"
            + (f" ({found})" if found else "") + f", yet {' and '.join(against)}",
            tuple(dict.fromkeys(ids)),
            "a computation that collapsed to planar (re-run from a deeper start, or with another method), or "
            "switching and exchange by another mechanism",
            blocking=False))
    return out


@dataclass(frozen=True)
class Evidence:
    """One analysed measurement, as the verdict needs it.

    ``verdict`` is the analysis verdict (pe_loop: ``"switching"``, ``"inconclusive"``, ...; pund: ``"switching"`` / ``"no_switching"``;
    crystal: ``"polar"`` / ``"centrosymmetric"`` / ``"non_polar_acentric"``). ``details`` carries the
    kind's facts (see each ``server/kinds`` module's ``evidence``): DSC ``peaks`` and ``segments``,
    dielectric ``t_peak_K``, ``t_min_K``, ``t_max_K``; loop/PUND fields; crystal ``space_group``.
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
class Conflict(Result):
    """Two pieces of evidence that cannot both hold, with a suggested explanation."""

    message: str
    measurement_ids: tuple[int, ...]
    suggestion: str = ""
    #: False for a consistency flag that a known mechanism can explain (listed for review; the verdict
    #: code stays): a measured inversion rate slower than the drive while switching is seen.
    blocking: bool = True


@dataclass(frozen=True)
class Criterion(Result):
    """One criterion of the verdict: ``state`` is ``met``, ``unmet`` or ``untested``."""

    name: str
    state: str
    measurements: tuple[int, ...]


@dataclass(frozen=True)
class PhaseRow(Result):
    """One phase interval as the API shows it."""

    t_from_K: float
    t_to_K: float
    scanned: bool
    identified_by: tuple[int, ...]


@dataclass(frozen=True)
class Conclusion(Result):
    """The verdict in one sentence, with the temperature range it speaks for and its criteria.

    ``t_from_K``-``t_to_K`` is the range the deciding measurements cover (switching temperatures, or
    the temperatures of a negative test, or of the structure); ``scanned_from_K``-``scanned_to_K`` the
    scanned, transition-free phase holding that range (None when no scan reached it: the phase there is
    only inferred). The claim never reaches beyond what was measured.
    """

    text: str
    t_from_K: float | None = None
    t_to_K: float | None = None
    scanned_from_K: float | None = None
    scanned_to_K: float | None = None
    criteria_met: tuple[str, ...] = ()
    criteria_unmet: tuple[str, ...] = ()
    criteria_untested: tuple[str, ...] = ()


@dataclass(frozen=True)
class CompoundVerdict(Result):
    """The verdict, why, and which measurements it rests on."""

    code: str
    label: str
    reason: str
    switching_temperatures_K: tuple[float, float] | None
    transitions_K: tuple[float, ...]
    transitions: tuple[PhaseTransition, ...]
    used: tuple[UsedEvidence, ...]
    conflicts: tuple[Conflict, ...]
    criteria: tuple[Criterion, ...] = ()
    phases: tuple[PhaseRow, ...] = ()
    qualifiers: tuple[str, ...] = ()
    conclusion: Conclusion | None = None
    version: str = VERSION


# --------------------------------------------------------------------------------------


def _role(ev: Evidence) -> str:
    kind, v = ev.kind, ev.verdict
    if kind == "pund":
        return {"switching": "switching", "no_switching": "no_switching"}.get(v, "inconclusive")
    if kind == "pe_loop":
        if v in _SATURATED_LOOP:
            return "saturated_loop"
        if v == "inconclusive":
            return "inconclusive"
        return "loop_not_ferroelectric"
    if kind == "crystal":
        return {
            "polar": "polar_phase",
            "centrosymmetric": "centrosymmetric_phase",
            "non_polar_acentric": "non_polar_acentric_phase",
        }.get(v, "not_used")
    if kind == "dsc":
        return "transition" if (ev.details.get("peaks") or ev.details.get("peak_K")) else "no_transition"
    if kind == "dielectric":
        return "transition" if ev.details.get("t_peak_K") is not None else "no_transition"
    if kind == "pxrd":
        return {"matches": "pattern_matches", "extra_phase": "pattern_extra_phase",
                "no_match": "pattern_no_match"}.get(v, "pattern_not_compared")
    if kind == "saxs":
        return "not_used" if ev.details.get("lattice") in (None, "", "undetermined") else "mesophase_lattice"
    if kind == "shg":
        points = ev.details.get("points") or []
        return "shg_active" if any(p.get("active") for p in points) else ("shg_silent" if points else "not_used")
    return "not_used"


def _positive(value: Any, ev: Evidence, key: str) -> float:
    t = float(value)
    if not (math.isfinite(t) and t > 0):
        raise AnalysisError(
            f"{_KIND_NAMES.get(ev.kind, ev.kind)} measurement {ev.measurement_id}: temperature {t} K is not a "
            "positive number",
            field=key,
        )
    return t


def series_vanishing(series_tc: Mapping[str, Any] | None) -> phases.PrVanishing | None:
    """The compound's fitted Pr(T) Curie temperature (``{"tc_K", "tc_err_K", "measurement_ids"}``, from
    :func:`server.services.series.compound_tc`) as the phase model's Pr -> 0; None without a Tc and error."""
    if not series_tc or series_tc.get("tc_K") is None or not series_tc.get("tc_err_K"):
        return None
    ids = tuple(int(i) for i in series_tc.get("measurement_ids") or ())
    if not ids:
        return None
    return phases.PrVanishing(t_K=float(series_tc["tc_K"]), err_K=float(series_tc["tc_err_K"]),
                              measurement_ids=ids, basis="series fit")


def phase_model(evidence: Sequence[Evidence], chain_ch2: int | None = None,
                series_tc: Mapping[str, Any] | None = None, pattern_changes: Sequence[Any] = (),
                pattern_scans: Sequence[phases.Scan] = ()) -> PhaseModel:
    """The compound's :class:`~server.analysis.phases.PhaseModel` from its evidence, with the pattern changes of
    its variable-temperature PXRD runs and the unchanged steps of those runs (``pattern_scans``)."""
    peaks: list[phases.ThermalPeak] = []
    scans: list[phases.Scan] = list(pattern_scans)
    maxima: list[phases.PermittivityMaximum] = []
    loops: list[phases.LoopPoint] = []
    points: dict[int, float] = {}
    shg_lost: list[phases.ShgVanishing] = []
    for ev in evidence:
        d = ev.details
        if ev.kind == "shg" and isinstance(d.get("t_vanish_K"), (int, float)):
            shg_lost.append(phases.ShgVanishing(ev.measurement_id, _positive(d["t_vanish_K"], ev, "t_vanish_K"),
                                                float(d.get("t_vanish_resolution_K") or 0.0)))
        if ev.kind == "dsc":
            for p in d.get("peaks") or []:
                peaks.append(phases.ThermalPeak(
                    ev.measurement_id, _positive(p["peak_K"], ev, "peak_K"), p.get("scan") or "heating",
                    bool(p.get("endothermic", True)), p.get("onset_K"), p.get("ds_J_molK")))
            legacy = d.get("peak_K")  # a bare list of peak temperatures: heating peaks of unknown entropy
            for t in (legacy if isinstance(legacy, (list, tuple)) else [legacy] if legacy is not None else []):
                peaks.append(phases.ThermalPeak(ev.measurement_id, _positive(t, ev, "peak_K"), "heating", True))
            for sgm in d.get("segments") or []:
                scans.append(phases.Scan(ev.measurement_id, "dsc", float(sgm["t_from_K"]), float(sgm["t_to_K"]),
                                         sgm.get("scan", "")))
        elif ev.kind == "dielectric":
            if d.get("t_peak_K") is not None:
                dispersive = any(f.code == "frequency_dispersion" for f in ev.flags) or bool(d.get("dispersive"))
                maxima.append(phases.PermittivityMaximum(ev.measurement_id, _positive(d["t_peak_K"], ev, "t_peak_K"),
                                                         dispersive))
            if d.get("t_min_K") is not None and d.get("t_max_K") is not None:
                scans.append(phases.Scan(ev.measurement_id, "dielectric", float(d["t_min_K"]), float(d["t_max_K"])))
        elif ev.temperature_K is not None:
            points[ev.measurement_id] = ev.temperature_K
            if ev.kind == "pe_loop" and ev.verdict != "inconclusive":
                loops.append(phases.LoopPoint(ev.measurement_id, ev.temperature_K, ev.verdict in _SATURATED_LOOP,
                                              d.get("pr_uC_cm2")))
    return phases.build(dsc_peaks=peaks, scans=scans, permittivity=maxima, loops=loops, point_temperatures=points,
                        chain_ch2=chain_ch2, series_tc=series_vanishing(series_tc), pattern_changes=pattern_changes,
                        shg_vanishing=shg_lost)


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


def describe_temperatures(what: str, temps_K: Sequence[float | None], transitions: Sequence[Any]) -> str:
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


def switching_range_text(temps_K: Sequence[float], transitions: Sequence[PhaseTransition]) -> str:
    """``"switches between 302 K and Tc = 358 ± 2 K (permittivity peak 359 K, DSC onset 357 K, Pr -> 0 at
    356 K)"`` when a transition bounds the switching range from above, else ``"switches at 302-340 K"``."""
    lo, hi = min(temps_K), max(temps_K)
    above = [tr for tr in transitions if tr.t_K > hi - SAME_TEMPERATURE_K]
    if not above:
        return f"switches at {_t_range(temps_K)}"
    tr = above[0]
    seen = []
    if tr.t_permittivity_K is not None:
        seen.append(("permittivity peak", tr.t_permittivity_K))
    if tr.onset_K is not None:
        seen.append(("DSC onset", tr.onset_K))
    elif tr.t_heating_K is not None:
        seen.append(("DSC peak", tr.t_heating_K))
    if tr.t_pr_zero_K is not None:
        seen.append(("Pr -> 0 at", tr.t_pr_zero_K))
    values = [v for _, v in seen] or [tr.t_K]
    tc = sum(values) / len(values)
    spread = (max(values) - min(values)) / 2.0
    tc_text = f"Tc = {tc:.0f} ± {max(spread, 0.5):.0f} K" if len(values) > 1 else f"Tc = {tc:.0f} K"
    detail = ", ".join(f"{n} {v:.0f} K" for n, v in seen)
    return f"switches between {lo:.0f} K and {tc_text}" + (f" ({detail})" if detail else "")


def _structure_phrase(ev: Evidence) -> str:
    name = {"polar": "polar", "centrosymmetric": "centrosymmetric", "non_polar_acentric": "non-polar acentric"}[
        ev.verdict
    ]
    sg = ev.details.get("space_group")
    sg_text = f" ({sg})" if sg else ""
    t = f" at {ev.temperature_K:.0f} K" if ev.temperature_K is not None else " at an unrecorded temperature"
    quality = [f.code for f in ev.flags if f.code in QUALITY_FLAGS]
    q = f", weight lowered by {', '.join(c.replace('_', ' ') for c in quality)}" if quality else ""
    return f"{name} structure{sg_text}{t} (measurement {ev.measurement_id}{q})"


def _ids(items: Sequence[Evidence]) -> str:
    """``"measurement 3"`` or ``"measurements 3, 4"``."""
    ids = ", ".join(str(e.measurement_id) for e in items)
    return f"measurement{'s' if len(items) > 1 else ''} {ids}"


def _negative_text(negatives: Sequence[Evidence]) -> str:
    """``"not switched at 300 K up to 60 kV/cm (measurement 4)"``: a negative result keeps its conditions."""
    parts = []
    for n in negatives:
        e = n.details.get("emax_kV_cm") or n.details.get("e_pulse_kV_cm")
        field_text = f" up to {e:.0f} kV/cm" if e else " (field not recorded)"
        parts.append(f"not switched{_at(n.temperature_K)}{field_text} ({_KIND_NAMES[n.kind]}, measurement "
                     f"{n.measurement_id})")
    return "; ".join(parts)


def _weight(ev: Evidence) -> int:
    """Structures with fewer quality flags come first (flags lower the weight, never delete)."""
    return sum(1 for f in ev.flags if f.code in QUALITY_FLAGS)


def _pick_phase(model: PhaseModel, switching: Sequence[Evidence], structures: Sequence[Evidence]):
    """For each structure: the continuity with each switching measurement."""
    out = []
    for st in structures:
        for s in switching:
            out.append((st, s, phases.continuity(model, s.temperature_K, st.temperature_K)))
    return out


def decide(evidence: Sequence[Evidence], *, chain_ch2: int | None = None,
           rates: Sequence[Mapping[str, Any]] = (), series_tc: Mapping[str, Any] | None = None,
           pattern_changes: Sequence[Any] = (), pattern_scans: Sequence[phases.Scan] = (),
           identity: Mapping[int, bool] | None = None, computed_minima: Sequence[Mapping[str, Any]] = (),
           nmr_barriers: Sequence[Mapping[str, Any]] = ()) -> CompoundVerdict:
    """Combine the analysed measurements of one compound into a verdict.

    Parameters
    ----------
    evidence : sequence of Evidence
        Any order; unknown kinds are listed as ``not_used``.
    chain_ch2 : int, optional
        CH2 groups in all side chains (classes DSC peaks as chain melting; see :mod:`server.analysis.phases`).
    rates : sequence of mappings, optional
        Measured inversion barriers ``{"measurement_id", "dh_kJ_mol", "ds_J_molK"}`` (Eyring), for the rate
        consistency flag.
    series_tc : mapping, optional
        The compound's Curie temperature fitted to its Pr(T) series ``{"tc_K", "tc_err_K", "measurement_ids"}``
        (:func:`series_vanishing`): the phase model's Pr -> 0 temperature.
    pattern_changes, pattern_scans : sequence, optional
        Where the powder pattern of a variable-temperature run changes (phase boundaries) and the steps where it
        did not (scanned intervals); see :func:`server.analysis.phases.build`.
    identity : mapping, optional
        Measurement id -> whether its batch's identity is confirmed (issue 17): adds the criterion of
        :func:`identity_criterion`. The code does not depend on it (the verdict still counts the measurements).
    computed_minima : sequence of mappings, optional
        GFN2-xTB estimates ``{"estimate_id", "barrier_kcal_mol", "bowl_depth_A", "planar"}``; a planar minimum
        against measured switching or a dynamic-NMR barrier is a conflict for review
        (:func:`planar_minimum_conflicts`).
    nmr_barriers : sequence of mappings, optional
        Barriers measured by dynamic NMR ``{"estimate_id", "measurement_id" (or None), "method", "dg_kcal_mol"}``
        (coalescence or Eyring), for the same flag.

    Returns
    -------
    CompoundVerdict
        ``code`` and ``label`` (see module table), ``reason``, ``switching_temperatures_K``, ``transitions_K``
        (one per physical transition), ``transitions`` (classed, with their rule), ``used``, ``conflicts``
        (each with a suggested explanation), ``criteria`` (met / unmet / untested with measurement ids),
        ``phases`` (intervals, scanned or inferred), ``qualifiers`` (e.g. "tested at one temperature only") and
        ``conclusion`` (:class:`Conclusion`: the sentence with its temperature range, the scanned phase holding
        it and the criteria by state).

    Notes
    -----
    The top code needs a polar structure and PUND switching shown in one phase: the interval between their
    temperatures scanned (DSC, permittivity or a loop series) and free of transitions
    (:func:`server.analysis.phases.continuity`). Saturated loops without PUND give ``loop_switching_only``:
    a closed loop alone can come from leakage or loss (Scott 2008). Conflicts: switching against a PUND
    without switching at the same temperature; switching in a phase shown to hold only non-polar structures;
    a flat bowl against switching by bowl inversion; an Eyring inversion rate at the loop temperature
    slower than the drive frequency or the PUND pulse rate while switching is seen; and the phase-identification
    conflicts of :mod:`server.analysis.verdict_phase_id` (SHG silent where a polar claim is made, SHG active in a
    centrosymmetric phase, a powder pattern that is not the claimed polar structure, a columnar mesophase where a
    crystal structure is counted as the switching phase).

    References
    ----------
    IEEE Std 180-1986, Standard Definitions of Primary Ferroelectric Terms.
    M. E. Lines and A. M. Glass, Principles and Applications of Ferroelectrics and Related Materials, OUP 1977.
    J. F. Scott, J. Phys.: Condens. Matter 20, 021001 (2008), DOI 10.1088/0953-8984/20/02/021001.
    International Tables for Crystallography Vol. A (2016), DOI 10.1107/97809553602060000114.
    H. Eyring, J. Chem. Phys. 3, 107 (1935) (k = kB T / h exp(dS/R) exp(-dH/RT)).
    """
    for ev in evidence:
        if ev.temperature_K is not None and not (math.isfinite(ev.temperature_K) and ev.temperature_K > 0):
            raise AnalysisError(
                f"measurement {ev.measurement_id}: temperature {ev.temperature_K} K is not a positive number",
                field="temperature",
            )
    roles = [(ev, _role(ev)) for ev in evidence]
    model = phase_model(evidence, chain_ch2, series_tc, pattern_changes, pattern_scans)
    transitions = model.transitions
    used = tuple(UsedEvidence(ev.measurement_id, ev.kind, role, ev.temperature_K) for ev, role in roles)

    pund_sw = [ev for ev, r in roles if r == "switching"]
    loops_sat = [ev for ev, r in roles if r == "saturated_loop"]
    switching = pund_sw + loops_sat
    pund_none = [ev for ev, r in roles if r == "no_switching"]
    loops_neg = [ev for ev, r in roles if r == "loop_not_ferroelectric"]
    negatives = pund_none + loops_neg
    inconclusive = [ev for ev, r in roles if r == "inconclusive"]
    polar = sorted((ev for ev, r in roles if r == "polar_phase"), key=_weight)
    nonpolar = [ev for ev, r in roles if r in ("centrosymmetric_phase", "non_polar_acentric_phase")]
    structures = polar + nonpolar

    conflicts: list[Conflict] = []
    for s in switching:
        for p in pund_none:
            if p.measurement_id != s.measurement_id and _same_temperature(s.temperature_K, p.temperature_K):
                conflicts.append(Conflict(
                    f"{_KIND_NAMES[s.kind]} (measurement {s.measurement_id}) shows switching"
                    f"{_at(s.temperature_K)} but PUND (measurement {p.measurement_id}) shows none"
                    f"{_at(p.temperature_K)}",
                    (s.measurement_id, p.measurement_id),
                    "a loop from leakage or loss, a different sample or electrodes, or a PUND field below the "
                    "coercive field"))
    pairs = _pick_phase(model, switching, structures)
    for s in switching:
        same = [st for st, s2, c in pairs if s2 is s and c.same]
        if same and not any(st.verdict == "polar" for st in same):
            st = same[0]
            conflicts.append(Conflict(
                f"{_KIND_NAMES[s.kind]} (measurement {s.measurement_id}) shows switching"
                f"{_at(s.temperature_K)} but the {_structure_phrase(st)} is in the same scanned phase; "
                "a non-polar phase cannot switch",
                (s.measurement_id, st.measurement_id),
                "a wrong space group (missed polar subgroup), a different polymorph in the sample, or loops "
                "from leakage"))
    if switching:
        flat = [st for st in structures if isinstance(st.details.get("bowl_depth_A"), (int, float))
                and st.details["bowl_depth_A"] < FLAT_BOWL_A]
        for st in flat:
            conflicts.append(Conflict(
                f"switching by bowl inversion is claimed ({_ids(switching)}) but the crystal structure "
                f"(measurement {st.measurement_id}) has a flat core (bowl depth {st.details['bowl_depth_A']:.2f} Å, "
                f"below {FLAT_BOWL_A:g} Å)",
                tuple([s.measurement_id for s in switching] + [st.measurement_id]),
                "switching by another mechanism (proton or side-chain order), a wrong structure, or wrong data"))
    for rate in rates:
        for s in switching:
            k = _eyring_rate_s(rate, s.temperature_K)
            drive = s.details.get("frequency_Hz") if s.kind == "pe_loop" else (
                1.0 / s.details["pulse_width_s"] if s.details.get("pulse_width_s") else None)
            if k is not None and drive and k < drive:
                what = f"{drive:.3g} Hz drive" if s.kind == "pe_loop" else f"{s.details['pulse_width_s'] * 1e3:.3g} ms pulses"
                conflicts.append(Conflict(
                    f"the measured inversion rate{_at(s.temperature_K)} is {k:.3g} s^-1 (measurement "
                    f"{rate['measurement_id']}), slower than the {what}, yet {_KIND_NAMES[s.kind]} (measurement "
                    f"{s.measurement_id}) switches",
                    (s.measurement_id, int(rate["measurement_id"])),
                    "field-assisted or collective switching (the field lowers the barrier), or wrong data",
                    blocking=False))

    conflicts += planar_minimum_conflicts(computed_minima, switching, nmr_barriers)

    id_criteria, id_conflicts = _phase_identity(model, evidence, switching, polar, structures)
    conflicts += id_conflicts

    switch_temps = [s.temperature_K for s in switching if s.temperature_K is not None]
    switching_range = (min(switch_temps), max(switch_temps)) if switch_temps else None
    criteria = _criteria(model, pairs, pund_sw, pund_none, loops_sat, loops_neg, structures) + id_criteria
    if identity is not None:
        criteria += (identity_criterion([ev for ev, r in roles if r != "not_used"], identity),)
    tested_temps = {round(ev.temperature_K) for ev in switching + negatives if ev.temperature_K is not None}
    qualifiers = ("tested at one temperature only",) if len(tested_temps) == 1 else ()
    common = dict(
        switching_temperatures_K=switching_range,
        transitions_K=tuple(t.t_K for t in transitions),
        transitions=transitions,
        used=used,
        criteria=criteria,
        phases=tuple(PhaseRow(p.t_from_K, p.t_to_K, p.scanned, p.identified_by) for p in model.phases),
        qualifiers=qualifiers,
    )

    def verdict(code: str, reason: str, conf: Sequence[Conflict] | None = None) -> CompoundVerdict:
        concl = conclusion(code, model, criteria, switching=switching, pund_sw=pund_sw, negatives=negatives,
                           polar=polar, nonpolar=nonpolar)
        return CompoundVerdict(code=code, label=LABELS[code], reason=reason,
                               conflicts=tuple(conflicts if conf is None else conf), conclusion=concl, **common)

    listed = f" Inconclusive P-E loops ({_ids(inconclusive)}) were not counted." if inconclusive else ""
    if model.relaxor_maxima_K:
        listed += (" Permittivity maxima that move with frequency (relaxor-like, at "
                   f"{', '.join(f'{t:.0f} K' for t in model.relaxor_maxima_K)}) are not taken as transitions.")
    for note in verdict_phase_id.mesophase_notes(model, evidence, switching):
        listed += f" {_cap(note)}."
    if qualifiers:
        listed += " Tested at one temperature only."

    review = [c for c in conflicts if not c.blocking]
    if review:
        listed += f" For review: {review[0].message}; possibly {review[0].suggestion}."
        if len(review) > 1:
            listed += f" {len(review) - 1} more such flag(s) listed."
    blocking = [c for c in conflicts if c.blocking]
    if blocking:
        c0 = blocking[0]
        reason = _cap(c0.message) + f". Possible explanation: {c0.suggestion}."
        if len(conflicts) > 1:
            reason += f" {len(conflicts) - 1} more conflict(s) listed."
        return verdict("conflicting", reason, conflicts)

    def phase_notes(sw: Sequence[Evidence]) -> str:
        notes = []
        for st, s, c in pairs:
            if s not in sw:
                continue
            if c.same is None and c.gap_K is not None:
                notes.append(f"{_structure_phrase(st)} and switching at {s.temperature_K:.0f} K: {c.text()}")
            elif c.same is None:
                notes.append(f"{_structure_phrase(st)}: temperature not recorded, so its phase is not known")
            elif c.same is False:
                notes.append(f"{_structure_phrase(st)} lies across the transition at {c.between[0].label()}")
        seen: list[str] = []
        for n in notes:
            if n not in seen:
                seen.append(n)
        return (" " + "; ".join(_cap(n) for n in seen[:3]) + ".") if seen else ""

    if pund_sw:
        temps = [s.temperature_K for s in pund_sw if s.temperature_K is not None]
        rng = switching_range_text(temps, transitions) if temps else "switches (temperature not recorded)"
        matched = [st for st, s, c in pairs if st.verdict == "polar" and s in pund_sw and c.same]
        if matched:
            st = matched[0]
            return verdict(
                "polar_switching_supported",
                f"{_cap(_structure_phrase(st))} and PUND switching ({_ids(pund_sw)}) in one scanned phase: "
                f"{rng}.{listed}",
            )
        where = phase_notes(pund_sw) or (" No crystal structure is known, so polarity of the switching phase is "
                                         "not shown." if not structures else "")
        return verdict("switching_phase_unknown", f"PUND switching ({_ids(pund_sw)}): {rng}.{where}{listed}")

    if loops_sat:
        temps = [s.temperature_K for s in loops_sat if s.temperature_K is not None]
        rng = describe_temperatures("saturated loops", temps, transitions) if temps else "saturated loops"
        matched = [st for st, s, c in pairs if st.verdict == "polar" and c.same]
        polar_note = f" {_cap(_structure_phrase(matched[0]))} is in the same scanned phase." if matched else \
            phase_notes(loops_sat)
        return verdict(
            "loop_switching_only",
            f"{_cap(rng)} ({_ids(loops_sat)}), but no PUND shows switching: a loop alone can come from leakage or "
            f"loss.{polar_note}{listed}",
        )

    neg = f" {_cap(_negative_text(negatives))}." if negatives else ""
    if polar:
        st = polar[0]
        tested = neg or " Switching not yet measured."
        return verdict("polar_unswitched",
                       f"{_cap(_structure_phrase(st))}: pyroelectric at most until switching is shown.{tested}{listed}")
    if nonpolar:
        phrases = "; ".join(_structure_phrase(st) for st in nonpolar)
        tail = (" A non-polar acentric class can be piezoelectric but not ferroelectric."
                if any(st.verdict == "non_polar_acentric" for st in nonpolar) else "")
        return verdict("nonpolar", f"Only non-polar phases known: {phrases}; no switching seen.{neg}{tail}{listed}")
    ferroic = [t for t in transitions if t.transition_class in FERROIC_CANDIDATES]
    if transitions and not ferroic:
        trs = ", ".join(t.label() for t in transitions)
        text = f"only melting-type transitions ({trs}): phase boundaries, not evidence of a ferroic transition"
        if negatives:
            return verdict("no_switching_seen", f"{_cap(_negative_text(negatives))}; no structure known, and {text}."
                                                f"{listed}")
        return verdict("untested", f"{_cap(text)}; no structure or switching yet.{listed}")
    if transitions:
        trs = ", ".join(t.label() for t in transitions)
        return verdict(
            "transition_only",
            f"Transition(s) at {trs}, but no structure and no switching to show a polar phase.{neg}{listed}",
        )
    if negatives:
        return verdict("no_switching_seen", f"{_cap(_negative_text(negatives))}; no structure or transition known."
                                            f"{listed}")
    if inconclusive:
        return verdict("untested", f"Only inconclusive P-E loops ({_ids(inconclusive)}) so far.{listed}")
    return verdict("untested", f"No polarity, switching or transition measurements analysed yet.{listed}")


#: What each code claims, as the opening of its conclusion.
_CLAIMS = {
    "polar_switching_supported": "polar structure and PUND switching in one scanned phase",
    "switching_phase_unknown": "PUND switching, polar structure of that phase not shown",
    "loop_switching_only": "saturated loops, switching not confirmed by PUND",
    "polar_unswitched": "polar structure, switching not shown",
    "nonpolar": "only non-polar structures",
    "transition_only": "phase transition, no polarity evidence",
    "no_switching_seen": "no switching seen",
    "conflicting": "conflicting evidence",
    "untested": "nothing conclusive",
}


def conclusion(code: str, model: PhaseModel, criteria: Sequence[Criterion], *, switching: Sequence[Evidence],
               pund_sw: Sequence[Evidence], negatives: Sequence[Evidence], polar: Sequence[Evidence],
               nonpolar: Sequence[Evidence]) -> Conclusion:
    """The verdict's conclusion: what is claimed, over which temperatures, in which scanned phase, by which
    criteria. A positive claim speaks for its switching temperatures only (and, where a transition bounds them,
    up to Tc, :func:`switching_range_text`); a negative one keeps its temperature and highest field; neither is
    carried into a stretch of temperature that no DSC, permittivity or series scan reached (the referee's
    question "was the phase between these temperatures looked at?", Lines and Glass 1977 ch. 1)."""
    if code in ("polar_switching_supported", "switching_phase_unknown", "loop_switching_only", "conflicting") \
            and switching:
        deciding = pund_sw if (pund_sw and code != "loop_switching_only") else switching
        temps = [e.temperature_K for e in deciding if e.temperature_K is not None]
        what = switching_range_text(temps, model.transitions) if temps else "switches (temperature not recorded)"
    elif code in ("no_switching_seen", "polar_unswitched", "nonpolar") and negatives:
        temps = [e.temperature_K for e in negatives if e.temperature_K is not None]
        what = _negative_text(negatives)
    elif code in ("polar_unswitched", "nonpolar"):
        sts = polar if code == "polar_unswitched" else nonpolar
        temps = [e.temperature_K for e in sts if e.temperature_K is not None]
        what = "; ".join(_structure_phrase(e) for e in sts[:2])
    elif code == "transition_only" and model.transitions:
        temps = [t.t_K for t in model.transitions]
        what = "transitions at " + ", ".join(f"{t.t_K:.0f} K" for t in model.transitions)
    else:
        temps, what = [], ""
    lo = min(temps) if temps else None
    hi = max(temps) if temps else None
    scope = ""
    sc_lo = sc_hi = None
    if lo is not None:
        p_lo, p_hi = phases.scanned_phase(model, lo), phases.scanned_phase(model, hi)
        if p_lo is not None and p_lo is p_hi:
            sc_lo, sc_hi = p_lo.t_from_K, p_lo.t_to_K
            scope = f"in the phase scanned from {sc_lo:.0f} K to {sc_hi:.0f} K"
        elif p_lo is None and p_hi is None:
            scope = (f"no DSC, permittivity or series scan reached {_t_range(temps)}: the phase there is "
                     "inferred only")
        else:
            unscanned = [t for t, p in ((lo, p_lo), (hi, p_hi)) if p is None]
            scope = ("spanning more than one phase" if not unscanned else
                     f"the phase at {unscanned[0]:.0f} K was not scanned (inferred only)")
    by_state = {st: tuple(c.name for c in criteria if c.state == st) for st in ("met", "unmet", "untested")}
    parts = [_CLAIMS[code] + (f": {what}" if what else "")]
    if scope:
        parts.append(scope)
    crit = []
    for st, word in (("met", "met"), ("unmet", "unmet"), ("untested", "not tested")):
        if by_state[st]:
            crit.append(f"{word}: {', '.join(by_state[st])}")
    text = _cap("; ".join(parts)) + "." + (f" Criteria {'; '.join(crit)}." if crit else "")
    return Conclusion(text=text, t_from_K=lo, t_to_K=hi, scanned_from_K=sc_lo, scanned_to_K=sc_hi,
                      criteria_met=by_state["met"], criteria_unmet=by_state["unmet"],
                      criteria_untested=by_state["untested"])


def _phase_identity(model: PhaseModel, evidence, switching, polar, structures):  # noqa: ANN001
    """Criteria and conflicts from SHG, PXRD and X-ray scattering (:mod:`server.analysis.verdict_phase_id`)."""
    crit, conf = verdict_phase_id.findings(model, evidence, switching=switching, polar=polar, structures=structures)
    return (tuple(Criterion(c.name, c.state, c.measurements) for c in crit),
            [Conflict(c.message, c.measurements, c.suggestion) for c in conf])


def _eyring_rate_s(rate: Mapping[str, Any], t_K: float | None) -> float | None:
    """k = kB T / h exp(dS/R) exp(-dH / (R T)) (Eyring 1935), s^-1; None without the numbers."""
    if t_K is None or rate.get("dh_kJ_mol") is None or rate.get("ds_J_molK") is None:
        return None
    from scipy.constants import R, h, k  # CODATA 2018

    return k * t_K / h * math.exp(float(rate["ds_J_molK"]) / R) * math.exp(-float(rate["dh_kJ_mol"]) * 1e3 / (R * t_K))


def _criteria(model: PhaseModel, pairs, pund_sw, pund_none, loops_sat, loops_neg, structures) -> tuple[Criterion, ...]:  # noqa: ANN001
    ids = lambda evs: tuple(sorted({e.measurement_id for e in evs}))  # noqa: E731
    # 1. a polar structure in the same (scanned) phase as the switching
    same = [(st, s) for st, s, c in pairs if c.same]
    polar_same = [(st, s) for st, s in same if st.verdict == "polar"]
    if polar_same:
        c1 = Criterion("polar structure in the switching phase", "met",
                       ids([st for st, _ in polar_same] + [s for _, s in polar_same]))
    elif same:
        c1 = Criterion("polar structure in the switching phase", "unmet", ids([st for st, _ in same] + [s for _, s in same]))
    else:
        c1 = Criterion("polar structure in the switching phase", "untested", ids(structures))
    # 2. switching by PUND (not a loop alone)
    if pund_sw:
        c2 = Criterion("switching shown by PUND", "met", ids(pund_sw))
    elif pund_none:
        c2 = Criterion("switching shown by PUND", "unmet", ids(pund_none))
    else:
        c2 = Criterion("switching shown by PUND", "untested", ())
    # 3. a saturated loop
    if loops_sat:
        c3 = Criterion("saturated loop", "met", ids(loops_sat))
    elif loops_neg:
        c3 = Criterion("saturated loop", "unmet", ids(loops_neg))
    else:
        c3 = Criterion("saturated loop", "untested", ())
    # 4. Pr -> 0 within a few kelvin of the permittivity peak and the DSC anomaly
    prz = model.pr_vanishing
    name4 = "Pr vanishes at the permittivity peak and the DSC anomaly"
    if prz is None:
        c4 = Criterion(name4, "untested", ())
    else:
        tr = next((t for t in model.transitions if t.t_pr_zero_K is not None), None)
        if tr is not None and {"dsc", "dielectric", "series"} <= set(tr.sources):
            c4 = Criterion(name4, "met", tr.measurement_ids)
        else:
            c4 = Criterion(name4, "unmet", tr.measurement_ids if tr else prz.measurement_ids)
    # 5.- SHG, PXRD and X-ray scattering: _phase_identity
    return (c1, c2, c3, c4)


IDENTITY_CRITERION = "identity of every measured batch confirmed"


def identity_criterion(counted: Sequence[Evidence], identity: Mapping[int, bool]) -> Criterion:
    """Whether the batches of the counted measurements have a confirmed identity (issue 17).

    A physical result describes the compound only if the batch measured is the compound: journals ask for
    identity and purity evidence (HRMS, elemental analysis, NMR) before physical data are discussed. The
    criterion is ``met`` when every counted measurement comes from a confirmed batch, ``unmet`` (listing the
    measurements on unconfirmed batches) when one does not, ``untested`` when nothing is counted yet.
    """
    ids = sorted({ev.measurement_id for ev in counted})
    if not ids:
        return Criterion(IDENTITY_CRITERION, "untested", ())
    unconfirmed = tuple(i for i in ids if not identity.get(i))
    return Criterion(IDENTITY_CRITERION, "unmet", unconfirmed) if unconfirmed else \
        Criterion(IDENTITY_CRITERION, "met", tuple(ids))


def _at(t: float | None) -> str:
    return f" at {t:.0f} K" if t is not None else " (temperature not recorded)"


def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]
