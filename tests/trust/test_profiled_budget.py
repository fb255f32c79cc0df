"""Reading through an import profile runs within the analysis budget too (server/budget.py, issue 12 item 8):
the profiled upload, its dry run and the profile editor's preview and first look read the file in the budget's
child process, so a pathological export (or a start pattern that backtracks without end) is refused with 413
naming the limit, nothing is stored, and the web process is never held. SQLite and PostgreSQL through the
``app`` fixture."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from server.synth.ferro import miller_loop
from tests.factories import bearer, csrf_of, login_as, make_token

from .conftest import counts

SMILES = "COc1c(OC)c(OC)cc(OC)c1OC"  # invented penta-methoxy benzene (C11H16O5)
PROFILE = json.loads((Path(__file__).parent.parent / "data" / "exports" / "pe_loop_marker_cp1252.profile.json")
                     .read_text())
# Nested quantifiers over a line of 'a's that ends otherwise: Python's backtracking matcher tries every way of
# cutting the run (2^34 of them) inside one C call, which no CPU-time signal interrupts; only the wall budget can.
BACKTRACKING = {**PROFILE, "name": "tester-backtrack", "start_after": "^(a+)+$"}


def export(points_per_cycle: int, *, first_line: str = "Loop tracer export") -> bytes:
    """A loop in the corpus dialect of ``tester-a``: header block, ``[Data]`` marker, semicolons, decimal commas,
    a ``Point`` column, Windows-1252, CRLF (0.02 uC/cm^2 noise; 150 um, 0.0785 cm^2)."""
    frame = miller_loop(8.0, 6.0, 12.0, 40.0, cycles=2, points_per_cycle=points_per_cycle, noise_uC_cm2=0.02,
                        rng=np.random.default_rng(11))
    n = len(frame)
    table = pd.DataFrame({"Point": np.arange(1, n + 1), "Time": np.arange(n) * 10.0 / n,
                          "Drive Voltage": frame["E (kV/cm)"].to_numpy() * 15.0,
                          "Charge": frame["P (uC/cm^2)"].to_numpy() * 0.0785 * 1000.0})
    head = (f"{first_line}\r\nArea: 7,85\r\nThickness: 150 µm\r\nFrequency: 100\r\nTemperature: 324\r\n\r\n"
            "[Data]\r\n")
    return (head + table.to_csv(sep=";", decimal=",", index=False, lineterminator="\r\n")).encode("cp1252")


@pytest.fixture
def target(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    code = client.post("/api/v1/compounds", json={"smiles": SMILES}, headers=writer).json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    for p in (PROFILE, BACKTRACKING):
        assert client.post("/api/v1/import-profiles", json=p, headers=writer).status_code == 201
    return {"batch": batch, "writer": writer}


def _post(client, target, raw: bytes, *, profile: str = "tester-a", query: str = ""):
    return client.post(f"/api/v1/batches/{target['batch']}/measurements{query}", data={"profile": profile},
                       files={"file": ("export.txt", raw, "text/plain")}, headers=target["writer"])


def _refused(r, limit: str, value: float) -> None:
    assert r.status_code == 413, r.text
    assert r.json()["limit"] == limit and r.json()["limit_value"] == value
    assert "nothing was stored" in r.json()["detail"]


@pytest.mark.parametrize("query", ["", "?dry_run=true"])
def test_a_profiled_read_past_the_memory_budget_is_refused_and_nothing_stored(app, client, settings, target, query):
    # 64 MiB is below what the loaded reading code itself takes, so the 100 001-point export's columns cannot be
    # read in the child; the refusal comes from the read itself, which now runs there with the analyses.
    raw = export(50_000)
    before = counts(app.state.engine)
    app.state.settings = dataclasses.replace(settings, analysis_memory_mb=64)
    _refused(_post(client, target, raw, query=query), "analysis_memory_mb", 64)
    assert counts(app.state.engine) == before
    app.state.settings = settings  # the default budget: the same export is read, analysed and stored
    ok = _post(client, target, raw, query=query)
    assert ok.status_code == (200 if query else 201), ok.text
    assert counts(app.state.engine) == ((before[0] + 1, before[1] + 1) if not query else before)


@pytest.mark.parametrize("query", ["", "?dry_run=true"])
def test_a_start_pattern_that_backtracks_without_end_hits_the_wall_budget(app, client, settings, target, query):
    raw = export(200, first_line="a" * 34 + "!")
    before = counts(app.state.engine)
    app.state.settings = dataclasses.replace(settings, analysis_wall_s=2.0)
    _refused(_post(client, target, raw, profile="tester-backtrack", query=query), "analysis_wall_s", 2.0)
    assert counts(app.state.engine) == before
    assert _post(client, target, export(200), query=query).status_code in (200, 201)  # the pool goes on serving


def test_the_profile_editor_reads_its_sample_file_within_the_budget(app, client, session, settings):
    login_as(client, session, role="member")
    page = client.get("/import-profiles")
    app.state.settings = dataclasses.replace(settings, analysis_wall_s=2.0)
    form = {"csrf_token": csrf_of(page.text), "name": "tester-b", "kind": "pe_loop", "delimiter": ";",
            "decimal": ",", "encoding": "cp1252", "start_after": BACKTRACKING["start_after"]}
    r = client.post("/import-profiles/draft", data=form,
                    files={"file": ("export.txt", export(200, first_line="a" * 34 + "!"), "text/plain")})
    assert r.status_code == 413 and "REMANENCE_ANALYSIS_WALL_S" in r.text
    app.state.settings = settings
    ok = client.post("/import-profiles/draft", data={**form, "start_after": "^\\[Data\\]"},
                     files={"file": ("export.txt", export(200), "text/plain")})
    assert ok.status_code == 200 and "Drive Voltage" in ok.text
