"""Structure-property explorer and side-chain outcome map, built on the registry view."""

from __future__ import annotations

import math
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from typing import Any, Callable, Optional

from sqlmodel import Session, select

from .. import merit
from ..access import Actor
from ..errors import InputError
from ..models import Batch, Measurement, live_measurement
from ..plots import figure_json
from ..plots.explorer import explorer_figure
from ..verdict_codes import LABELS as VERDICT_LABELS, VERDICTS, strongest
from .verdicts import qualifiers as verdict_qualifiers
from .views import NO_BRIDGE, ChainSet, ViewQuery, ViewRow, query_view


def _stat(name: str) -> Callable[[ViewRow], Optional[float]]:
    return lambda r: getattr(r.stats, name) if r.stats is not None else None


def chain_set(r: ViewRow) -> ChainSet:
    return ChainSet.of(r.compound.side_chains or [])


def _pure_chain_stat(name: str) -> Callable[[ViewRow], Optional[float]]:
    """A side-chain figure that only a molecule with one kind of side chain has: for a mixed-chain
    molecule (e.g. three C2 and three C12 chains) "the" chain length is not defined, so it is not
    plotted at its most frequent chain's length."""
    get = _stat(name)
    return lambda r: None if chain_set(r).mixed else get(r)


def _relaxation_ea(r: ViewRow) -> Optional[float]:
    """The solid-state activation energy of bowl inversion from dielectric relaxation (kind
    ``dielectric_spectrum``: an Arrhenius fit of tau(T), kept in kcal/mol in CompoundStats), only where it is
    a figure of merit: an Ea marked apparent (ln tau curved in 1/T, so the Arrhenius slope is only a mean
    over the range; Vogel-Fulcher behaviour) or not a finite number is left out, as apparent Pr and Ec are."""
    s = r.stats
    if s is None or s.relax_ea_kcal_mol is None or s.relax_ea_apparent is not False:
        return None
    return s.relax_ea_kcal_mol if math.isfinite(s.relax_ea_kcal_mol) else None


@dataclass(frozen=True)
class Property:
    key: str
    label: str
    unit: str
    get: Callable[[ViewRow], Optional[float]]
    temperature_dependent: bool = False  # Pr, Ec: at their maximum, or at a chosen temperature
    chain_defined: bool = False  # defined only for molecules with one kind of side chain

    @property
    def title(self) -> str:
        return f"{self.label} ({self.unit})" if self.unit else self.label


PROPERTIES: dict[str, Property] = {p.key: p for p in (
    Property("carbons", "side-chain carbons", "", _pure_chain_stat("chain_carbons"), chain_defined=True),
    Property("chain_count", "side chains per molecule", "", _stat("chain_count")),
    Property("mw", "molar mass", "g/mol", lambda r: r.compound.mw),
    Property("barrier_measured", "barrier, measured", "kcal/mol", _stat("barrier_measured_kcal_mol")),
    Property("barrier_computed", "barrier, computed", "kcal/mol", _stat("barrier_computed_kcal_mol")),
    Property("relax_ea", "relaxation Ea, solid", "kcal/mol", _relaxation_ea),
    Property("bowl_depth", "bowl depth", "Å", _stat("bowl_depth_A")),
    Property("dipole", "dipole moment", "D", _stat("dipole_D")),
    Property("pr", "Pr", "µC/cm²", _stat("pr_max_uC_cm2"), temperature_dependent=True),
    Property("ec", "Ec", "kV/cm", _stat("ec_kV_cm"), temperature_dependent=True),
    Property("ps", "Ps", "µC/cm²", _stat("ps_uC_cm2"), temperature_dependent=True),
    Property("t_peak", "permittivity peak temperature", "K", _stat("t_peak_K")),
    Property("eps_peak", "permittivity peak", "", _stat("eps_peak")),
    Property("curie_constant", "Curie constant", "K", _stat("curie_constant_K")),
    Property("dsc_t", "DSC transition temperature", "K", _stat("dsc_t_K")),
    Property("dsc_ds", "transition entropy", "J/(mol K)", _stat("dsc_ds_J_molK")),
    Property("n_states", "Boltzmann states N", "", _stat("dsc_n_states")),
    Property("yield", "best yield", "%", _stat("yield_best_pct")),
    Property("purity", "best purity", "%", _stat("purity_best_pct")),
)}

