"""Test-only job handlers, importable by worker subprocesses (``from tests.jobs.fake_handlers import HANDLERS``)."""

from __future__ import annotations

import time

from server.analysis.xtb import EstimateCancelled


def sleep_without_polling(params, progress, should_cancel):
    """Reports once, then sleeps without looking at should_cancel: a worker killed now leaves its job running."""
    progress(0.1, "sleeping")
    time.sleep(float(params.get("sleep_s", 30)))
    return {"slept_s": params.get("sleep_s", 30)}


def poll_until_stopped(params, progress, should_cancel):
    """Runs until should_cancel() says stop (cancel request or worker shutdown)."""
    deadline = time.monotonic() + float(params.get("max_s", 30))
    k = 0
    while time.monotonic() < deadline:
        if should_cancel():
            raise EstimateCancelled("stopped on request")
        k += 1
        progress(min(0.9, 0.01 * k), f"step {k}")
        time.sleep(0.02)
    return {"steps": k}


HANDLERS = {"sleep": sleep_without_polling, "poll": poll_until_stopped}
