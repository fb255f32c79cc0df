"""Computed barrier estimates in a real browser: the job panel, its progress bar, cancel, the queue page.

The live server runs without a worker (``embedded_worker=False``), so a test that wants its job
to run starts a :class:`server.jobs.worker.Worker` thread itself against the live server's
database, and stops it again at the end of the test. Without one, a job stays queued, which is
what the cancel test needs.

The molecule for the real estimate is the S-bridged parent bowl (``PARENT_BOWLS["S"]`` with
hydrogen on the six rim positions, C18H6S3): small enough that its two GFN2-xTB optimisations
take a few seconds, and bowl-shaped, so the estimate ends with a positive barrier instead of
relaxing to a planar geometry.
"""

from __future__ import annotations

import os
import re
import threading
import time
from typing import Callable, Iterator

import pytest
from playwright.sync_api import Page, expect
from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS
from server.jobs.handlers import HANDLERS
from server.jobs.worker import Worker, stop_embedded
from server.models import BarrierEstimate

pytestmark = pytest.mark.browser

# Hydrogen on every attachment point: the parent S-bridged bowl.
S_PARENT = re.sub(r"\[\*:\d\]", "[H]", PARENT_BOWLS["S"])
TRIPHENYLENE = "c1ccc2c(c1)c1ccccc1c1ccccc21"  # planar; never runs here (its job is cancelled while queued)

PANEL = "#estimate-jobs .job"
# The panel replaces itself (hx-swap outerHTML) every second, so read it afresh each time.
READ_PANEL = """() => {
  const job = document.querySelector('#estimate-jobs .job');
  if (!job) { return null; }
  const bar = job.querySelector('progress');
  return {id: job.id, state: job.dataset.state, value: bar ? bar.value : null};
}"""
FINAL_STATES = ("done", "failed", "cancelled")


@pytest.fixture
def start_worker(live) -> Iterator[Callable[[], Worker]]:
    """Start a worker thread on the live server's database when the test says so; stopped afterwards."""
    started: list[tuple[threading.Thread, threading.Event]] = []

    def _start() -> Worker:
        os.environ.setdefault("OMP_NUM_THREADS", "1")  # the machine's cores are shared with the server
        worker = Worker(live.engine, name="browser-test-worker", handlers=HANDLERS, poll_s=0.2)
        stop = threading.Event()
        thread = threading.Thread(target=worker.run_forever, args=(stop,), name="browser-test-worker", daemon=True)
        thread.start()
        started.append((thread, stop))
        return worker

    yield _start
    for thread, stop in started:
        assert stop_embedded(thread, stop, timeout_s=30), "the test worker did not stop within 30 s"


def _open_compound(page: Page, login, live, smiles: str, label: str) -> str:
    code = live.compound(smiles, label=label)
    login("member")
    page.goto(f"/compounds/{code}")
    expect(page.locator("#estimates p.empty")).to_have_text("No computed estimate yet.")
    expect(page.locator(PANEL)).to_have_count(0)
    return code


def _ask_for_estimate(page: Page, code: str) -> int:
    with page.expect_response(lambda r: r.request.method == "POST" and r.url.endswith(f"/compounds/{code}/estimate")):
        page.get_by_role("button", name="Estimate barrier").click()
    panel = page.locator(PANEL)
    expect(panel).to_have_count(1)
    return int(panel.get_attribute("id").removeprefix("job-"))


