"""Phase-identification evidence in the compound verdict: SHG, powder patterns and columnar lattices.

:mod:`server.analysis.verdict` decides from polarity and switching; this module adds what the phase
identification kinds say about *which* phase switched, as criteria (met / unmet / untested) and as conflicts:

* **SHG** (``shg``) shows the absence of an inversion centre, not polarity (R. W. Boyd, *Nonlinear Optics*,
  3rd ed. 2008, ch. 1.5; of the 21 non-centrosymmetric classes only 10 are polar, International Tables
  Vol. A). An active signal in the phase of the claim meets the criterion "second polarity test (SHG)" (a
  necessary condition); a silent one leaves it unmet and contradicts a polar claim there (switching, or a
  polar structure, at that temperature): a conflict. An active signal in the phase of a centrosymmetric
  structure is a conflict too. SHG that vanishes where Pr vanishes meets "SHG vanishes where Pr vanishes"
  (Lines and Glass 1977, ch. 1: the polar point group is lost at a ferroelectric Tc).
* **PXRD** (``pxrd``): a pattern in the phase of the claim that matches the polar structure claimed for it
  meets "sample is the phase of the structure (PXRD)"; one that matches another structure, shows an extra
  phase, or matches none leaves it unmet, and a mismatch against a claimed polar structure is a conflict
  (a polymorph or solvate in the bulk: Pecharsky and Zavalij, *Fundamentals of Powder Diffraction*, 2nd ed.
  2009). Pattern changes of a temperature run are phase boundaries in the phase model itself
  (:func:`server.analysis.phases.build`).
* **X-ray scattering** (``saxs``): a columnar or lamellar lattice marks a mesophase at its temperature
  (hexagonal d-spacings 1 : 1/sqrt3 : 1/2 : 1/sqrt7, common practice). In the phase of the switching it
  meets "switching phase identified by X-ray scattering"; a crystal structure counted as that same phase
  is then a conflict (a crystal -> mesophase transition no scan resolved). The criterion is listed only
  where a mesophase is possible: some scattering was measured, or a chain-melting transition is known.

"The phase of the claim" is the phase of the switching measurements or, without switching, of the polar
structures. Two temperatures are one phase only as :func:`server.analysis.phases.continuity` shows it
(scanned, no transition between), or when they lie within :data:`server.analysis.phases.SAME_TEMPERATURE_K`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Optional, Sequence

from .phases import SAME_TEMPERATURE_K, PhaseModel, continuity
from .saxs import STACKING_WINDOW_A

SHG = "second polarity test (SHG)"
SHG_VANISH = "SHG vanishes where Pr vanishes"
PXRD = "sample is the phase of the structure (PXRD)"
SAXS = "switching phase identified by X-ray scattering"
_NO_LATTICE = (None, "", "undetermined", "none")


@dataclass(frozen=True)
class Finding:
    """A criterion (``state``) or a conflict (``message``, ``suggestion``) for the verdict to wrap."""

    name: str
    state: str = ""
    measurements: tuple[int, ...] = ()
    message: str = ""
    suggestion: str = ""


def _same(model: PhaseModel, t1: Optional[float], t2: Optional[float]) -> bool:
    if t1 is None or t2 is None:
        return False
    return abs(t1 - t2) <= SAME_TEMPERATURE_K or continuity(model, t1, t2).same is True


def shg_points(evidence: Sequence[Any]) -> list[tuple[int, float, bool]]:
    """(measurement id, T_K, active) of every SHG point (a run gives one per row)."""
    out = []
    for ev in evidence:
        if ev.kind != "shg":
            continue
        for p in ev.details.get("points") or []:
            if p.get("T_K") is not None:
                out.append((ev.measurement_id, float(p["T_K"]), bool(p.get("active"))))
    return out


def _ids(*groups) -> tuple[int, ...]:  # noqa: ANN002
    return tuple(sorted({i for g in groups for i in g}))


def _t(t: Optional[float]) -> str:
    return f"{t:.0f} K" if t is not None else "an unrecorded temperature"


def findings(model: PhaseModel, evidence: Sequence[Any], *, switching: Sequence[Any], polar: Sequence[Any],
             structures: Sequence[Any]) -> tuple[list[Finding], list[Finding]]:
    """Criteria and conflicts from SHG, PXRD and X-ray scattering (module notes). ``switching``, ``polar`` and
    ``structures`` are the verdict's Evidence lists (saturated loops and PUND; polar CIFs; all CIFs)."""
    claims = [s for s in switching if s.temperature_K is not None] or [p for p in polar if p.temperature_K is not None]
    crit: list[Finding] = []
    conf: list[Finding] = []
    _shg(model, evidence, claims, switching, structures, crit, conf)
    _pxrd(model, evidence, claims, switching, polar, structures, crit, conf)
    _saxs(model, evidence, switching, structures, crit, conf)
    return crit, conf


