"""Benchmark: how soon a plot page shows its figure in a real browser on a slow machine and line.

    python -m bench.bench_pages            prints a markdown table (and writes bench/results/pages.md)

Setting: Debian's ``/usr/bin/chromium`` through Playwright, the CPU slowed 4x and the network
held to 10 Mbit/s both ways with 20 ms latency (Chrome DevTools Protocol
``Emulation.setCPUThrottlingRate`` and ``Network.emulateNetworkConditions``), against a local
server over a fresh SQLite database holding one compound, one batch and one P-E loop (the Miller
et al. tanh model, J. Appl. Phys. 68, 6463 (1990), Pr 6 uC/cm^2, Ec 50 kV/cm).

Measured: on the measurement page, the time from navigation start until the figure's SVG is
drawn (``[data-figure] svg.main-svg``), first with an empty cache, then again with the cache the
first load filled. Baseline: the same page with the plotting bundle refused (the page without its
figure), time to its ``load`` event, cold and warm. Figure: with figure / without figure, no
agreed target. The bytes that crossed the wire (``transferSize`` of the navigation and every
resource) are reported beside the times.

Measured on the shared 2-core build machine (2026-12-02, other jobs running, so times vary by ~1.7x
between runs; bytes do not): with the full plotly.js bundle and no compression, first load 18.2 s
against 0.66 s without the figure (ratio 28), 4 848 430 bytes; with the gzip-compressed basic bundle,
4.2-7.1 s against 0.9-1.3 s (ratio 4.7-5.7), 410 000 bytes. Second load 3.25 s (ratio 4.2) before,
2.7-3.7 s (ratio 3.1-3.5) after.
"""

from __future__ import annotations

import socket
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

CHROMIUM = "/usr/bin/chromium"
PASSWORD = "bench-password-1234"
THROUGHPUT_BPS = 10e6 / 8  # 10 Mbit/s in bytes per second
LATENCY_MS = 20
CPU_SLOWDOWN = 4
REPEATS = 3


def _server(folder: Path):
    import uvicorn
    from sqlmodel import Session

    from server.app import create_app
    from server.db import upgrade
    from server.ingest.table import to_csv_bytes
    from server.models import BatchCreate, CompoundCreate
    from server.services import accounts, measurements, registry
    from server.settings import Settings
    from server.synth.ferro import miller_loop

    url = f"sqlite:///{folder / 'bench.db'}"
    upgrade(url)
    settings = Settings(data_dir=folder, database_url=url, secret_key="bench-secret-not-for-production",
                        embedded_worker=False).resolved()
    app = create_app(settings)
    with Session(app.state.engine) as s:
        accounts.create_user(session=s, username="bench", password=PASSWORD, role="member", actor="bench")
        compound = registry.register_compound(session=s, settings=settings,
                                              data=CompoundCreate(smiles="COc1ccc(OCCCC)cc1"), actor="bench")
        batch = registry.add_batch(session=s, compound=compound, data=BatchCreate(state="made"), actor="bench")
        m, _ = measurements.upload_measurement(
            session=s, batch=batch, kind_name="pe_loop", filename="loop.csv", form={}, actor="bench",
            raw=to_csv_bytes(miller_loop(8, 6, 50, 150), {"temperature": "300 K"}))
        measurement_id = m.id
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(app, log_level="warning", access_log=False, lifespan="on", ws="none",
                                           loop="asyncio", http="h11"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    while not server.started:
        time.sleep(0.02)
    return server, thread, f"http://127.0.0.1:{port}", f"/measurements/{measurement_id}"


def _transfer_bytes(page) -> int:
    return int(page.evaluate("""() => performance.getEntriesByType('navigation').concat(
        performance.getEntriesByType('resource')).reduce((s, e) => s + (e.transferSize || 0), 0)"""))


def _one_context(browser, base: str, path: str, *, with_figure: bool) -> tuple[list[float], list[int]]:
    """[cold, warm] seconds and [cold, warm] bytes for one fresh browser context."""
    context = browser.new_context(base_url=base, viewport={"width": 1440, "height": 900})
    page = context.new_page()
    page.goto("/login")
    page.fill("input[name=username]", "bench")
    page.fill("input[name=password]", PASSWORD)
    page.locator("form[action='/login'] button[type=submit]").click()
    page.wait_for_load_state("load")
    if not with_figure:
        page.route("**/*plotly*", lambda route: route.abort())
    cdp = context.new_cdp_session(page)
    cdp.send("Network.enable")
    cdp.send("Network.emulateNetworkConditions", {"offline": False, "latency": LATENCY_MS,
                                                  "downloadThroughput": THROUGHPUT_BPS,
                                                  "uploadThroughput": THROUGHPUT_BPS})
    cdp.send("Emulation.setCPUThrottlingRate", {"rate": CPU_SLOWDOWN})
    times, sizes = [], []
    for _ in range(2):
        page.goto(path, wait_until="commit")
        if with_figure:
            page.wait_for_selector("[data-figure] svg.main-svg", timeout=120_000)
            times.append(page.evaluate("() => performance.now()") / 1e3)
            page.wait_for_load_state("load")
        else:
            page.wait_for_load_state("load")
            times.append(page.evaluate("() => performance.getEntriesByType('navigation')[0].loadEventEnd") / 1e3)
        sizes.append(_transfer_bytes(page))
    context.close()
    return times, sizes


def run() -> str:
    from playwright.sync_api import sync_playwright

    with tempfile.TemporaryDirectory() as tmp:
        server, thread, base, path = _server(Path(tmp))
        try:
            with sync_playwright() as pw:
                browser = pw.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox", "--disable-gpu"])
                runs = {True: [], False: []}
                for _ in range(REPEATS):
                    for with_figure in (False, True):
                        runs[with_figure].append(_one_context(browser, base, path, with_figure=with_figure))
                browser.close()
        finally:
            server.should_exit = True
            thread.join(timeout=10)
    lines = [f"Measurement page, CPU /{CPU_SLOWDOWN}, {THROUGHPUT_BPS * 8 / 1e6:g} Mbit/s, {LATENCY_MS} ms; "
             f"median of {REPEATS} fresh browser contexts.", "",
             "| load | figure drawn | page without figure | ratio | bytes with figure | bytes without |",
             "|---|---|---|---|---|---|"]
    for i, name in enumerate(("first (empty cache)", "second (warm cache)")):
        fig_s = statistics.median(r[0][i] for r in runs[True])
        bare_s = statistics.median(r[0][i] for r in runs[False])
        fig_b = statistics.median(r[1][i] for r in runs[True])
        bare_b = statistics.median(r[1][i] for r in runs[False])
        lines.append(f"| {name} | {fig_s:.2f} s | {bare_s:.2f} s | {fig_s / bare_s:.2f} | {fig_b:,} | {bare_b:,} |")
    return "\n".join(lines)


def main() -> int:
    text = run()
    print(text)
    out = Path(__file__).resolve().parent / "results"
    out.mkdir(exist_ok=True)
    (out / "pages.md").write_text(text + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