def test_estimate_progress_bar_moves_to_done(page: Page, live, login, start_worker):
    code = _open_compound(page, login, live, S_PARENT, "S-bridged parent bowl")
    page.evaluate("() => { window.__notReloaded = true; }")
    job_id = _ask_for_estimate(page, code)
    panel = page.locator(f"#job-{job_id}")
    # No worker yet: the job waits, its bar at zero.
    expect(panel).to_have_attribute("data-state", "queued")
    expect(panel.locator("progress")).to_have_attribute("value", "0.0")

    start_worker()
    samples = []
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        seen = page.evaluate(READ_PANEL)
        if seen is not None:
            samples.append((seen["state"], seen["value"]))
            if seen["state"] in FINAL_STATES:
                break
        page.wait_for_timeout(150)
    states = [s for s, _ in samples]
    values = [v for _, v in samples]
    assert states[-1] == "done", f"the estimate did not finish: {samples}"
    assert values == sorted(values), f"the progress bar went backwards: {samples}"
    assert values[0] == 0.0 and values[-1] == 1.0, samples
    between = [v for s, v in samples if s == "running" and 0.0 < v < 1.0]
    assert between, f"the bar jumped from 0 to done without showing progress: {samples}"
    # htmx swapped the panel in place: the page itself was never reloaded.
    assert page.evaluate("() => window.__notReloaded") is True

    expect(panel).to_have_attribute("data-state", "done")
    expect(panel.locator("progress")).to_have_attribute("value", "1.0")
    result = panel.locator("p", has_text="Barrier")
    expect(result).to_contain_text(re.compile(r"Barrier \d+(\.\d+)? kcal\u202fmol⁻¹"))
    shown_kcal_mol = float(re.search(r"Barrier (\d+(?:\.\d+)?) kcal\u202fmol⁻¹", result.inner_text()).group(1))
    with live.session() as s:
        stored = s.exec(select(BarrierEstimate).where(BarrierEstimate.job_id == job_id)).one()
    assert stored.method == "gfn2-xtb"
    # The S-bridged parent is a bowl (not planar), so inverting it costs energy: a positive barrier.
    assert stored.dg_kcal_mol > 0 and not stored.results["planar"]
    assert shown_kcal_mol == pytest.approx(stored.dg_kcal_mol, rel=5e-3)
    expect(result).not_to_contain_text("relaxes to planar")

    # The queue page lists the finished job with its barrier.
    page.goto("/queue")
    row = page.locator("#queue-body table tbody tr", has=page.locator("td", has_text=re.compile(rf"^{job_id}$")))
    expect(row).to_have_count(1)
    expect(row.locator("td").nth(1)).to_have_text(code)
    expect(row.locator("td").nth(2)).to_have_text("done")
    assert float(row.locator("td").nth(3).inner_text()) == pytest.approx(stored.dg_kcal_mol, rel=5e-3)


def test_cancel_a_queued_estimate_from_its_panel(page: Page, live, login, browser_log):
    code = _open_compound(page, login, live, TRIPHENYLENE, "triphenylene reference")
    job_id = _ask_for_estimate(page, code)
    panel = page.locator(f"#job-{job_id}")
    expect(panel).to_have_attribute("data-state", "queued")  # no worker runs in this test

    # The queue page (same session, another tab) shows it waiting.
    queue_tab = page.context.new_page()
    _watch(queue_tab, browser_log)
    queue_tab.goto("/queue")
    expect(queue_tab.locator("#queue-body .chip", has_text=f"#{job_id} {code}")).to_be_visible()

    with page.expect_response(lambda r: r.request.method == "POST" and r.url.endswith(f"/jobs/{job_id}/cancel")):
        panel.get_by_role("button", name="Cancel").click()
    expect(panel).to_have_attribute("data-state", "cancelled")
    expect(panel.locator("strong")).to_have_text("cancelled")
    expect(panel.get_by_role("button", name="Cancel")).to_have_count(0)
    # A cancelled panel stops polling: no further requests for it.
    polls: list[str] = []
    page.on("request", lambda r: polls.append(r.url) if f"/jobs/{job_id}/panel" in r.url else None)
    page.wait_for_timeout(1500)
    assert polls == [], f"the cancelled panel kept polling: {polls}"

    # The queue page refreshes itself (every 2 s) and moves the job to the ended ones.
    row = queue_tab.locator("#queue-body table tbody tr", has=queue_tab.locator("td", has_text=re.compile(rf"^{job_id}$")))
    expect(row.locator("td").nth(2)).to_have_text("cancelled", timeout=6_000)
    expect(queue_tab.locator("#queue-body .chip", has_text=f"#{job_id} {code}")).to_have_count(0)
    queue_tab.close()



def _watch(tab: Page, browser_log) -> None:  # noqa: ANN001 - the conftest's BrowserLog
    """Give a second tab the same error watch as the ``page`` fixture's (console, page errors, HTTP >= 400)."""
    tab.on("console", browser_log.on_console)
    tab.on("pageerror", browser_log.on_pageerror)
    tab.on("response", browser_log.on_response)