def _shg(model, evidence, claims, switching, structures, crit, conf) -> None:  # noqa: ANN001
    pts = shg_points(evidence)
    near = [(m, t, a) for m, t, a in pts if any(_same(model, t, c.temperature_K) for c in claims)]
    active = [p for p in near if p[2]]
    silent = [p for p in near if not p[2]]
    if active:
        crit.append(Finding(SHG, "met", _ids([m for m, _, _ in active])))
    elif silent:
        crit.append(Finding(SHG, "unmet", _ids([m for m, _, _ in silent])))
    else:
        crit.append(Finding(SHG, "untested", _ids({m for m, _, _ in pts})))
    for s in switching:
        quiet = [p for p in pts if not p[2] and _same(model, p[1], s.temperature_K)]
        loud = [p for p in pts if p[2] and _same(model, p[1], s.temperature_K)]
        if quiet and not loud:
            conf.append(Finding(SHG, measurements=_ids([s.measurement_id], [m for m, _, _ in quiet]),
                                message=f"SHG is silent at {_t(quiet[0][1])} (measurement {quiet[0][0]}) but measurement "
                                        f"{s.measurement_id} switches at {_t(s.temperature_K)} in the same phase; a "
                                        "polar phase has no inversion centre and must give SHG",
                                suggestion="a signal below the detection limit (weak chi(2), poor phase matching), "
                                           "switching from leakage or loss, or a different sample"))
    for st in structures:
        same = [p for p in pts if _same(model, p[1], st.temperature_K)]
        quiet = [p for p in same if not p[2]]
        loud = [p for p in same if p[2]]
        sg = st.details.get("space_group") or st.verdict
        if st.verdict in ("polar", "non_polar_acentric") and quiet and not loud:
            conf.append(Finding(SHG, measurements=_ids([st.measurement_id], [m for m, _, _ in quiet]),
                                message=f"SHG is silent at {_t(quiet[0][1])} (measurement {quiet[0][0]}) but the "
                                        f"structure {sg} (measurement {st.measurement_id}) at {_t(st.temperature_K)}, "
                                        "in the same phase, has no inversion centre",
                                suggestion="a signal below the detection limit, a missed inversion centre in the "
                                           "structure, or another phase in the powder"))
        if st.verdict == "centrosymmetric" and loud:
            conf.append(Finding(SHG, measurements=_ids([st.measurement_id], [m for m, _, _ in loud]),
                                message=f"SHG is active at {_t(loud[0][1])} (measurement {loud[0][0]}) but the "
                                        f"centrosymmetric structure {sg} (measurement {st.measurement_id}) is in "
                                        "the same phase",
                                suggestion="a non-centrosymmetric impurity or surface SHG, or a missed "
                                           "non-centrosymmetric subgroup"))
    vanish = [(ev.measurement_id, float(ev.details["t_vanish_K"]), float(ev.details.get("t_vanish_resolution_K") or 0))
              for ev in evidence if ev.kind == "shg" and ev.details.get("t_vanish_K") is not None]
    prz = model.pr_vanishing
    if vanish and prz is not None:
        ok = [v for v in vanish if abs(v[1] - prz.t_K) <= max(SAME_TEMPERATURE_K, v[2] + prz.err_K)]
        crit.append(Finding(SHG_VANISH, "met" if ok else "unmet",
                            _ids([m for m, _, _ in (ok or vanish)], prz.measurement_ids)))
    else:
        crit.append(Finding(SHG_VANISH, "untested", _ids([m for m, _, _ in vanish])))


