"""The phase model of one compound: transitions from all evidence, classed, and the phases between them.

A phase transition shows in several measurements at once: a DSC peak on heating and its partner on
cooling (a first-order transition shows thermal hysteresis, the cooling peak below the heating one;
Lines and Glass, *Principles and Applications of Ferroelectrics and Related Materials*, OUP 1977,
ch. 1 and 4), a permittivity maximum that does **not** move with frequency (a maximum that moves is
relaxor-like dispersion, not a transition; L. E. Cross, Ferroelectrics 76, 241 (1987)), and the
temperature where the remanent polarisation of a loop series vanishes (Pr -> 0 at Tc; Lines and
Glass ch. 1).

The temperature axis is then cut at every transition, melting included, into phases. Each piece
records whether some measurement actually scanned it (a DSC segment, a permittivity run, or a loop
series with steps of at most :data:`SERIES_STEP_MAX_K`) or whether the phase there is only inferred.
Two temperatures are the same phase only when everything between them was scanned and no transition
lies between them (:func:`continuity`).

Transition classes (the rule is stated with each transition), from the heating-peak entropy
``|dS|`` (J mol-1 K-1) and the number of chain CH2 groups of the compound:

* ``decomposition``: a heating peak with no cooling partner although a cooling scan covered its
  temperature, and exothermic on heating or above an isotropisation (irreversible);
* ``chain_melting``: chain melting or crystal -> mesophase: ``|dS|`` at most :data:`MELTING_DS_J_MOLK`
  and, per chain CH2, within
  :data:`CHAIN_MELTING_DS_PER_CH2_J_MOLK` (common practice: the fusion entropy of polyethylene,
  about 9.9 J mol-1 K-1 per CH2, B. Wunderlich, *Macromolecular Physics* Vol. 3, Academic Press 1980,
  is the upper end; partial chain melting in columnar mesogens gives about half; values from memory),
  or ``|dS|`` above :data:`MELTING_DS_J_MOLK` below a later reversible transition;
* ``isotropisation``: the highest reversible transition above a chain-melting one, or a peak with
  ``|dS|`` above :data:`MELTING_DS_J_MOLK` (melting to the isotropic liquid; Walden's rule puts the
  fusion entropy of rigid organic molecules near 56 J mol-1 K-1, P. Walden, Z. Elektrochem. 14, 713
  (1908), from memory);
* ``solid_solid``: anything else with an entropy (order-disorder transitions of a few orientations
  have R ln 2 to R ln 12, 6-21 J mol-1 K-1);
* ``unclassified``: no entropy known (permittivity or Pr -> 0 only).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

from server.analysis.results import Result

#: Two events within this many kelvin are one temperature (common practice: the thermometry of a
#: DSC pan and of a dielectric or P-E stage differ by a few kelvin).
SAME_TEMPERATURE_K = 5.0
#: A cooling peak this far below its heating partner still pairs with it (thermal hysteresis of
#: first-order molecular transitions is a few to some tens of kelvin; common practice, from memory).
PAIR_MAX_HYSTERESIS_K = 30.0
#: Above this |dS| (J mol-1 K-1) a peak is melting of the whole molecule (common practice; Walden's rule).
MELTING_DS_J_MOLK = 40.0
#: |dS| per chain CH2 (J mol-1 K-1) read as chain melting (common practice, from memory; see module notes).
CHAIN_MELTING_DS_PER_CH2_J_MOLK = (3.0, 10.0)
#: Loops of a series at most this far apart scan the interval between them (our rule: a
#: transition narrower than this step could hide between two loops).
SERIES_STEP_MAX_K = 20.0

TRANSITION_CLASSES = ("solid_solid", "chain_melting", "isotropisation", "decomposition", "unclassified")
CLASS_LABELS = {
    "solid_solid": "solid-solid",
    "chain_melting": "chain melting / crystal -> mesophase",
    "isotropisation": "isotropisation",
    "decomposition": "decomposition",
    "unclassified": "unclassified",
}


@dataclass(frozen=True)
class ThermalPeak:
    """One DSC peak as the phase model needs it; ``scan`` is ``"heating"`` or ``"cooling"``."""

    measurement_id: int
    t_peak_K: float
    scan: str
    endothermic: bool
    onset_K: float | None = None
    ds_J_molK: float | None = None


@dataclass(frozen=True)
class Scan:
    """A temperature range some measurement covered continuously."""

    measurement_id: int
    kind: str  # "dsc" | "dielectric" | "series"
    t_from_K: float
    t_to_K: float
    scan: str = ""  # DSC: "heating" | "cooling"


@dataclass(frozen=True)
class PermittivityMaximum:
    """The permittivity maximum of one run; ``dispersive`` when it moves with frequency."""

    measurement_id: int
    t_peak_K: float
    dispersive: bool


@dataclass(frozen=True)
class LoopPoint:
    """One loop of a compound: temperature, whether it switches (saturated remanent), Pr and Emax."""

    measurement_id: int
    t_K: float
    switching: bool
    pr_uC_cm2: float | None = None


@dataclass(frozen=True)
class PrVanishing(Result):
    """Where Pr(T) goes to zero, bracketed by the last switching and the first non-switching loop."""

    t_K: float
    err_K: float
    measurement_ids: tuple[int, ...]
    #: "bracket" (two loops either side, :func:`pr_vanishing`) or "series fit" (Tc of Pr(T) fits)
    basis: str = "bracket"


@dataclass(frozen=True)
class PhaseTransition(Result):
    """One physical transition, with every observation of it."""

    t_K: float  # heating peak where DSC saw it, else the permittivity peak, else Pr -> 0
    t_heating_K: float | None
    t_cooling_K: float | None
    hysteresis_K: float | None
    onset_K: float | None
    t_permittivity_K: float | None
    t_pr_zero_K: float | None
    ds_J_molK: float | None
    ds_per_ch2_J_molK: float | None
    transition_class: str
    rule: str
    sources: tuple[str, ...]
    measurement_ids: tuple[int, ...]
    #: midpoint of the two patterns of a PXRD run between which the pattern changed (None: no PXRD change)
    t_pattern_change_K: float | None = None

    def label(self) -> str:
        names = {"dsc": "DSC", "dielectric": "permittivity", "series": "Pr -> 0", "pxrd": "PXRD pattern change",
                 "shg": "SHG vanishes"}
        text = f"{self.t_K:.0f} K ({', '.join(names.get(s, s) for s in self.sources)}"
        if self.hysteresis_K is not None:
            text += f", cooling {self.t_cooling_K:.0f} K, hysteresis {self.hysteresis_K:.0f} K"
        return text + f"; {CLASS_LABELS[self.transition_class]})"


@dataclass(frozen=True)
class Phase(Result):
    """A piece of the temperature axis between transitions (and scan edges): scanned or inferred."""

    t_from_K: float
    t_to_K: float
    scanned: bool
    identified_by: tuple[int, ...]


@dataclass(frozen=True)
class PhaseModel(Result):
    transitions: tuple[PhaseTransition, ...]
    phases: tuple[Phase, ...]
    scans: tuple[Scan, ...] = field(default=(), repr=False)
    relaxor_maxima_K: tuple[float, ...] = ()
    pr_vanishing: PrVanishing | None = None

    JSON_OMIT = ("scans",)


@dataclass(frozen=True)
class Continuity:
    """Whether two temperatures are shown to be the same phase; ``gap`` names what is missing."""

    same: bool | None  # True: shown; False: a transition lies between; None: not shown
    between: tuple[PhaseTransition, ...] = ()
    gap_K: tuple[float, float] | None = None

    def text(self) -> str:
        if self.gap_K is None:
            return ""
        lo, hi = self.gap_K
        return (f"phase continuity not shown between {lo:.0f} K and {hi:.0f} K: a DSC or permittivity scan "
                f"from {lo:.0f} K to {hi:.0f} K would close the gap")


# ----------------------------------------------------------------------------- Pr -> 0


def pr_vanishing(loops: Sequence[LoopPoint]) -> PrVanishing | None:
    """Pr(T) -> 0 from a compound's loops: between the warmest switching loop and the next loop above it
    that does not switch, when they are at most :data:`SERIES_STEP_MAX_K` apart (midpoint, half the step
    as the uncertainty). None when no such bracket exists.

    This is the one place a series fit (Pr(T) of one sample) can later feed; the bracket only uses the
    fact that Pr is finite below Tc and zero above it (Lines and Glass 1977, ch. 1).
    """
    pts = sorted(loops, key=lambda p: p.t_K)
    switching = [p for p in pts if p.switching]
    if not switching:
        return None
    last = switching[-1]
    above = [p for p in pts if p.t_K > last.t_K and not p.switching]
    if not above or above[0].t_K - last.t_K > SERIES_STEP_MAX_K:
        return None
    nxt = above[0]
    return PrVanishing(t_K=(last.t_K + nxt.t_K) / 2.0, err_K=(nxt.t_K - last.t_K) / 2.0,
                       measurement_ids=(last.measurement_id, nxt.measurement_id))


def series_scans(loops: Sequence[LoopPoint]) -> list[Scan]:
    """Consecutive loops at most :data:`SERIES_STEP_MAX_K` apart scan the interval between them."""
    pts = sorted(loops, key=lambda p: p.t_K)
    out = []
    for a, b in zip(pts, pts[1:]):
        if 0 < b.t_K - a.t_K <= SERIES_STEP_MAX_K:
            out.append(Scan(b.measurement_id, "series", a.t_K, b.t_K))
    return out


# ----------------------------------------------------------------------------- DSC pairing


def pair_dsc(peaks: Sequence[ThermalPeak]) -> list[tuple[list[ThermalPeak] | None, list[ThermalPeak] | None]]:
    """Heating peaks merged within SAME_TEMPERATURE_K, each group paired with the nearest unpaired cooling group
    of the opposite heat sign at most PAIR_MAX_HYSTERESIS_K below it (or up to SAME_TEMPERATURE_K above).

    Returns ``(heating group, cooling group)`` pairs, either side None where a peak has no partner; the phase
    model (:func:`build`) and the DSC measurement page's transitions table (``server/kinds/dsc.py``) both pair
    through here, so they never disagree on which cooling peak is whose."""
    heating = sorted((p for p in peaks if p.scan == "heating"), key=lambda p: p.t_peak_K)
    cooling = sorted((p for p in peaks if p.scan != "heating"), key=lambda p: p.t_peak_K)
    groups: list[list[ThermalPeak]] = []
    for p in heating:
        if groups and p.t_peak_K - groups[-1][-1].t_peak_K <= SAME_TEMPERATURE_K:
            groups[-1].append(p)
        else:
            groups.append([p])
    cgroups: list[list[ThermalPeak]] = []
    for p in cooling:
        if cgroups and p.t_peak_K - cgroups[-1][-1].t_peak_K <= SAME_TEMPERATURE_K:
            cgroups[-1].append(p)
        else:
            cgroups.append([p])
    used: set[int] = set()
    pairs: list[tuple[list[ThermalPeak] | None, list[ThermalPeak] | None]] = []
    # pair from the top down so that each heating peak takes the nearest cooling peak below it
    for g in sorted(groups, key=lambda g: -g[0].t_peak_K):
        th = _mean(p.t_peak_K for p in g)
        best = None
        for i, c in enumerate(cgroups):
            tc = _mean(p.t_peak_K for p in c)
            if i in used or c[0].endothermic == g[0].endothermic:
                continue
            if -SAME_TEMPERATURE_K <= th - tc <= PAIR_MAX_HYSTERESIS_K and (
                    best is None or abs(th - tc) < abs(th - _mean(p.t_peak_K for p in cgroups[best]))):
                best = i
        if best is not None:
            used.add(best)
        pairs.append((g, cgroups[best] if best is not None else None))
    pairs += [(None, c) for i, c in enumerate(cgroups) if i not in used]
    return pairs  # type: ignore[return-value]


def _mean(values) -> float:  # noqa: ANN001
    v = list(values)
    return sum(v) / len(v)


def _covered(scans: Sequence[Scan], lo: float, hi: float, kinds: tuple[str, ...] | None = None,
             scan: str | None = None) -> bool:
    """True when the union of the scans covers [lo, hi] (within 0.5 K)."""
    ranges = sorted((min(s.t_from_K, s.t_to_K), max(s.t_from_K, s.t_to_K)) for s in scans
                    if (kinds is None or s.kind in kinds) and (scan is None or s.scan == scan))
    reach = lo
    for a, b in ranges:
        if a > reach + 0.5:
            break
        reach = max(reach, b)
        if reach >= hi - 0.5:
            return True
    return reach >= hi - 0.5


# ----------------------------------------------------------------------------- the model


@dataclass(frozen=True)
class ShgVanishing:
    """Where an SHG run's signal vanishes on heating (:mod:`server.analysis.shg`): between the last active
    and the first silent point, ``t_K`` ± ``resolution_K`` (half the step)."""

    measurement_id: int
    t_K: float
    resolution_K: float = 0.0


def build(
    *,
    dsc_peaks: Sequence[ThermalPeak] = (),
    scans: Sequence[Scan] = (),
    permittivity: Sequence[PermittivityMaximum] = (),
    loops: Sequence[LoopPoint] = (),
    point_temperatures: Mapping[int, float] | None = None,
    chain_ch2: int | None = None,
    series_tc: PrVanishing | None = None,
    pattern_changes: Sequence[Any] = (),
    shg_vanishing: Sequence[ShgVanishing] = (),
) -> PhaseModel:
    """Transitions from all evidence, classed, and the phases between them.

    Parameters
    ----------
    dsc_peaks : every DSC peak of the compound (heating and cooling, all files).
    scans : the temperature ranges DSC segments and permittivity runs covered.
    permittivity : the permittivity maximum of each dielectric run.
    loops : the compound's P-E loops (temperature, switching or not).
    point_temperatures : measurement id -> temperature of single-temperature evidence (structures,
        loops, PUND), so that each phase names the measurements inside it.
    chain_ch2 : number of CH2 groups in all side chains (None when unknown).
    series_tc : the Curie temperature fitted to the compound's Pr(T) series (power law
        Pr = A (Tc - T)^beta, :mod:`server.analysis.series`), with its standard error and the
        measurements of the series. It takes the place of the bracket of :func:`pr_vanishing`: a fit
        over a whole series says more than the two loops either side of Tc.
    pattern_changes : where the powder pattern of a variable-temperature run changes
        (:func:`server.analysis.pxrd.pattern_changes`, objects with ``t_below_K``, ``t_above_K``, ``t_K``,
        ``scan`` and ``measurement_ids``). A changed pattern is a changed structure, so each is a phase
        boundary (Pecharsky and Zavalij 2009, ch. 2: the pattern is the fingerprint of the crystal phase).
        It joins another observation of the same transition when that lies inside the bracket of the two
        patterns (widened by :data:`SAME_TEMPERATURE_K`, and on cooling by the thermal hysteresis
        :data:`PAIR_MAX_HYSTERESIS_K` below a heating temperature); else it is a transition of its own at
        the midpoint. The steps of a run where nothing changed come in ``scans`` (kind ``"pxrd"``,
        :func:`pattern_scans`).
    shg_vanishing : where an SHG signal vanishes on heating. Second-harmonic generation needs a
        non-centrosymmetric structure, so a signal lost on heating marks the loss of the acentric (polar)
        phase, a phase boundary (Kurtz and Perry, J. Appl. Phys. 39, 3798 (1968); Dougherty and Kurtz,
        J. Appl. Cryst. 9, 145 (1976), SHG as a probe of ferroelectric transitions). It joins another
        observation within :data:`SAME_TEMPERATURE_K` or the run's step, else stands as a transition of its own.
    """
    all_scans = list(scans) + series_scans(loops)
    prz = series_tc if series_tc is not None else pr_vanishing(loops)

    # 1. DSC: heating/cooling pairs
    raw: list[dict[str, Any]] = []
    for heat, cool in pair_dsc(dsc_peaks):
        main = heat or cool
        th = _mean(p.t_peak_K for p in heat) if heat else None
        tc = _mean(p.t_peak_K for p in cool) if cool else None
        ds_vals = [abs(p.ds_J_molK) for p in main if p.ds_J_molK is not None]
        onsets = [p.onset_K for p in (heat or []) if p.onset_K is not None]
        ids = {p.measurement_id for p in (heat or []) + (cool or [])}
        raw.append(dict(t=th if th is not None else tc, th=th, tc=tc, onset=_mean(onsets) if onsets else None,
                        ds=_mean(ds_vals) if ds_vals else None, exo_on_heating=bool(heat) and not heat[0].endothermic,
                        reversible=bool(heat) and bool(cool),
                        cooling_covered=bool(heat) and _covered(all_scans, th - PAIR_MAX_HYSTERESIS_K, th,
                                                                ("dsc",), "cooling"),
                        sources={"dsc"}, ids=ids, eps=None, prz=None))

    # 2. permittivity maxima that do not move with frequency; dispersive ones are relaxor-like, not transitions
    relaxor = tuple(sorted(m.t_peak_K for m in permittivity if m.dispersive))
    for m in permittivity:
        if m.dispersive:
            continue
        _attach(raw, m.t_peak_K, "dielectric", m.measurement_id, "eps")
    # 3. Pr -> 0
    if prz is not None:
        _attach(raw, prz.t_K, "series", prz.measurement_ids[-1], "prz", tol=max(SAME_TEMPERATURE_K, prz.err_K))
        for e in raw:
            if e.get("prz") is not None:
                e["ids"].update(prz.measurement_ids)

    # 4. SHG lost on heating: the acentric phase ends there
    for v in shg_vanishing:
        _attach(raw, v.t_K, "shg", v.measurement_id, "shg", tol=max(SAME_TEMPERATURE_K, v.resolution_K))

    # 5. powder-pattern changes: heating runs first, so a cooling change can join its heating partner
    for ch in sorted(pattern_changes, key=lambda c: (c.scan == "cooling", c.t_K)):
        _attach_pattern_change(raw, ch)

    raw.sort(key=lambda e: e["t"])
    transitions = _classify(raw, chain_ch2)
    phases = _phases(transitions, all_scans, point_temperatures or {})
    return PhaseModel(transitions=tuple(transitions), phases=tuple(phases), scans=tuple(all_scans),
                      relaxor_maxima_K=relaxor, pr_vanishing=prz)


def pattern_scans(run: Sequence[tuple[int, float]], changes: Sequence[Any], scan: str = "") -> list[Scan]:
    """The steps of one PXRD run, ``(measurement id, t_K)`` in any order, between which the pattern did not
    change and which are at most :data:`SERIES_STEP_MAX_K` apart: a structural transition would have changed
    the pattern there (our rule, as for a loop series)."""
    pts = sorted(run, key=lambda p: p[1])
    changed = {tuple(sorted(c.measurement_ids)) for c in changes}
    return [Scan(b[0], "pxrd", a[1], b[1], scan) for a, b in zip(pts, pts[1:])
            if 0 < b[1] - a[1] <= SERIES_STEP_MAX_K and tuple(sorted((a[0], b[0]))) not in changed]


def _attach_pattern_change(raw: list[dict[str, Any]], ch: Any) -> None:
    lo, hi = sorted((ch.t_below_K, ch.t_above_K))
    ids = set(ch.measurement_ids)
    for e in raw:
        temps = [x for x in (e["th"], e["eps"], e["prz"], e.get("xrd"), e.get("shg")) if x is not None]
        inside = any(lo - SAME_TEMPERATURE_K <= x <= hi + SAME_TEMPERATURE_K for x in temps)
        if ch.scan == "cooling" and not inside:
            inside = (e["tc"] is not None and lo - SAME_TEMPERATURE_K <= e["tc"] <= hi + SAME_TEMPERATURE_K) or any(
                lo - SAME_TEMPERATURE_K <= x <= hi + PAIR_MAX_HYSTERESIS_K for x in temps)
        if inside:
            e["sources"].add("pxrd")
            e["ids"].update(ids)
            if ch.scan == "cooling":
                e["xrd_cool"] = e.get("xrd_cool") or ch.t_K
            else:
                e["xrd"] = e.get("xrd") or ch.t_K
            return
    entry = dict(t=ch.t_K, th=None, tc=None, onset=None, ds=None, exo_on_heating=False, reversible=False,
                 cooling_covered=False, sources={"pxrd"}, ids=ids, eps=None, prz=None)
    entry["xrd_cool" if ch.scan == "cooling" else "xrd"] = ch.t_K
    raw.append(entry)


def _attach(raw: list[dict[str, Any]], t: float, source: str, mid: int, key: str, tol: float = SAME_TEMPERATURE_K):
    for e in raw:
        temps = [x for x in (e["th"], e["tc"], e["eps"], e["prz"], e.get("shg")) if x is not None]
        if any(abs(t - x) <= tol for x in temps):
            e["sources"].add(source)
            e["ids"].add(mid)
            if e.get(key) is None:
                e[key] = t
            return
    entry = dict(t=t, th=None, tc=None, onset=None, ds=None, exo_on_heating=False, reversible=False,
                 cooling_covered=False, sources={source}, ids={mid}, eps=None, prz=None)
    entry[key] = t
    raw.append(entry)


def _classify(raw: list[dict[str, Any]], chain_ch2: int | None) -> list[PhaseTransition]:
    lo_ch2, hi_ch2 = CHAIN_MELTING_DS_PER_CH2_J_MOLK
    classes: list[tuple[str, str]] = []
    for e in raw:
        ds = e["ds"]
        per = ds / chain_ch2 if (ds is not None and chain_ch2) else None
        if e["th"] is not None and not e["reversible"] and e["cooling_covered"] and (
                e["exo_on_heating"] or any(c == "isotropisation" for c, _ in classes)):
            classes.append(("decomposition", "heating peak without a cooling partner although a cooling scan "
                            "covered it, exothermic on heating or above the isotropisation: irreversible"))
        elif ds is None:
            classes.append(("unclassified", "no DSC entropy: seen by " + ", ".join(sorted(e["sources"]))))
        elif ds > MELTING_DS_J_MOLK:
            classes.append(("isotropisation", f"|dS| = {ds:.1f} J/(mol K) above {MELTING_DS_J_MOLK:g}: melting "
                            "(common practice, Walden's rule)"))
        elif per is not None and lo_ch2 <= per <= hi_ch2:
            classes.append(("chain_melting", f"|dS| = {ds:.1f} J/(mol K) is {per:.1f} J/(mol K) per chain CH2, "
                            f"within {lo_ch2:g}-{hi_ch2:g} (chain melting, common practice)"))
        elif any(c == "chain_melting" for c, _ in classes) and e["reversible"]:
            classes.append(("isotropisation", f"reversible peak (|dS| = {ds:.1f} J/(mol K)) above a chain-melting "
                            "transition: clearing of the mesophase"))
        else:
            classes.append(("solid_solid", f"|dS| = {ds:.1f} J/(mol K), at most {MELTING_DS_J_MOLK:g} and not in "
                            "the chain-melting range per CH2"))
    # a melting-sized peak below a later reversible transition is crystal -> mesophase, not isotropisation
    for i, (c, _) in enumerate(classes):
        if c == "isotropisation" and raw[i]["ds"] is not None and raw[i]["ds"] > MELTING_DS_J_MOLK and any(
                raw[j]["reversible"] and classes[j][0] != "decomposition" for j in range(i + 1, len(raw))):
            classes[i] = ("chain_melting", f"|dS| = {raw[i]['ds']:.1f} J/(mol K) with a reversible transition "
                          "above it: crystal -> mesophase, not isotropisation")
            for j in range(i + 1, len(raw)):
                if raw[j]["reversible"] and classes[j][0] == "solid_solid":
                    classes[j] = ("isotropisation", "reversible peak above a crystal -> mesophase transition: "
                                  "clearing of the mesophase")
    out = []
    for e, (cls, rule) in zip(raw, classes):
        ds = e["ds"]
        out.append(PhaseTransition(
            t_K=e["t"] if e["th"] is None else e["th"], t_heating_K=e["th"], t_cooling_K=e["tc"],
            hysteresis_K=(e["th"] - e["tc"]) if (e["th"] is not None and e["tc"] is not None) else None,
            onset_K=e["onset"], t_permittivity_K=e["eps"], t_pr_zero_K=e["prz"], ds_J_molK=ds,
            ds_per_ch2_J_molK=(ds / chain_ch2) if (ds is not None and chain_ch2) else None,
            transition_class=cls, rule=rule,
            sources=tuple(s for s in ("dsc", "dielectric", "series", "pxrd", "shg") if s in e["sources"]),
            measurement_ids=tuple(sorted(e["ids"])), t_pattern_change_K=e.get("xrd") or e.get("xrd_cool")))
    return out


def _phases(transitions: Sequence[PhaseTransition], scans: Sequence[Scan],
            points: Mapping[int, float]) -> list[Phase]:
    """Cut the axis (from the lowest to the highest temperature any evidence speaks for) at every
    transition and every scan edge; each piece is scanned or not, and names its measurements."""
    temps = [t for s in scans for t in (s.t_from_K, s.t_to_K)] + list(points.values()) + [
        tr.t_K for tr in transitions]
    if not temps:
        return []
    cuts = sorted({round(t, 3) for t in temps})
    out: list[Phase] = []
    for a, b in zip(cuts, cuts[1:]):
        scanning = tuple(sorted({s.measurement_id for s in scans
                                 if min(s.t_from_K, s.t_to_K) <= a + 0.5 and max(s.t_from_K, s.t_to_K) >= b - 0.5}))
        inside = tuple(sorted(mid for mid, t in points.items() if a <= t <= b))
        piece = Phase(a, b, bool(scanning), tuple(sorted(set(scanning) | set(inside))))
        # merge with the previous piece when nothing separates them (no transition at the cut, same coverage)
        if out and out[-1].scanned == piece.scanned and not any(abs(tr.t_K - a) < 1e-3 for tr in transitions):
            prev = out[-1]
            out[-1] = Phase(prev.t_from_K, b, prev.scanned, tuple(sorted(set(prev.identified_by) | set(piece.identified_by))))
        else:
            out.append(piece)
    return out


def scanned_phase(model: PhaseModel, t_K: float | None) -> Phase | None:
    """The scanned phase that holds ``t_K`` (within 0.5 K of its edges), or None when no scan reached
    that temperature (its phase is only inferred) or the temperature is unknown. Scanned phases are
    maximal: two neighbouring scanned pieces are merged unless a transition separates them."""
    if t_K is None:
        return None
    for p in model.phases:
        if p.scanned and p.t_from_K - 0.5 <= t_K <= p.t_to_K + 0.5:
            return p
    return None


def continuity(model: PhaseModel, t1: float | None, t2: float | None) -> Continuity:
    """Are ``t1`` and ``t2`` shown to be one phase? Only when [t1, t2] was scanned throughout and no
    transition lies strictly between; a transition between them makes them different phases; an
    unscanned stretch leaves continuity not shown (``gap_K`` is the widest unscanned stretch)."""
    if t1 is None or t2 is None:
        return Continuity(None)
    lo, hi = sorted((t1, t2))
    between = tuple(tr for tr in model.transitions if lo < tr.t_K < hi)
    if between:
        return Continuity(False, between)
    if hi - lo <= SAME_TEMPERATURE_K or _covered(model.scans, lo, hi):
        return Continuity(True)
    # the unscanned stretch inside [lo, hi]
    gaps = []
    reach = lo
    for a, b in sorted((min(s.t_from_K, s.t_to_K), max(s.t_from_K, s.t_to_K)) for s in model.scans):
        if b <= reach:
            continue
        if a > reach + 0.5:
            gaps.append((reach, min(a, hi)))
        reach = max(reach, b)
        if reach >= hi:
            break
    if reach < hi - 0.5:
        gaps.append((reach, hi))
    gaps = [g for g in gaps if g[1] > g[0]] or [(lo, hi)]
    g = max(gaps, key=lambda g: g[1] - g[0])
    return Continuity(None, (), (g[0], g[1]))