GROUPINGS: dict[str, tuple[str, Callable[[ViewRow], str]]] = {
    "verdict": ("verdict", lambda r: VERDICT_LABELS.get(r.verdict, r.verdict)),
    "scaffold": ("scaffold", lambda r: r.scaffold or "no scaffold"),
    "bridge": ("bridge", lambda r: r.bridge or "unknown bridge"),
    "chain_kind": ("side-chain kind", lambda r: ("mixed" if chain_set(r).mixed else
                                                 r.stats.chain_kind if r.stats and r.stats.chain_kind else "none")),
    "chains": ("side chains", lambda r: chain_set(r).label),
}


def group_colours(group: str) -> dict[str, str]:
    """Fixed plot colours of the groups of ``group``: verdict groups wear their badge colours."""
    if group != "verdict":
        return {}
    return {v.label: v.border or v.cell for v in VERDICTS}


LOOP_KEYS = {"pr": "pr_uC_cm2", "ec": "ec_kV_cm", "ps": "ps_uC_cm2"}
SAME_T_K = 5.0  # a loop within 5 K of the chosen temperature counts as "at" it (common practice)


@dataclass(frozen=True)
class Point:
    code: str
    label: str
    x: float
    y: float
    group: str
    chains: str = ""  # the side chains, e.g. "C2 / C12 alkoxy, mixed"
    mixed: bool = False  # drawn as an open marker and left out of trend lines


def _loops_at(session: Session, compound_ids: list[int], t_K: float) -> dict[int, dict[str, Any]]:
    """The loop closest to t_K (within SAME_T_K) per compound whose numbers are figures of merit
    (``server/merit.py``: switching, and not contradicted by PUND of its sample)."""
    margin = SAME_T_K + merit.SAME_TEMPERATURE_K  # the PUND that may contradict a loop lies this far out
    rows = session.exec(
        select(Batch.compound_id, Measurement)
        .join(Batch, Batch.id == Measurement.batch_id)
        .where(Measurement.kind.in_(("pe_loop", "pund")),
               live_measurement(), Batch.compound_id.in_(compound_ids),  # noqa: E712
               Measurement.temperature_K.is_not(None),
               Measurement.temperature_K >= t_K - margin, Measurement.temperature_K <= t_K + margin)
    ).all()
    punds = [m for _, m in rows if m.kind == "pund"]
    best: dict[int, tuple[float, dict]] = {}
    for cid, t, results in ((cid, m.temperature_K, m.results) for cid, m in rows
                            if m.kind == "pe_loop" and abs(m.temperature_K - t_K) <= SAME_T_K
                            and merit.is_figure_of_merit(m, punds)):
        d = abs(t - t_K)
        if cid not in best or d < best[cid][0]:
            best[cid] = (d, results)
    return {cid: r for cid, (_, r) in best.items()}


def explore(session: Session, view: ViewQuery, *, actor: Optional[Actor], x: str, y: str, group: str = "verdict",
            t_K: Optional[float] = None) -> list[Point]:
    """Points (x, y) for every compound in the view that has both values and whose structure
    ``actor`` may see (the axes are derived from structures)."""
    for name, key in (("x", x), ("y", y)):
        if key not in PROPERTIES:
            raise InputError(f"unknown property {key!r}; use one of {', '.join(PROPERTIES)}", field=name)
    if group not in GROUPINGS:
        raise InputError(f"group by one of {', '.join(GROUPINGS)}", field="group")
    rows = query_view(session, view, actor=actor, paged=False, structures_only=True).rows
    at: dict[int, dict[str, Any]] = {}
    if t_K is not None and (PROPERTIES[x].temperature_dependent or PROPERTIES[y].temperature_dependent):
        at = _loops_at(session, [r.compound.id for r in rows], t_K)

    def value(key: str, r: ViewRow) -> Optional[float]:
        prop = PROPERTIES[key]
        if t_K is not None and prop.temperature_dependent:
            return at.get(r.compound.id, {}).get(LOOP_KEYS[key])
        return prop.get(r)

    points = []
    for r in rows:
        vx, vy = value(x, r), value(y, r)
        if vx is None or vy is None:
            continue
        chains = chain_set(r)
        points.append(Point(code=r.compound.code, label=r.compound.label, x=float(vx), y=float(vy),
                            group=GROUPINGS[group][1](r), chains=chains.label, mixed=chains.mixed))
    return points


