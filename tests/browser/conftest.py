"""Fixtures for the browser tests: a live server, Debian's chromium, and a page that fails on errors.

* ``live`` (session): ``server.app:create_app(settings)`` served by uvicorn in a background thread
  on 127.0.0.1 and a free port, over a fresh migrated SQLite database in a temporary folder
  (``embedded_worker=False``). Its methods create users, tokens, compounds, batches and scaffolds
  directly through the services, so a test sets up only what it does not drive through the pages.
* ``browser`` (session): ``/usr/bin/chromium`` through Playwright (never a downloaded browser).
* ``page`` (per test): a fresh browser context; console errors, page errors and HTTP error
  responses (a 404 of a missing stylesheet included) fail the test, unless the test declared that
  status with ``browser_log.expect_status(...)``. A failed test leaves a screenshot in
  ``tests/screenshots/<test name>.png`` (``REMANENCE_SCREENSHOTS=always`` keeps one for every test).

Without ``/usr/bin/chromium`` the folder is skipped, except in CI (``CI=true`` or
``REMANENCE_REQUIRE_BROWSER=1``), where a missing chromium fails the tests. The terminal summary
says in one line whether the browser tests ran, and if not, why.

The database is shared by the whole session (one server): tests create their own users and
compounds with distinct names and structures instead of assuming an empty registry.
"""

from __future__ import annotations

import itertools
import os
import re
import socket
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator, Optional

import pytest
from sqlalchemy.engine import Engine
from sqlmodel import Session

from server.db import upgrade
from server.models import BatchCreate, CompoundCreate, ScaffoldCreate, SideChainSpec
from server.services import accounts, barriers, measurements, registry, status
from server.settings import Settings
from tests.factories import PASSWORD

HERE = Path(__file__).resolve().parent
CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
MISSING_REASON = "Debian chromium not installed: apt-get install chromium"
REQUIRE_BROWSER = (os.environ.get("CI", "").strip().lower() == "true"
                   or os.environ.get("REMANENCE_REQUIRE_BROWSER", "") == "1")
SCREENSHOTS = HERE.parent / "screenshots"
ALWAYS_SCREENSHOT = os.environ.get("REMANENCE_SCREENSHOTS", "") == "always"
TIMEOUT_MS = 10_000  # a page that needs longer than this on a local server is itself a failure

LOG_KEY = pytest.StashKey["BrowserLog"]()
_outcomes = {"passed": 0, "failed": 0, "xfailed": 0, "xpassed": 0, "skipped": 0, "chromium": ""}
_skip_reasons: set[str] = set()


def _in_folder(item: pytest.Item) -> bool:
    return HERE in Path(item.path).parents


# --- collection, reports, summary --------------------------------------------------------------


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if CHROMIUM.exists() or REQUIRE_BROWSER:
        return  # in CI a missing chromium fails in the `browser` fixture instead of skipping
    skip = pytest.mark.skip(reason=MISSING_REASON)
    for item in items:
        if _in_folder(item):
            item.add_marker(skip)


@pytest.hookimpl(wrapper=True)
def pytest_runtest_makereport(item: pytest.Item, call: pytest.CallInfo):
    report = yield
    if report.when == "call":
        log: Optional[BrowserLog] = item.stash.get(LOG_KEY, None)
        if log is not None and log.problems:
            text = "browser reported errors:\n" + "\n".join(f"  - {p}" for p in log.problems)
            if report.passed:
                report.outcome = "failed"
                report.longrepr = text
            else:
                report.sections.append(("browser log", text))
    setattr(item, f"rep_{report.when}", report)  # read by the `page` fixture to decide on a screenshot
    return report


def pytest_runtest_logreport(report: pytest.TestReport) -> None:
    if hasattr(report, "wasxfail"):
        if report.when == "call" or report.skipped:
            _outcomes["xfailed" if report.skipped else "xpassed"] += 1
    elif report.when == "call":
        _outcomes["passed" if report.passed else "failed"] += 1
    elif report.failed:
        _outcomes["failed"] += 1
    elif report.skipped:
        _outcomes["skipped"] += 1
        reason = report.longrepr[2] if isinstance(report.longrepr, tuple) else str(report.longrepr)
        _skip_reasons.add(reason.removeprefix("Skipped: "))


