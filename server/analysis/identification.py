"""Phase identification: what each phase of a compound is, by which criteria, and where the evidence conflicts.

The phase model (:mod:`server.analysis.phases`) cuts the temperature axis at the transitions. Each piece is then
identified from the measurements whose temperature falls inside it:

* a crystal structure (CIF) solved at that temperature names the phase by its space group (polar or not:
  International Tables Vol. A, section 3.2);
* a powder pattern that ``matches`` a CIF (:mod:`server.analysis.pxrd`) shows the bulk powder or pellet at its
  temperature is that crystal phase; the link is a conflict when the CIF was solved across a transition;
  ``extra_phase`` says a second phase is present; ``no_match`` says the powder is not the phase of the CIFs;
* a columnar lattice from X-ray scattering (:mod:`server.analysis.saxs`) names a mesophase; a hexagonal columnar
  phase with a pi-stacking peak (3.3-3.9 A) in the phase of a switching measurement is strong evidence that the
  switched phase is that columnar phase (common practice for columnar liquid-crystalline ferroelectrics);
* SHG (:mod:`server.analysis.shg`) shows the absence of an inversion centre, not polarity: an active phase is
  *consistent with* a polar phase (a necessary condition), a silent one is evidence *against*; an active phase
  with a centrosymmetric CIF, or a silent one with a polar CIF or with switching, is a conflict;
* SHG vanishing at a transition where Pr -> 0 and the permittivity peaks too (within the larger of
  :data:`server.analysis.phases.SAME_TEMPERATURE_K` and the SHG step) is a strong criterion that the polar
  order is lost there (Lines and Glass 1977, ch. 1: Pr, the permittivity maximum and the loss of the polar
  point group coincide at a ferroelectric Tc).

Every criterion and conflict names its measurements and temperatures; nothing is decided without one.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Optional, Sequence

from .phases import SAME_TEMPERATURE_K, PhaseModel, continuity
from .results import Result
from .saxs import STACKING_WINDOW_A

METHOD = ("Phase identity from CIF space groups, powder-pattern matches, columnar lattices and SHG per phase "
          "interval of the phase model, with conflicts listed")
VERSION = "identification/1.0"

#: Kinds that carry a fact about the phase at their temperature.
FACT_KINDS = ("crystal", "pxrd", "saxs", "shg", "switching")


@dataclass(frozen=True)
class Fact:
    """What one measurement says about the phase at ``t_K``.

    ``kind``: ``crystal`` (details ``space_group``, ``polar``, ``centrosymmetric``), ``pxrd`` (``verdict``,
    ``reference``, ``reference_label``, ``reference_t_K``), ``saxs`` (``lattice``, ``a_nm``, ``stacking_A``),
    ``shg`` (``active``; a run gives one fact per point plus ``t_vanish_K`` on its first), ``switching``
    (a PUND difference or a saturated loop).
    """

    kind: str
    measurement_id: int
    t_K: Optional[float]
    details: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Criterion(Result):
    text: str
    strength: str  # "strong" | "supports" | "consistent" | "against" | "note"
    measurement_ids: tuple[int, ...]


@dataclass(frozen=True)
class IdentifiedPhase(Result):
    t_from_K: Optional[float]
    t_to_K: Optional[float]
    identity: str
    identified_by: tuple[str, ...]  # "CIF", "PXRD match", "columnar lattice", "SHG"
    criteria: tuple[Criterion, ...]
    conflicts: tuple[Criterion, ...]
    switching_ids: tuple[int, ...]
    switching_t_K: tuple[float, ...]


@dataclass(frozen=True)
class PhaseIdentification(Result):
    phases: tuple[IdentifiedPhase, ...]
    criteria: tuple[Criterion, ...]  # compound-wide (SHG vanishing with Pr and the permittivity peak)


def _intervals(model: PhaseModel, facts: Sequence[Fact]) -> list[tuple[Optional[float], Optional[float]]]:
    """The phases of the model; without transitions or phases, one interval holding every fact."""
    if model.phases:
        return [(p.t_from_K, p.t_to_K) for p in model.phases]
    return [(None, None)]


def _inside(t: Optional[float], lo: Optional[float], hi: Optional[float]) -> bool:
    if t is None:
        return lo is None and hi is None
    return (lo is None or t >= lo - 1e-9) and (hi is None or t <= hi + 1e-9)


def _c(text: str, strength: str, *ids: int) -> Criterion:
    return Criterion(text, strength, tuple(sorted(set(ids))))


def _identify_one(model: PhaseModel, lo, hi, facts: Sequence[Fact]) -> IdentifiedPhase:
    crit: list[Criterion] = []
    conf: list[Criterion] = []
    by: list[str] = []
    identity = ""
    cifs = [f for f in facts if f.kind == "crystal"]
    pxrd = [f for f in facts if f.kind == "pxrd"]
    saxs = [f for f in facts if f.kind == "saxs"]
    shg = [f for f in facts if f.kind == "shg"]
    sw = [f for f in facts if f.kind == "switching"]
    for f in cifs:
        sg = f.details.get("space_group") or "?"
        cls = "polar" if f.details.get("polar") else ("centrosymmetric" if f.details.get("centrosymmetric")
                                                       else "non-polar, non-centrosymmetric")
        crit.append(_c(f"CIF #{f.measurement_id} at {f.t_K:.0f} K: {sg} ({cls})", "strong", f.measurement_id))
        identity = identity or f"crystal, {sg} (CIF #{f.measurement_id})"
        if "CIF" not in by:
            by.append("CIF")
    for f in pxrd:
        v, ref = f.details.get("verdict"), f.details.get("reference")
        label = f.details.get("reference_label") or (f"CIF #{ref}" if ref else "")
        if v == "matches":
            same = continuity(model, f.t_K, f.details.get("reference_t_K"))
            if same.same is False:
                conf.append(_c(f"powder pattern #{f.measurement_id} at {f.t_K:.0f} K matches {label}, solved across "
                               f"the transition at {', '.join(f'{t.t_K:.0f} K' for t in same.between)}", "against",
                               f.measurement_id, ref))
            else:
                crit.append(_c(f"powder pattern #{f.measurement_id} at {f.t_K:.0f} K matches {label}", "strong",
                               f.measurement_id, ref))
                identity = identity or f"crystal phase of {label}"
                if "PXRD match" not in by:
                    by.append("PXRD match")
        elif v == "extra_phase":
            crit.append(_c(f"powder pattern #{f.measurement_id} at {f.t_K:.0f} K: {label} plus another phase "
                           "(solvate, polymorph or impurity)", "note", f.measurement_id, ref))
        elif v == "no_match":
            crit.append(_c(f"powder pattern #{f.measurement_id} at {f.t_K:.0f} K matches none of the registered "
                           "structures", "against", f.measurement_id))
    for f in saxs:
        lat = f.details.get("lattice")
        if lat in (None, "", "undetermined"):
            continue
        a = f.details.get("a_nm")
        name = f"{lat} columnar mesophase" if lat != "lamellar" else "lamellar phase"
        text = f"X-ray scattering #{f.measurement_id} at {f.t_K:.0f} K: {lat} lattice" + (f", a = {a:.2f} nm" if a else "")
        st = f.details.get("stacking_A")
        if st:
            text += f", π-stacking {st:.2f} Å"
        crit.append(_c(text, "supports", f.measurement_id))
        identity = identity if identity.startswith("crystal") else (identity or name)
        if "columnar lattice" not in by:
            by.append("columnar lattice")
        if lat == "hexagonal" and st and STACKING_WINDOW_A[0] <= st <= STACKING_WINDOW_A[1] and sw:
            crit.append(_c(f"the switching at {', '.join(f'{s.t_K:.0f} K' for s in sw)} falls in this hexagonal "
                           f"columnar phase with {st:.2f} Å π-stacking: strong evidence the switched phase is it",
                           "strong", f.measurement_id, *(s.measurement_id for s in sw)))
    active = [f for f in shg if f.details.get("active")]
    silent = [f for f in shg if not f.details.get("active")]
    if shg:
        by.append("SHG")
    if active:
        ids = [f.measurement_id for f in active]
        crit.append(_c(f"SHG active at {_span(active)}: no inversion centre, consistent with a polar phase "
                       "(necessary, not sufficient)", "consistent", *ids))
        for f in cifs:
            if f.details.get("centrosymmetric"):
                conf.append(_c(f"SHG is active at {_span(active)} but CIF #{f.measurement_id} "
                               f"({f.details.get('space_group')}) is centrosymmetric", "against", f.measurement_id, *ids))
    if silent and not active:
        ids = [f.measurement_id for f in silent]
        crit.append(_c(f"SHG silent at {_span(silent)}: evidence against a polar phase", "against", *ids))
        for f in cifs:
            if not f.details.get("centrosymmetric"):
                conf.append(_c(f"SHG is silent at {_span(silent)} but CIF #{f.measurement_id} "
                               f"({f.details.get('space_group')}) has no inversion centre", "against",
                               f.measurement_id, *ids))
        if sw:
            conf.append(_c(f"SHG is silent at {_span(silent)} but the phase switches at "
                           f"{', '.join(f'{s.t_K:.0f} K' for s in sw)}", "against", *ids, *(s.measurement_id for s in sw)))
    return IdentifiedPhase(lo, hi, identity, tuple(by), tuple(crit), tuple(conf),
                           tuple(s.measurement_id for s in sw), tuple(s.t_K for s in sw if s.t_K is not None))


def _span(facts: Sequence[Fact]) -> str:
    ts = sorted(f.t_K for f in facts if f.t_K is not None)
    if not ts:
        return "an unstated temperature"
    return f"{ts[0]:.0f} K" if ts[-1] - ts[0] < 0.5 else f"{ts[0]:.0f}-{ts[-1]:.0f} K"


def vanishing_together(model: PhaseModel, facts: Sequence[Fact]) -> list[Criterion]:
    """SHG vanishing at a transition where Pr -> 0 and the permittivity peak coincide (module notes)."""
    out = []
    for f in facts:
        tv = f.details.get("t_vanish_K") if f.kind == "shg" else None
        if tv is None:
            continue
        tol = max(SAME_TEMPERATURE_K, float(f.details.get("t_vanish_resolution_K") or 0.0))
        for tr in model.transitions:
            if abs(tr.t_K - tv) > tol + SAME_TEMPERATURE_K:
                continue
            if tr.t_pr_zero_K is not None and tr.t_permittivity_K is not None:
                out.append(_c(f"SHG vanishes at {tv:.0f} K, with Pr -> 0 at {tr.t_pr_zero_K:.0f} K and the "
                              f"permittivity peak at {tr.t_permittivity_K:.0f} K: the polar order is lost at this "
                              "transition", "strong", f.measurement_id, *tr.measurement_ids))
            else:
                seen = [n for n, v in (("Pr -> 0", tr.t_pr_zero_K), ("the permittivity peak", tr.t_permittivity_K),
                                       ("DSC", tr.t_heating_K)) if v is not None]
                out.append(_c(f"SHG vanishes at {tv:.0f} K, at the transition seen by {', '.join(seen)}", "supports",
                              f.measurement_id, *tr.measurement_ids))
    return out


def identify(model: PhaseModel, facts: Sequence[Fact]) -> PhaseIdentification:
    """Each phase of ``model`` with its identity, criteria and conflicts (see the module notes)."""
    phases = []
    for lo, hi in _intervals(model, facts):
        inside = [f for f in facts if _inside(f.t_K, lo, hi)]
        phases.append(_identify_one(model, lo, hi, inside))
    return PhaseIdentification(tuple(phases), tuple(vanishing_together(model, facts)))