def mixed_left_out(session: Session, view: ViewQuery, *, actor: Optional[Actor], x: str, y: str) -> int:
    """How many mixed-chain compounds of the view an axis defined only for one kind of chain leaves out."""
    if not (PROPERTIES[x].chain_defined or PROPERTIES[y].chain_defined):
        return 0
    rows = query_view(session, view, actor=actor, paged=False, structures_only=True).rows
    return sum(1 for r in rows if chain_set(r).mixed)


def explorer_figure_json(points: list[Point], *, x: str, y: str, t_K: Optional[float], with_trend: bool,
                         group: str) -> str:
    """The explorer's figure (Plotly JSON); axis titles name the temperature of temperature-dependent axes."""
    xt, yt = PROPERTIES[x].title, PROPERTIES[y].title
    if t_K is not None:
        xt += f" at {t_K:.0f} K" if PROPERTIES[x].temperature_dependent else ""
        yt += f" at {t_K:.0f} K" if PROPERTIES[y].temperature_dependent else ""
    return figure_json(explorer_figure(points, x_title=xt, y_title=yt, with_trend=with_trend,
                                       colours=group_colours(group)))

# --- side-chain outcome map ----------------------------------------------------------------------



@dataclass(frozen=True)
class Cell:
    counts: dict[str, int]
    best: str
    link: str
    # qualifier -> how many of the cell's compounds carry it (verdicts.qualifiers: "tested at one temperature
    # only"), so a cell of one-temperature results does not read as the whole phase diagram
    qualifiers: dict[str, int] = field(default_factory=dict)

    @property
    def total(self) -> int:
        return sum(self.counts.values())


NO_COLUMN = {"scaffold": "no scaffold", "bridge": "no named bridge"}


@dataclass(frozen=True)
class OutcomeMap:
    rows: list[ChainSet]  # one per distinct set of side chains: a pure chain, or a mixture
    columns: list[str]
    cells: dict[tuple[ChainSet, str], Cell]
    by: str


def outcome_map(session: Session, view: ViewQuery, *, actor: Optional[Actor], by: str = "scaffold") -> OutcomeMap:
    """Verdict counts per set of side chains and scaffold (or bridge), over compounds ``actor`` may see.

    A molecule with one kind of side chain counts in that chain's row; a molecule with several (three C2
    and three C12 alkoxy chains, say) counts in a row of its own ("C2 / C12 alkoxy, mixed"), never under
    one of its chains. Each cell links to exactly the compounds it counts (the ``chains`` filter), and counts
    the qualifiers of their verdicts (issue 15: "tested at one temperature only").
    """
    if by not in ("scaffold", "bridge"):
        raise InputError("columns are by scaffold or by bridge", field="by")
    rows = query_view(session, view, actor=actor, paged=False, structures_only=True).rows
    counts: dict[tuple, Counter] = defaultdict(Counter)
    qualified: dict[tuple, Counter] = defaultdict(Counter)
    for r in rows:
        key = chain_set(r)
        if not key.types:
            continue
        column = (r.scaffold if by == "scaffold" else r.bridge) or NO_COLUMN[by]
        counts[(key, column)][r.verdict] += 1
        qualified[(key, column)].update(verdict_qualifiers(r.compound))
    row_keys = sorted({k for k, _ in counts}, key=lambda k: k.types)
    columns = sorted({c for _, c in counts})
    cells = {}
    for (key, column), counter in counts.items():
        best = strongest(code for code, n in counter.items() if n)
        if column == NO_COLUMN[by]:  # compounds without a (bridged) scaffold
            where = {"no_scaffold": "yes"} if by == "scaffold" else {"bridge": NO_BRIDGE}
        else:
            where = {"scaffold": column} if by == "scaffold" else {"bridge": column}
        params = {"chains": str(key), **where}
        cells[(key, column)] = Cell(counts=dict(counter), best=best, link=view.link(**params, page=None),
                                    qualifiers=dict(sorted(qualified[(key, column)].items())))
    return OutcomeMap(rows=row_keys, columns=columns, cells=cells, by=by)