def pytest_terminal_summary(terminalreporter, exitstatus, config) -> None:  # noqa: ANN001 - pytest objects
    ran = sum(_outcomes[k] for k in ("passed", "failed", "xfailed", "xpassed"))
    if ran and not _outcomes["chromium"] and not CHROMIUM.exists():
        line = f"browser tests did not run and FAIL (CI requires them): {MISSING_REASON}"
    elif ran:
        counts = ", ".join(f"{_outcomes[k]} {k}" for k in ("passed", "failed", "xfailed", "xpassed")
                           if _outcomes[k] or k in ("passed", "failed"))
        line = f"browser tests ran: {counts} (chromium {_outcomes['chromium'] or '?'} at {CHROMIUM})"
    elif _outcomes["skipped"]:
        line = f"browser tests did not run: {'; '.join(sorted(_skip_reasons))}"
    else:
        line = "browser tests did not run: none selected"
    if _outcomes["skipped"] and ran:
        line += f"; {_outcomes['skipped']} skipped"
    terminalreporter.write_line(line, bold=True, red=bool(_outcomes["failed"]))


# --- the live server ---------------------------------------------------------------------------


@dataclass
class LiveServer:
    """A running Remanence server and direct access to its services."""

    url: str
    settings: Settings
    engine: Engine

    def __post_init__(self) -> None:
        self._seq = itertools.count(1)

    def unique(self, stem: str) -> str:
        return f"{stem}{next(self._seq)}"

    def session(self) -> Session:
        return Session(self.engine)

    def user(self, role: str = "member", name: Optional[str] = None) -> str:
        """Create an account (password ``tests.factories.PASSWORD``); returns the user name."""
        name = name or self.unique(role)
        with self.session() as s:
            accounts.create_user(session=s, username=name, password=PASSWORD, role=role, actor="browser-test")
        return name

    def token(self, scope: str = "write", kinds: Optional[list[str]] = None) -> str:
        with self.session() as s:
            _, secret = accounts.create_token(session=s, name=self.unique("browser-pc-"), scope=scope, kinds=kinds,
                                              actor="browser-test")
        return secret

    def compound(self, smiles: str, label: str = "", *, scaffold: Optional[str] = None, notes: str = "",
                 embargoed: bool = False) -> str:
        """Register a compound from a SMILES (optionally filed under ``scaffold``); returns its code."""
        with self.session() as s:
            c = registry.register_compound(session=s, settings=self.settings,
                                           data=CompoundCreate(smiles=smiles, label=label, scaffold=scaffold,
                                                               notes=notes, embargoed=embargoed),
                                           actor="browser-test")
            return c.code

    def built(self, scaffold: str, kind: str, carbons: int, label: str = "", *, notes: str = "",
              embargoed: bool = False) -> str:
        """Register ``scaffold`` with a linear ``kind`` chain of ``carbons`` at every attachment point."""
        with self.session() as s:
            c = registry.register_compound(
                session=s, settings=self.settings,
                data=CompoundCreate(scaffold=scaffold, side_chain=SideChainSpec(kind=kind, carbons=carbons),
                                    label=label, notes=notes, embargoed=embargoed),
                actor="browser-test")
            return c.code

    def coalescence(self, compound_code: str, tc_K: float, dnu_Hz: float) -> float:
        """Add a measured (coalescence) barrier through the service; returns dG in kcal/mol."""
        with self.session() as s:
            row = barriers.add_barrier(session=s, compound=registry.get_compound(s, compound_code),
                                       data=barriers.CoalescenceIn(method="coalescence", tc_K=tc_K, dnu_Hz=dnu_Hz),
                                       actor="browser-test")
            return row.dg_kcal_mol

    def public_status(self, enabled: bool) -> None:
        with self.session() as s:
            status.set_public_status(session=s, enabled=enabled, actor="browser-test")

    def batch(self, compound_code: str, **fields) -> str:
        with self.session() as s:
            compound = registry.get_compound(s, compound_code)
            b = registry.add_batch(session=s, compound=compound, data=BatchCreate(**fields), actor="browser-test")
            return b.code

    def measurement(self, batch_code: str, kind: str, raw: bytes, filename: str, **form: str) -> int:
        """Upload an instrument file through the service (as an instrument PC would); returns its id."""
        with self.session() as s:
            batch = registry.get_batch(s, batch_code)
            m, _ = measurements.upload_measurement(session=s, batch=batch, kind_name=kind, raw=raw, filename=filename,
                                                   form=form, actor="browser-test")
            return m.id

    def measurement_ids(self, batch_code: str) -> list[int]:
        with self.session() as s:
            rows, _ = measurements.list_measurements(s, batch=batch_code)
            return sorted(m.id for m in rows)

    def scaffold(self, code: str, name: str, smiles: str) -> str:
        with self.session() as s:
            return registry.create_scaffold(session=s, data=ScaffoldCreate(code=code, name=name, smiles=smiles),
                                            actor="browser-test").code


