"""Load the demo campaign through the project's own HTTP API.

``remanence demo`` migrates a fresh database, creates the admin user 'demo' and calls
:func:`load`. Everything then goes through the JSON API with ``fastapi.testclient`` (in
process, the same routes an instrument PC uses): a write token registers scaffolds,
compounds, batches and barriers; each instrument posts its own files with an upload token
limited to its kinds. Any answer other than the expected one stops the load with the
response text; the one exception is a barrier or estimate route that does not exist yet
(404/405), which is reported on one line and skipped.
"""

from __future__ import annotations

import dataclasses

import math
import time
from collections import Counter
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
from fastapi.testclient import TestClient
from sqlmodel import Session

from server.app import create_app
from server.services import accounts
from server.settings import Settings

from . import instruments, phase_id, scenario
from . import planning as demo_planning
from .scenario import DS_ACT_J_MOLK, CompoundPlan

#: Password of the extra demo accounts (the admin 'demo' gets its own from the CLI).
PEOPLE_PASSWORD = "tilt-26-demo"


class DemoLoadError(RuntimeError):
    """The API refused a step of the demo; the message carries the answer."""


@dataclass
class LoadReport:
    """What :func:`load` stored, with the codes it was given."""

    compounds: dict[int, str] = field(default_factory=dict)  # scenario index -> compound code
    batches: int = 0
    measurements: Counter = field(default_factory=Counter)
    barriers: int = 0
    jobs: list[Any] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)
    samples: list[str] = field(default_factory=list)  # codes of the described samples
    specimen_loops: int = 0  # live loops on them (beside the scenario's measurements)
    corrected: list[tuple[int, int]] = field(default_factory=list)  # (old id, correction id)
    phase_id: dict[str, int] = field(default_factory=dict)  # pxrd / saxs / shg files (seed_demo/phase_id.py)
    identity_confirmed: list[str] = field(default_factory=list)  # batch codes confirmed
    identity_unconfirmed: list[str] = field(default_factory=list)  # measured batches left unconfirmed
    planning: demo_planning.PlanningReport = field(default_factory=demo_planning.PlanningReport)
    seconds: float = 0.0


def _check(resp, expected: int | tuple[int, ...], what: str):
    ok = (expected,) if isinstance(expected, int) else expected
    if resp.status_code not in ok:
        raise DemoLoadError(f"{what}: HTTP {resp.status_code} {resp.text}")
    return resp.json()


def _route_missing(resp) -> bool:
    """A 405, or a 404 from the router itself (no such route), not a 404 about a compound."""
    if resp.status_code == 405:
        return True
    if resp.status_code == 404:
        try:
            return resp.json().get("detail") == "Not Found"
        except ValueError:
            return True
    return False


_T0: list[float] = [0.0]  # start of the load, for the elapsed time on progress lines