def _pxrd(model, evidence, claims, switching, polar, structures, crit, conf) -> None:  # noqa: ANN001
    pats = [ev for ev in evidence if ev.kind == "pxrd" and ev.verdict in ("matches", "extra_phase", "no_match")]
    near = [p for p in pats if any(_same(model, p.temperature_K, c.temperature_K) for c in claims)]
    claimed = {st.measurement_id for st in polar
               if any(_same(model, st.temperature_K, c.temperature_K) for c in claims)}
    good = [p for p in near if p.verdict == "matches" and p.details.get("reference") in claimed]
    bad = [p for p in near if p not in good]
    if good and not bad:
        crit.append(Finding(PXRD, "met", _ids([p.measurement_id for p in good], claimed)))
    elif near:
        crit.append(Finding(PXRD, "unmet", _ids([p.measurement_id for p in near])))
    else:
        crit.append(Finding(PXRD, "untested", _ids([p.measurement_id for p in pats])))
    if not claimed:
        return
    by_id = {st.measurement_id: st for st in structures}
    for p in bad:
        ref = p.details.get("reference")
        if p.verdict == "no_match":
            what = "matches none of the registered structures"
        elif p.verdict == "extra_phase":
            what = f"shows {p.details.get('reference_label') or 'a structure'} plus another phase"
        else:
            other = by_id.get(ref)
            what = f"matches {p.details.get('reference_label') or f'structure {ref}'}" + (
                f" ({other.verdict})" if other is not None else "")
        conf.append(Finding(PXRD, measurements=_ids([p.measurement_id], claimed),
                            message=f"the polar structure (measurement {min(claimed)}) is taken as the phase of the "
                                    f"claim, but the powder pattern at {_t(p.temperature_K)} (measurement "
                                    f"{p.measurement_id}), in that phase, {what}",
                            suggestion="a polymorph or solvate in the bulk sample, or a CIF of another "
                                       "crystallisation; a pattern of the switched pellet would settle it"))


def _saxs(model, evidence, switching, structures, crit, conf) -> None:  # noqa: ANN001
    scat = [ev for ev in evidence if ev.kind == "saxs"]
    if not scat and not any(t.transition_class == "chain_melting" for t in model.transitions):
        return
    lat = [ev for ev in scat if ev.details.get("lattice") not in _NO_LATTICE]
    near = [ev for ev in scat if any(_same(model, ev.temperature_K, s.temperature_K) for s in switching)]
    near_lat = [ev for ev in near if ev in lat]
    if near_lat:
        crit.append(Finding(SAXS, "met", _ids([e.measurement_id for e in near_lat],
                                              [s.measurement_id for s in switching])))
    elif near:
        crit.append(Finding(SAXS, "unmet", _ids([e.measurement_id for e in near])))
    else:
        crit.append(Finding(SAXS, "untested", _ids([e.measurement_id for e in scat])))
    seen: set[tuple[int, int]] = set()
    for ev in near_lat:
        for s in switching:
            if not _same(model, ev.temperature_K, s.temperature_K):
                continue
            for st in structures:
                if (st.measurement_id, ev.measurement_id) in seen or not _same(model, s.temperature_K, st.temperature_K):
                    continue
                seen.add((st.measurement_id, ev.measurement_id))
                conf.append(Finding(SAXS, measurements=_ids([ev.measurement_id, s.measurement_id, st.measurement_id]),
                                    message=f"X-ray scattering (measurement {ev.measurement_id}) shows a "
                                            f"{ev.details.get('lattice')} mesophase at {_t(ev.temperature_K)}, where "
                                            f"measurement {s.measurement_id} switches, but the crystal structure "
                                            f"(measurement {st.measurement_id}) at {_t(st.temperature_K)} is counted "
                                            "as the same phase",
                                    suggestion="a crystal -> mesophase transition between the two temperatures that "
                                               "no scan resolved; a DSC scan across them would place it"))


def mesophase_notes(model: PhaseModel, evidence: Sequence[Any], switching: Sequence[Any]) -> list[str]:
    """Sentences naming each mesophase the scattering shows, with its temperatures and lattice, and whether the
    switching falls in it (a hexagonal columnar phase with pi-stacking there is strong evidence of the phase
    switched; its polarity is not shown by the lattice)."""
    out = []
    for ev in evidence:
        lat = ev.details.get("lattice") if ev.kind == "saxs" else None
        if lat in _NO_LATTICE:
            continue
        a, st = ev.details.get("a_nm"), ev.details.get("stacking_A")
        text = f"X-ray scattering (measurement {ev.measurement_id}) shows a {lat} " + (
            "lamellar phase" if lat == "lamellar" else "columnar mesophase") + f" at {_t(ev.temperature_K)}"
        text += (f" (a = {a:.2f} nm" + (f", π-stacking {st:.2f} Å" if st else "") + ")") if a else ""
        sw = [s for s in switching if _same(model, ev.temperature_K, s.temperature_K)]
        if sw:
            strong = lat == "hexagonal" and st and STACKING_WINDOW_A[0] <= st <= STACKING_WINDOW_A[1]
            text += (f"; the switching at {_t(sw[0].temperature_K)} is in this phase" +
                     (" (strong evidence of the phase switched" if strong else " (") +
                     "; the lattice does not show its polarity)")
        out.append(text)
    return out