@pytest.fixture(scope="session")
def live(tmp_path_factory) -> Iterator[LiveServer]:
    import uvicorn

    from server.app import create_app

    folder = tmp_path_factory.mktemp("live")
    url = f"sqlite:///{folder / 'remanence.db'}"
    upgrade(url)
    settings = Settings(data_dir=folder, database_url=url, secret_key="browser-test-secret-not-for-production",
                        embedded_worker=False).resolved()
    app = create_app(settings)

    # Bind first and hand the socket to uvicorn: the port is free and ours, no race.
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    config = uvicorn.Config(app, log_level="warning", access_log=False, lifespan="on", ws="none",
                            loop="asyncio", http="h11")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, name="uvicorn-live", daemon=True)
    thread.start()
    deadline = time.monotonic() + 15
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            server.should_exit = True
            pytest.fail("the live uvicorn server did not start")
        time.sleep(0.02)
    try:
        yield LiveServer(url=f"http://127.0.0.1:{port}", settings=settings, engine=app.state.engine)
    finally:
        server.should_exit = True
        thread.join(timeout=10)
        sock.close()


# --- chromium and pages ------------------------------------------------------------------------


@pytest.fixture(scope="session")
def browser():
    if not CHROMIUM.exists():
        if REQUIRE_BROWSER:
            pytest.fail(f"CI requires the browser tests: {MISSING_REASON}")
        pytest.skip(MISSING_REASON)
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        chromium = pw.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        _outcomes["chromium"] = chromium.version
        try:
            yield chromium
        finally:
            chromium.close()


class BrowserLog:
    """What went wrong in the page: console errors, uncaught exceptions, HTTP error responses."""

    def __init__(self) -> None:
        self.problems: list[str] = []
        self._expected_status: set[int] = set()

    def expect_status(self, status: int) -> None:
        """Declare an HTTP error status this test provokes on purpose (e.g. 422 for a bad file)."""
        self._expected_status.add(status)

    def _expected_console(self, text: str) -> bool:
        # Chromium logs every non-2xx load as "Failed to load resource: ... status of 422 (...)".
        m = re.search(r"status of (\d{3})", text)
        return bool(m) and int(m.group(1)) in self._expected_status

    def on_console(self, msg) -> None:  # noqa: ANN001 - playwright ConsoleMessage
        if msg.type == "error" and not self._expected_console(msg.text):
            where = msg.location.get("url", "") if msg.location else ""
            self.problems.append(f"console error: {msg.text}" + (f" ({where})" if where else ""))

    def on_pageerror(self, exc) -> None:  # noqa: ANN001 - playwright Error
        self.problems.append(f"page error: {exc}")

    def on_response(self, response) -> None:  # noqa: ANN001 - playwright Response
        if response.status >= 400 and response.status not in self._expected_status:
            self.problems.append(f"HTTP {response.status} for {response.request.method} {response.url}")


@pytest.fixture
def browser_log(request) -> BrowserLog:
    log = BrowserLog()
    request.node.stash[LOG_KEY] = log
    return log


def _screenshot_name(nodename: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", nodename).strip("_") + ".png"


@pytest.fixture
def page(request, browser, live, browser_log):
    context = browser.new_context(base_url=live.url, viewport={"width": 1280, "height": 900})
    context.set_default_timeout(TIMEOUT_MS)
    pg = context.new_page()
    pg.on("console", browser_log.on_console)
    pg.on("pageerror", browser_log.on_pageerror)
    pg.on("response", browser_log.on_response)
    try:
        yield pg
    finally:
        failed = any(getattr(getattr(request.node, f"rep_{when}", None), "failed", False)
                     for when in ("setup", "call"))
        if failed or ALWAYS_SCREENSHOT:
            SCREENSHOTS.mkdir(parents=True, exist_ok=True)
            pg.screenshot(path=str(SCREENSHOTS / _screenshot_name(request.node.name)), full_page=True)
        context.close()


@pytest.fixture
def login(page, live):
    """Create an account with ``role`` and log ``page`` in through the login form; returns the user name."""
    from playwright.sync_api import expect

    def _login(role: str = "member") -> str:
        name = live.user(role)
        page.goto("/login")
        page.get_by_label("User name").fill(name)
        page.get_by_label("Password").fill(PASSWORD)
        page.get_by_role("button", name="Log in").click()
        expect(page).to_have_url(re.compile(r"/compounds$"))
        return name

    return _login