def _progress(what: str, done: int, total: int, echo: Callable[[str], None]) -> None:
    step = max(1, total // 5)
    if done == total or done % step == 0:
        echo(f"{what} {done}/{total} ({time.perf_counter() - _T0[0]:.1f} s)")


def _compound_body(c: CompoundPlan, scaffold_code: str) -> dict[str, Any]:
    notes = (f"{scenario.CAMPAIGN}, {scenario.GROUP}. "
             + ("Polar columns expected (head-to-tail)." if c.polar else "Centrosymmetric packing expected."))
    body: dict[str, Any] = {"label": c.label, "scaffold": scaffold_code, "notes": notes, "embargoed": c.embargoed}
    if c.uniform:
        a = c.chains[0]
        body["side_chain"] = {"kind": a.kind, "carbons": None if a.branched_form else a.carbons,
                              "branched_form": a.branched_form}
    else:
        body["smiles"] = c.smiles  # two different chains: built here with attach_side_chains
    return body


def coalescence_point(c: CompoundPlan) -> tuple[float, float]:
    """(Tc in K, dnu in Hz) of the scenario's VT-NMR series: k(Tc) = pi dnu / sqrt(2) (Gutowsky-Holm)."""
    k_c = math.pi * c.coalescence_dnu_Hz / math.sqrt(2.0)
    tc = instruments.temperature_for_rate(c.dh_kJ_mol, DS_ACT_J_MOLK, k_c)
    return round(tc * 2) / 2, c.coalescence_dnu_Hz


def load(settings: Settings, *, scale: float = 1.0, echo: Callable[[str], None] = print) -> LoadReport:
    """Load the demo scenario into the (migrated, otherwise empty) database of ``settings``.

    Parameters
    ----------
    settings : Settings
        The database to fill; it must already be migrated.
    scale : float
        Fraction of the compounds to load (an evenly spaced subset, same data each); 1 is the
        whole campaign.
    echo : callable
        Where the progress lines go.

    Raises
    ------
    DemoLoadError
        The database is not empty, or an API call answered with an unexpected status.
    """
    started = time.perf_counter()
    _T0[0] = started
    plan = scenario.build(scale)
    report = LoadReport()
    echo(f"demo: {scenario.GROUP}, campaign {scenario.CAMPAIGN}: {len(plan.compounds)} compounds, "
         f"{plan.batches} batches, {plan.measurements} files")
    # The loader talks to its own in-process app; the estimates it queues are left for the server's worker.
    app = create_app(dataclasses.replace(settings, embedded_worker=False))
    with Session(app.state.engine) as session:
        _, write_secret = accounts.create_token(session=session, name="tilt-registrar", scope="write",
                                                actor="demo:load")
        upload_secrets = {}
        for inst in instruments.INSTRUMENTS:
            _, secret = accounts.create_token(session=session, name=inst.name, scope="upload",
                                              kinds=list(inst.kinds), actor="demo:load")
            upload_secrets[inst.name] = secret
        for login, _name, role in scenario.PEOPLE:
            accounts.create_user(session=session, username=login, password=PEOPLE_PASSWORD, role=role,
                                 actor="demo:load")
    writer = {"Authorization": f"Bearer {write_secret}"}

    with TestClient(app) as client:
        existing = _check(client.get("/api/v1/compounds", params={"limit": 1}, headers=writer), 200, "list compounds")
        if existing["total"]:
            raise DemoLoadError(f"the database holds {existing['total']} compounds already; "
                                "the demo loads into a fresh database")

        for key, bowl in scenario.BOWLS.items():
            _check(client.post("/api/v1/scaffolds", headers=writer,
                               json={"code": bowl.code, "name": bowl.name, "smiles": bowl.smiles,
                                     "notes": bowl.notes}), 201, f"scaffold {bowl.code}")
        echo(f"scaffolds {len(scenario.BOWLS)}/{len(scenario.BOWLS)}")

        total = len(plan.compounds)
        for n, c in enumerate(plan.compounds, start=1):
            body = _check(client.post("/api/v1/compounds", headers=writer, json=_compound_body(c, c.bowl.code)),
                          201, f"compound {c.label}")
            report.compounds[c.index] = body["code"]
            _progress("compounds", n, total, echo)
        demo_planning.register_targets(client, writer, report.planning)

        batch_codes: list[tuple[CompoundPlan, scenario.BatchPlan, str]] = []
        for c in plan.compounds:
            code = report.compounds[c.index]
            for b in c.batches:
                body = _check(client.post(f"/api/v1/compounds/{code}/batches", headers=writer, json={
                    "made_on": b.made_on.isoformat(), "chemist": b.chemist, "scale_mg": b.scale_mg,
                    "yield_pct": b.yield_pct, "purity_pct": b.purity_pct, "state": b.state, "notes": b.notes,
                }), 201, f"batch {b.seq} of {code}")
                batch_codes.append((c, b, body["code"]))
                report.batches += 1
                _progress("batches", report.batches, plan.batches, echo)

        done = 0
        checkpoints = {plan.measurements // 2: "half the measurements"}
        for c, b, bcode in batch_codes:
            for j, m in enumerate(b.measurements):
                up = instruments.write(c, b.seq, j, m, b.chemist, bcode)
                inst = instruments.INSTRUMENT_FOR[m.kind]
                resp = client.post(f"/api/v1/batches/{bcode}/measurements",
                                   headers={"Authorization": f"Bearer {upload_secrets[inst.name]}"},
                                   data={"kind": up.kind, **up.form},
                                   files={"file": (up.filename, up.raw, up.content_type)})
                _check(resp, 201, f"{m.kind} upload for {bcode} ({up.filename})")
                report.measurements[m.kind] += 1
                done += 1
                _progress("measurements", done, plan.measurements, echo)
                if done in checkpoints:  # the next-to-make ranking as the campaign's data arrive
                    demo_planning.snapshot_ranking(client, writer, report.planning, checkpoints[done])

        _load_specimens(client, writer, upload_secrets, plan, report, batch_codes, echo)
        report.phase_id = phase_id.load(client, writer, plan, batch_codes, echo).uploads
        _confirm_identities(client, writer, plan, report, batch_codes, echo)
        _load_barriers(client, writer, plan, report, echo)
        _queue_estimates(client, writer, plan, report, echo)
        demo_planning.snapshot_ranking(client, writer, report.planning, "all measurements")
        demo_planning.record_routes(client, writer, report.planning, batch_codes, echo)

    app.state.engine.dispose()
    report.seconds = time.perf_counter() - started
    kinds = ", ".join(f"{k} {v}" for k, v in sorted(report.measurements.items()))
    echo(f"demo loaded in {report.seconds:.1f} s: {len(report.compounds)} compounds, {report.batches} batches, "
         f"{sum(report.measurements.values())} measurements ({kinds}), {report.barriers} barriers, "
         f"{len(report.jobs)} queued estimates")
    return report


def _load_specimens(client: TestClient, writer: dict, upload_secrets: dict, plan: scenario.Scenario,
                    report: LoadReport, batch_codes: list, echo: Callable[[str], None]) -> None:
    """Described samples of one batch (pellet and crystal), temperature runs on heating and on
    cooling, and one loop whose thickness was typed wrongly and then corrected."""
    c = scenario.specimen_compound(plan)
    if c is None:
        return
    c_, b, bcode = next(row for row in batch_codes if row[0] is c)
    loop_token = {"Authorization": f"Bearer {upload_secrets[instruments.INSTRUMENT_FOR['pe_loop'].name]}"}
    rng = np.random.default_rng(20261202)
    for k, sp in enumerate(scenario.specimens(c)):
        sample = _check(client.post(f"/api/v1/batches/{bcode}/samples", headers=writer, json=sp.body), 201,
                        f"sample of {bcode}")
        report.samples.append(sample["code"])
        area_cm2, thickness_um = sample["electrode_area_mm2"] / 100.0, sample["thickness_um"]
        for j, (t_K, sweep) in enumerate(sp.loops):
            up = instruments.specimen_loop(c, t_K, rng, pr_factor=sp.pr_factor, area_cm2=area_cm2,
                                           thickness_um=thickness_um, name=f"{sample['code']}-{j:02d}-{t_K:g}K",
                                           operator=b.chemist, sweep=sweep)
            _check(client.post(f"/api/v1/samples/{sample['code']}/measurements", headers=loop_token,
                               data={"kind": up.kind, **up.form}, files={"file": (up.filename, up.raw, up.content_type)}),
                   201, f"loop on {sample['code']}")
            report.specimen_loops += 1
        if sp.corrected:
            t_K, wrong, right = sp.corrected
            up = instruments.specimen_loop(c, t_K, rng, pr_factor=sp.pr_factor, area_cm2=area_cm2,
                                           thickness_um=thickness_um, name=f"{sample['code']}-typo-{t_K:g}K",
                                           operator=b.chemist)
            first = _check(client.post(f"/api/v1/samples/{sample['code']}/measurements", headers=loop_token,
                                       data={"kind": up.kind, **up.form, "thickness": wrong},
                                       files={"file": (up.filename, up.raw, up.content_type)}), 201, "typo loop")
            fixed = _check(client.post(f"/api/v1/measurements/{first['id']}/revise", headers=writer,
                                       data={"thickness": right}), 201, "correction")
            report.corrected.append((first["id"], fixed["id"]))
            report.specimen_loops += 1
    echo(f"specimens: {', '.join(report.samples)}; corrected {len(report.corrected)}")


def _confirm_identities(client: TestClient, writer: dict, plan: scenario.Scenario, report: LoadReport,
                        batch_codes: list, echo: Callable[[str], None]) -> None:
    """A member's identity confirmation of every measured batch, with the note of
    :func:`scenario.identity_note`, except the ones the scenario leaves unconfirmed."""
    newest = plan.compounds[-1]
    for c, b, bcode in batch_codes:
        note = scenario.identity_note(c, b, newest_compound=c is newest)
        if note is None:
            if b.measurements:
                report.identity_unconfirmed.append(bcode)
            continue
        _check(client.post(f"/api/v1/batches/{bcode}/identity/confirm", headers=writer, json={"note": note}), 200,
               f"identity confirmation of {bcode}")
        report.identity_confirmed.append(bcode)
    echo(f"identity confirmed for {len(report.identity_confirmed)} batches; left unconfirmed: "
         f"{', '.join(report.identity_unconfirmed) or 'none'}")


def _load_barriers(client: TestClient, writer: dict, plan: scenario.Scenario, report: LoadReport,
                   echo: Callable[[str], None]) -> None:
    todo = []
    for c in plan.compounds:
        code = report.compounds[c.index]
        if c.coalescence_dnu_Hz is not None:
            tc, dnu = coalescence_point(c)
            todo.append((code, {"method": "coalescence", "tc_K": tc, "dnu_Hz": dnu,
                                "notes": "VT-NMR coalescence of the diastereotopic bridge signals"}))
        if c.imported_offset_kcal_mol is not None:
            todo.append((code, {"method": "imported", "dg_kcal_mol": round(c.dg_kcal_mol + c.imported_offset_kcal_mol, 2),
                                "level_of_theory": "r2SCAN-3c, planar-core transition-state model",
                                "notes": "computed on the group cluster (invented demo value)"}))
    for n, (code, body) in enumerate(todo, start=1):
        resp = client.post(f"/api/v1/compounds/{code}/barriers", headers=writer, json=body)
        if _route_missing(resp):
            line = (f"skipped barriers: POST /api/v1/compounds/{{code}}/barriers answered {resp.status_code} "
                    "(route not available yet); no coalescence or imported barriers loaded")
            echo(line)
            report.skipped.append(line)
            return
        _check(resp, 201, f"{body['method']} barrier for {code}")
        report.barriers += 1
        _progress("barriers", n, len(todo), echo)


def _queue_estimates(client: TestClient, writer: dict, plan: scenario.Scenario, report: LoadReport,
                     echo: Callable[[str], None]) -> None:
    todo = [report.compounds[c.index] for c in plan.compounds if c.queue_estimate]
    for n, code in enumerate(todo, start=1):
        resp = client.post(f"/api/v1/compounds/{code}/estimates", headers=writer, json={})
        if _route_missing(resp):
            line = (f"skipped estimates: POST /api/v1/compounds/{{code}}/estimates answered {resp.status_code} "
                    "(route not available yet); no GFN2-xTB jobs queued")
            echo(line)
            report.skipped.append(line)
            return
        body = _check(resp, 202, f"estimate for {code}")
        report.jobs.append(body["job"])
        echo(f"estimates queued {n}/{len(todo)}")
