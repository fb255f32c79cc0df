"""The demo's planning: targets in every state, routes with lineage through shared intermediate batches,
reagents with entered hazard data, and the next-to-make ranking as measurements arrive.

Everything is invented. The two reagents with hazard data are invented demo entries, named as such, whose
statements say they describe no real substance: the program ships no hazard data, and the demo does not
either. Real reagent names in the routes (solvents, bases) carry no entered data, so their steps show the
notice to read the safety data sheet, as they would in a new installation.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

from fastapi.testclient import TestClient

from server.chem.scaffold import attach_side_chains

from . import scenario


@dataclass(frozen=True)
class Target:
    bowl_key: str
    kind: str
    carbons: int | None
    branched_form: str | None
    state: str  # planned | in_synthesis | abandoned
    priority: int
    rationale: str
    assignee: str = ""
    reason: str = ""


#: Targets the group has not made yet (none is in the scenario's list of made compounds).
TARGETS: tuple[Target, ...] = (
    Target("CS", "alkoxy", 5, None, "planned", 1,
           "Fills the C4-C6 gap on the mixed bowl, where Tc and switching both looked promising."),
    Target("CH2", "alkylthio", 2, None, "planned", 2,
           "Shortest alkylthio arm on the deepest bowl: tests whether S linkers keep the columns polar."),
    Target("S", "alkylthio", 2, None, "in_synthesis", 2,
           "All-sulfur analogue of the CH2 target; shares the thiolate step.", assignee="tbrenek"),
    Target("Se", "alkoxy", 3, None, "planned", 4,
           "Checks whether any Se bowl packs polar with a short chain (the series says unlikely)."),
    Target("CH2", "alkoxy", None, "isobutyl", "abandoned", 3,
           "Branched but compact chain on the CH2 bowl.",
           reason="Branched chains frustrated head-to-tail stacking in every bowl so far; dropped for linear ones."),
)

#: Invented demo entries for the reagent table (not the hazard data of any real substance).
DEMO_REAGENTS: tuple[dict[str, Any], ...] = (
    {"name": "TILT-26 demo base B-1 (invented)", "hazard_codes": ["H261", "H314"], "pictograms": ["GHS02", "GHS05"],
     "hazard_statements": "Invented demo entry, not the hazard data of any real substance: read the real SDS.",
     "sds_source": "invented for the demo"},
    {"name": "TILT-26 demo alkylating agent A-1 (invented)", "hazard_codes": ["H302", "H315"],
     "pictograms": ["GHS07"],
     "hazard_statements": "Invented demo entry, not the hazard data of any real substance: read the real SDS.",
     "sds_source": "invented for the demo"},
)


def hexol_smiles(bowl_key: str) -> str:
    """The hexahydroxy bowl, the shared intermediate the alkoxy compounds are made from (invented route)."""
    return attach_side_chains(scenario.BOWLS[bowl_key].smiles, {n: "[*:1]O" for n in range(1, 7)})


def _check(resp, status: int, what: str):  # noqa: ANN001, ANN202
    if resp.status_code != status:
        from .load import DemoLoadError

        raise DemoLoadError(f"{what}: HTTP {resp.status_code} {resp.text[:300]}")
    return resp.json()


@dataclass
class PlanningReport:
    targets: dict[str, str] = field(default_factory=dict)  # compound code -> state
    intermediates: list[str] = field(default_factory=list)  # batch codes
    intermediate_compounds: list[str] = field(default_factory=list)
    routes: int = 0
    # (moment, goal, target codes in rank order; empty while the data are too few)
    rankings: list[tuple[str, str, list[str]]] = field(default_factory=list)


def register_targets(client: TestClient, writer: dict, report: PlanningReport) -> None:
    for t in TARGETS:
        body = {"scaffold": scenario.BOWLS[t.bowl_key].code,
                "side_chain": {"kind": t.kind, "carbons": t.carbons, "branched_form": t.branched_form},
                "state": "planned", "priority": t.priority, "rationale": t.rationale,
                "label": f"{scenario.CAMPAIGN} target {scenario.BOWLS[t.bowl_key].code}"}
        code = _check(client.post("/api/v1/compounds", headers=writer, json=body), 201, f"target {t}")["code"]
        if t.state != "planned":
            patch = {"state": t.state, **({"assignee": t.assignee} if t.assignee else {}),
                     **({"reason": t.reason} if t.reason else {})}
            _check(client.patch(f"/api/v1/compounds/{code}", headers=writer, json=patch), 200, f"state of {code}")
        report.targets[code] = t.state


def snapshot_ranking(client: TestClient, writer: dict, report: PlanningReport, moment: str) -> None:
    """The ranking for the Tc goal and for switching alone at this moment of the load."""
    for goal in ("tc", "switch"):
        body = _check(client.get("/api/v1/planning/ranking", params={"goal": goal}, headers=writer), 200, "ranking")
        report.rankings.append((moment, goal, [it["code"] for it in body["items"]]))


def record_routes(client: TestClient, writer: dict, report: PlanningReport,
                  batch_codes: list[tuple[Any, Any, str]], echo: Callable[[str], None]) -> None:
    """Reagents, one hexol intermediate batch per bowl, and the etherification route of the first made
    batch of each linear alkoxy compound on that bowl, with the intermediate batch as its precursor."""
    for r in DEMO_REAGENTS:
        _check(client.post("/api/v1/reagents", headers=writer, json=r), 201, f"reagent {r['name']}")
    first_batch: dict[int, str] = {}
    for c, b, code in batch_codes:
        if b.state == "made" and c.index not in first_batch:
            first_batch[c.index] = code
    for bowl_key in ("CH2", "S"):
        inter = _check(client.post("/api/v1/compounds", headers=writer, json={
            "smiles": hexol_smiles(bowl_key), "scaffold": scenario.BOWLS[bowl_key].code,
            "label": f"{scenario.CAMPAIGN} hexol of {scenario.BOWLS[bowl_key].code}",
            "notes": "Intermediate: demethylated hexamethoxy bowl, the common precursor of the alkoxy series."}),
            201, f"hexol {bowl_key}")["code"]
        ib = _check(client.post(f"/api/v1/compounds/{inter}/batches", headers=writer, json={
            "chemist": scenario.CHEMISTS[0], "scale_mg": 900.0, "yield_pct": 81.0, "state": "made",
            "notes": "Shared intermediate batch."}), 201, f"hexol batch {bowl_key}")["code"]
        _check(client.put(f"/api/v1/batches/{ib}/route", headers=writer, json={"steps": [
            {"description": "Demethylate the hexamethoxy bowl; quench into ice water, filter.",
             "reagents": [{"reagent": "boron tribromide", "amount": "9 mmol", "equivalents": 9.0},
                          {"reagent": "dichloromethane", "amount": "40 mL"}],
             "solvent": "dichloromethane", "temperature": "-78 degC", "time": "14 h", "yield_pct": 81.0}]}),
            200, f"route of {ib}")
        report.intermediates.append(ib)
        report.intermediate_compounds.append(inter)
        for c in scenario.build().compounds:
            if c.bowl_key != bowl_key or not c.uniform or c.chains[0].kind != "alkoxy" or c.chains[0].branched_form:
                continue
            code = first_batch.get(c.index)
            if code is None:
                continue
            n = c.chains[0].carbons
            _check(client.put(f"/api/v1/batches/{code}/route", headers=writer, json={"precursors": [ib], "steps": [
                {"description": f"Six-fold Williamson etherification with the C{n} bromide; column, recrystallise.",
                 "reagents": [{"reagent": DEMO_REAGENTS[1]["name"], "amount": "1.2 mmol", "equivalents": 8.0},
                              {"reagent": DEMO_REAGENTS[0]["name"], "amount": "1.5 mmol", "equivalents": 10.0},
                              {"reagent": "N,N-dimethylformamide", "amount": "6 mL"}],
                 "solvent": "N,N-dimethylformamide", "temperature": "80 degC", "time": "16 h"}]}),
                200, f"route of {code}")
            report.routes += 1
    echo(f"planning: {len(report.targets)} targets, {len(report.intermediates)} intermediate batches, "
         f"{report.routes} routes, rankings {[(m, g, len(c)) for m, g, c in report.rankings]}")
