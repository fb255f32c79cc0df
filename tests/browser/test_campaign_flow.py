"""Campaign views in a real browser: registry filters and sorting, CSV export, the public status
page's embargo, the structure-property explorer and the side-chain outcome map.

One small invented campaign (eight derivatives of two parent bowls, built through the live
server's services) serves every test here. Its compounds share a random token in their notes,
so the text filter ``q=<token>`` isolates them from what other browser tests register in the
same session database.

Expected rows and counts are worked out by hand from the table below (which chain sits on
which bowl, which loop each compound got), not read back from the code under test. Verdicts
follow the rule set of ``server.analysis.verdict`` as its docstring states it: a saturated loop
judged ferroelectric without a known structure -> "switches, phase structure unknown"; a loop
that is an ellipse (lossy dielectric, Scott 2008) -> "no switching seen"; nothing -> "untested".
"""

from __future__ import annotations

import csv
import io
import re
import uuid
from dataclasses import dataclass
from typing import Optional
from urllib.parse import parse_qs, urlsplit

import pytest
from playwright.sync_api import Page, expect
from sqlmodel import select

from server.verdict_codes import LABELS
from server.chem.scaffold import PARENT_BOWLS
from server.ingest.table import to_csv_bytes
from server.models import Compound
from server.synth.ferro import leaky_capacitor, miller_loop
from tests.factories import PASSWORD

pytestmark = pytest.mark.browser

SWITCHING, NO_SWITCHING, UNTESTED = "loop_switching_only", "no_switching_seen", "untested"


@dataclass(frozen=True)
class Spec:
    key: str
    scaffold: str  # "A" (CH2-bridged bowl) or "B" (Se-bridged bowl)
    kind: str
    carbons: int
    label: str
    loop: Optional[str] = None  # "ferro" (Miller tanh loop) or "lossy" (ellipse of a lossy dielectric)
    pr_uC_cm2: float = 8.0
    coalescence: Optional[tuple[float, float]] = None  # (Tc in K, dnu in Hz)
    embargoed: bool = False


# Labels start with distinct letters, in an order unrelated to the registration order.
SPECS = (
    Spec("a_c4", "A", "alkoxy", 4, "amber", coalescence=(240.0, 80.0)),
    Spec("a_c6", "A", "alkoxy", 6, "fern", loop="ferro", coalescence=(298.15, 100.0)),
    Spec("a_c8", "A", "alkoxy", 8, "cobalt", loop="lossy", coalescence=(260.0, 120.0)),
    Spec("a_s6", "A", "alkylthio", 6, "dune"),
    Spec("b_c6", "B", "alkoxy", 6, "heron", loop="ferro", pr_uC_cm2=6.0, coalescence=(280.0, 90.0)),
    Spec("b_al6", "B", "alkyl", 6, "birch", coalescence=(230.0, 60.0)),
    Spec("b_c10", "B", "alkoxy", 10, "iris under embargo", loop="ferro", pr_uC_cm2=12.0,
         coalescence=(300.0, 150.0), embargoed=True),
)
# Registered from a SMILES and filed under scaffold A: the CH2 bowl with four hexyloxy and two
# butoxy chains; a mixture, so the outcome map counts it in a "C4 / C6 alkoxy, mixed" row of its own.
MIXED_KEY, MIXED_LABEL = "a_mix", "glacier"
LABEL_OF = {s.key: s.label for s in SPECS} | {MIXED_KEY: MIXED_LABEL}
VERDICT_OF = {s.key: {"ferro": SWITCHING, "lossy": NO_SWITCHING, None: UNTESTED}[s.loop] for s in SPECS} | {
    MIXED_KEY: UNTESTED}


def _mixed_smiles() -> str:
    smiles = PARENT_BOWLS["CH2"]
    for n in (1, 2, 3, 4):
        smiles = smiles.replace(f"[*:{n}]", "OCCCCCC")
    for n in (5, 6):
        smiles = smiles.replace(f"[*:{n}]", "OCCCC")
    return smiles


@dataclass(frozen=True)
class Campaign:
    token: str
    scaffold: dict[str, str]  # "A"/"B" -> scaffold code
    code: dict[str, str]  # spec key -> compound code

    def key_of(self, code: str) -> str:
        return {v: k for k, v in self.code.items()}[code]


@pytest.fixture(scope="module")
def campaign(live) -> Campaign:
    token = f"cf{uuid.uuid4().hex[:10]}"
    scaffold = {"A": live.scaffold(live.unique("CF-CH2-"), "CH2-bridged bowl (campaign test)", PARENT_BOWLS["CH2"]),
                "B": live.scaffold(live.unique("CF-SE-"), "Se-bridged bowl (campaign test)", PARENT_BOWLS["Se"])}
    notes = f"campaign-flow fixture {token}"
    code: dict[str, str] = {}
    for s in SPECS:
        if s.embargoed:
            continue  # registered last, so it is the newest compound on the status page
        code[s.key] = live.built(scaffold[s.scaffold], s.kind, s.carbons, s.label, notes=notes)
    code[MIXED_KEY] = live.compound(_mixed_smiles(), MIXED_LABEL, scaffold=scaffold["A"], notes=notes)
    for s in SPECS:
        if s.embargoed:
            code[s.key] = live.built(scaffold[s.scaffold], s.kind, s.carbons, s.label, notes=notes, embargoed=True)
    for s in SPECS:
        if s.loop is None and s.coalescence is None:
            continue
        batch = live.batch(code[s.key], state="made")
        if s.loop == "ferro":
            # Miller tanh loop, Ps > Pr, Ec 50 kV/cm, driven to 300 kV/cm: saturated, judged ferroelectric.
            frame = miller_loop(s.pr_uC_cm2 + 2.0, s.pr_uC_cm2, 50.0, 300.0)
            live.measurement(batch, "pe_loop", to_csv_bytes(frame, {"temperature": "300 K"}), "loop_300K.csv")
        elif s.loop == "lossy":
            # eps' 5, eps'' 1.5 at 100 Hz: an ellipse, no switching (Scott 2008).
            frame = leaky_capacitor(5.0, 1.5, 100.0, frequency_Hz=100.0)
            live.measurement(batch, "pe_loop", to_csv_bytes(frame, {"temperature": "300 K", "frequency": "100 Hz"}),
                             "ellipse_300K.csv")
        if s.coalescence is not None:
            live.coalescence(code[s.key], *s.coalescence)
    return Campaign(token=token, scaffold=scaffold, code=code)


@pytest.fixture(scope="module")
def member_cookies(live, browser) -> list[dict]:
    """One member logged in through the login form once; each test's page gets the session cookie
    (logging in per test would spend most of this module's time on Argon2 and redirects)."""
    name = live.user("member")
    context = browser.new_context(base_url=live.url)
    try:
        tab = context.new_page()
        tab.goto("/login?next=/queue")
        tab.get_by_label("User name").fill(name)
        tab.get_by_label("Password").fill(PASSWORD)
        tab.get_by_role("button", name="Log in").click()
        expect(tab).to_have_url(re.compile(r"/queue$"))
        return context.cookies()
    finally:
        context.close()


@pytest.fixture
def member(page: Page, member_cookies) -> Page:
    page.context.add_cookies(member_cookies)
    return page


def _watch(tab: Page, browser_log) -> None:  # noqa: ANN001 - the conftest's BrowserLog
    """The ``page`` fixture's error watch (console, page errors, HTTP >= 400) for another tab."""
    tab.on("console", browser_log.on_console)
    tab.on("pageerror", browser_log.on_pageerror)
    tab.on("response", browser_log.on_response)


def _table_codes(page: Page) -> list[str]:
    return page.locator("#compound-table table.registry tbody tr").evaluate_all(
        "rows => rows.map(r => r.dataset.code)")


def _codes(campaign: Campaign, *keys: str) -> list[str]:
    return [campaign.code[k] for k in keys]


# --- the registry table ------------------------------------------------------------------------


def test_filter_updates_table_in_place_and_the_link_reproduces_it(page: Page, member, campaign, browser_log):
    page.goto(f"/compounds?q={campaign.token}")
    rows = page.locator("#compound-table table.registry tbody tr")
    expect(rows).to_have_count(8)
    page.evaluate("() => { window.__sameDocument = 'kept'; }")

    form = page.locator("form#filters")
    form.locator('select[name="chain_kind"]').select_option("alkoxy")
    form.get_by_label("Carbons from").fill("5")
    form.get_by_label("Carbons from").press("Tab")  # change fires on leaving the field
    form.locator('input[name="c_max"]').fill("8")
    form.locator('input[name="c_max"]').press("Tab")

    # An alkoxy chain of 5-8 carbons: C6 (A), C8 (A), C6 (B), and the mixed one (its hexyloxy
    # chains qualify); not the butoxy, the C10, the alkylthio or the alkyl derivative.
    expected = {campaign.code[k] for k in ("a_c6", "a_c8", "b_c6", MIXED_KEY)}
    expect(rows).to_have_count(len(expected))
    assert set(_table_codes(page)) == expected
    expect(page.locator("#compound-table .count")).to_have_attribute("data-total", str(len(expected)))
    assert page.evaluate("() => window.__sameDocument") == "kept", "the page reloaded instead of swapping the table"

    # hx-push-url put the filters in the address bar.
    query = parse_qs(urlsplit(page.url).query)
    assert urlsplit(page.url).path == "/compounds"
    assert query["q"] == [campaign.token]
    assert query["chain_kind"] == ["alkoxy"] and query["c_min"] == ["5"] and query["c_max"] == ["8"]

    # A colleague opens the link in a new tab: same rows, same filter values.
    shared = page.context.new_page()
    _watch(shared, browser_log)
    shared.goto(page.url)
    assert shared.evaluate("() => window.__sameDocument") is None  # a fresh document
    expect(shared.locator("#compound-table table.registry tbody tr")).to_have_count(len(expected))
    assert set(_table_codes(shared)) == expected
    sform = shared.locator("form#filters")
    expect(sform.locator('select[name="chain_kind"]')).to_have_value("alkoxy")
    expect(sform.get_by_label("Carbons from")).to_have_value("5")
    expect(sform.locator('input[name="c_max"]')).to_have_value("8")
    expect(sform.locator('input[name="q"]')).to_have_value(campaign.token)
    shared.close()


def test_sort_by_clicking_a_column_header(page: Page, member, campaign):
    page.goto(f"/compounds?q={campaign.token}")
    # Default order: newest registration first.
    newest_first = sorted(campaign.code.values(), reverse=True)
    expect(page.locator("#compound-table table.registry tbody tr")).to_have_count(8)
    assert _table_codes(page) == newest_first

    by_label = sorted(campaign.code, key=lambda k: LABEL_OF[k])
    label_th = page.locator("#compound-table thead th", has_text="Label")
    expect(label_th).not_to_have_attribute("aria-sort", re.compile(".*"))
    page.locator("#compound-table thead a", has_text="Label").click()
    expect(page).to_have_url(re.compile(r"sort=label&dir=desc"))
    # aria-sort sits on the column header cell, where ARIA honours it.
    expect(page.locator("#compound-table thead th", has_text="Label")).to_have_attribute("aria-sort", "descending")
    assert _table_codes(page) == _codes(campaign, *reversed(by_label))

    page.locator("#compound-table thead a", has_text="Label").click()
    expect(page).to_have_url(re.compile(r"sort=label&dir=asc"))
    expect(page.locator("#compound-table thead th", has_text="Label")).to_have_attribute("aria-sort", "ascending")
    assert _table_codes(page) == _codes(campaign, *by_label)
    expect(page.locator("#compound-table thead th", has_text="Code")).not_to_have_attribute("aria-sort",
                                                                                           re.compile(".*"))

    # The measured-barrier column of the derivative with Tc 298.15 K, dnu 100 Hz: Gutowsky-Holm
    # coalescence gives dG 59.629 kJ/mol = 14.25 kcal/mol (docs/methods.md, computed check;
    # J. Chem. Phys. 25, 1228 (1956)); the table shows three significant digits.
    row = page.locator(f'tr[data-code="{campaign.code["a_c6"]}"]')
    barrier_col = page.locator("#compound-table thead th").evaluate_all(
        "ths => ths.findIndex(th => th.textContent.includes('Barrier, measured'))")
    expect(row.locator("td").nth(barrier_col)).to_have_text("14.3")


def test_sorted_column_header_cell_carries_aria_sort(page: Page, member, campaign):
    page.goto(f"/compounds?q={campaign.token}&sort=label&dir=asc")
    expect(page.locator("#compound-table thead th[aria-sort]")).to_have_count(1)
    assert page.locator("#compound-table thead a[aria-sort]").count() == 0


def test_export_csv_matches_the_table(page: Page, member, campaign):
    page.goto(f"/compounds?q={campaign.token}&chain_kind=alkoxy&sort=label&dir=asc")
    # Alkoxy derivatives: C4, C6, C8 on A, the mixed one, C6 and C10 on B.
    expect(page.locator("#compound-table table.registry tbody tr")).to_have_count(6)
    shown = _table_codes(page)
    with page.expect_download() as info:
        page.locator("#compound-table .tablehead").get_by_role("link", name="CSV", exact=True).click()
    download = info.value
    assert download.suggested_filename == "remanence-compounds.csv"
    with open(download.path(), encoding="utf-8") as fh:
        rows = list(csv.DictReader(io.StringIO(fh.read())))
    assert [r["code"] for r in rows] == shown
    assert [r["label"] for r in rows] == [LABEL_OF[campaign.key_of(c)] for c in shown]
    by_code = {r["code"]: r for r in rows}
    # Gutowsky-Holm check value (docs/methods.md): Tc 298.15 K, dnu 100 Hz -> 59.629 kJ/mol / 4.184 = 14.2517 kcal/mol.
    assert float(by_code[campaign.code["a_c6"]]["barrier measured (kcal/mol)"]) == pytest.approx(14.2517, abs=2e-3)
    # Hand count: CH2 bowl C21H12 with 6 H replaced by O-C6H13 -> C57H84O6.
    assert by_code[campaign.code["a_c6"]]["formula (plain text)"] == "C57H84O6"
    assert by_code[campaign.code["a_c6"]]["verdict code"] == SWITCHING
    assert by_code[campaign.code["a_c8"]]["verdict code"] == NO_SWITCHING


# --- the public status page --------------------------------------------------------------------


def test_public_status_page_keeps_the_embargo(page: Page, browser, live, login, campaign, browser_log):
    login("admin")
    page.goto("/status")
    panel = page.locator("#publish")
    expect(panel).to_contain_text("Private")
    expect(panel.locator("#public-url")).to_have_value(re.compile(r"/status$"))
    panel.get_by_label("readable without login").check()
    browser_log.expect_status(422)
    panel.get_by_role("button", name="Save").click()
    # Publishing asks for the confirmation first (issue 22: a visible, confirmed step).
    expect(page.get_by_role("alert")).to_contain_text("confirmation")
    panel.get_by_label("readable without login").check()
    panel.get_by_label("I have looked at the visitor's preview").check()
    with page.expect_navigation():
        panel.get_by_role("button", name="Save").click()
    expect(page.get_by_label("readable without login")).to_be_checked()
    expect(page.locator("#publish")).to_contain_text("Public:")

    embargoed = campaign.code["b_c10"]
    with live.session() as s:
        secret = s.exec(select(Compound).where(Compound.code == embargoed)).one()
        open_hit = s.exec(select(Compound).where(Compound.code == campaign.code["a_c6"])).one()
        hidden = {"label": secret.label, "SMILES": secret.smiles, "InChIKey": secret.inchikey,
                  "formula": secret.formula}

    context = browser.new_context(base_url=live.url)  # no cookies: a visitor without a login
    try:
        visitor = context.new_page()
        _watch(visitor, browser_log)
        requests: list[str] = []
        visitor.on("request", lambda r: requests.append(r.url))
        visitor.goto("/status")
        expect(visitor).to_have_url(re.compile(r"/status$"))
        hits = visitor.locator("#hits")
        # The embargoed compound is the strongest hit (Pr 12 uC/cm^2): its code is there ...
        expect(hits).to_contain_text(embargoed)
        # ... as is an open hit with its label, so the page does show labels where it may.
        expect(hits).to_contain_text(f"{open_hit.code} {open_hit.label}")
        html = visitor.content()
        assert embargoed in html
        for what, value in hidden.items():
            assert value and value not in html, f"the public status page shows the embargoed compound's {what}"
        assert not [u for u in requests if "structure.svg" in u], f"structure images requested: {requests}"
        assert not visitor.locator(f'a[href="/compounds/{embargoed}"]').count()
    finally:
        context.close()
        live.public_status(False)


# --- explorer and outcome map ------------------------------------------------------------------


def test_explorer_scatter_hover_shows_structure_click_opens_compound(page: Page, member, campaign):
    page.goto(f"/explorer?q={campaign.token}")  # x: side-chain carbons, y: measured barrier, by verdict
    plot = page.locator('[data-figure="explorer-figure"]')
    expect(plot.locator("svg.main-svg").first).to_be_visible()
    # Compounds with both a chain and a measured barrier: six. By verdict: switching (C6 A, C6 B,
    # C10 B) 3, untested (C4 A, alkyl C6 B) 2, no switching (C8 A) 1.
    expected = {f"{LABELS[SWITCHING]} (3)", f"{LABELS[UNTESTED]} (2)", f"{LABELS[NO_SWITCHING]} (1)"}
    names = plot.evaluate("el => el.data.map(t => t.name)")
    assert set(names) == expected and len(names) == 3
    expect(plot.locator(".scatterlayer .trace")).to_have_count(3)
    expect(plot.locator(".scatterlayer path.point")).to_have_count(6)

    # The C8 derivative is the only point at x = 8, so the hover cannot land on a neighbour.
    target = campaign.code["a_c8"]
    trace, index = plot.evaluate(
        """(el, code) => { for (let i = 0; i < el.data.length; i++) {
             const j = el.data[i].customdata.findIndex(c => c[0] === code);
             if (j >= 0) { return [i, j]; } } return null; }""", target)
    point = plot.locator(".scatterlayer .trace").nth(trace).locator("path.point").nth(index)
    box = point.bounding_box()
    x, y = box["x"] + box["width"] / 2, box["y"] + box["height"] / 2
    page.mouse.move(x - 30, y - 30)
    page.mouse.move(x, y, steps=5)
    # plots.js makes the tip itself an <img class="structure-tip"> (no wrapper element).
    tip = page.locator("img.structure-tip")
    expect(tip).to_be_visible()
    expect(tip).to_have_attribute("src", re.compile(rf"/api/v1/compounds/{target}/structure\.svg\?thumbnail=true$"))
    expect(tip).to_have_attribute("alt", f"structure of {target}")
    page.wait_for_function("img => img.complete && img.naturalWidth > 0", arg=tip.element_handle())

    page.mouse.click(x, y)
    expect(page).to_have_url(re.compile(rf"/compounds/{target}$"))
    expect(page.locator("h1")).to_contain_text(target)


def _outcome_cell(page: Page, row_title: str, column: str):
    table = page.locator("table#outcome-map")
    col = table.locator("thead th").evaluate_all("(ths, name) => ths.findIndex(th => th.textContent.trim() === name)",
                                                column)
    assert col > 0, f"no column {column}"
    row = table.locator("tbody tr", has=page.locator("th[scope=row]", has_text=re.compile(rf"^{row_title}$")))
    expect(row).to_have_count(1)
    return row.locator("th, td").nth(col)


def test_outcome_map_cell_opens_its_rows(page: Page, member, campaign):
    page.goto(f"/outcomes?q={campaign.token}")
    table = page.locator("table#outcome-map")
    # One row per set of side chains, sorted by kind then carbons; the mixture has a row of its own.
    expect(table.locator("tbody th[scope=row]")).to_have_text(
        ["C4 alkoxy", "C4 / C6 alkoxy, mixed", "C6 alkoxy", "C8 alkoxy", "C10 alkoxy", "C6 alkyl", "C6 alkylthio"])
    expect(table.locator("thead th")).to_have_text(["Side chain", campaign.scaffold["A"], campaign.scaffold["B"]])

    cell = _outcome_cell(page, "C6 alkoxy", campaign.scaffold["A"])
    # Only the pure hexyloxy derivative (switches); the mixture is not counted under its most frequent chain.
    expect(cell).to_have_attribute("data-best", SWITCHING)
    lines = cell.locator(".count-line").evaluate_all("els => els.map(e => [e.title, e.textContent.trim()])")
    assert [(title, text.split()[0]) for title, text in lines] == [(LABELS[SWITCHING], "1")], lines
    mixed = _outcome_cell(page, "C4 / C6 alkoxy, mixed", campaign.scaffold["A"])
    expect(mixed).to_have_attribute("data-best", UNTESTED)
    expect(_outcome_cell(page, "C8 alkoxy", campaign.scaffold["A"])).to_have_attribute("data-best", NO_SWITCHING)
    expect(_outcome_cell(page, "C6 alkylthio", campaign.scaffold["B"])).to_have_class("cell-empty")

    cell.get_by_role("link").click()
    expect(page).to_have_url(re.compile(r"/compounds\?"))
    expect(page.locator("#compound-table table.registry tbody tr")).to_have_count(1)
    assert set(_table_codes(page)) == {campaign.code["a_c6"]}
    expect(page.locator('form#filters input[name="chains"]')).to_have_value("alkoxy:6")
    expect(page.locator("form#filters").get_by_label("Scaffold")).to_have_value(campaign.scaffold["A"])


def test_outcome_map_cell_count_matches_the_table_it_opens(page: Page, member, campaign):
    page.goto(f"/outcomes?q={campaign.token}")
    cell = _outcome_cell(page, "C4 alkoxy", campaign.scaffold["A"])
    expect(cell.locator("a")).to_have_attribute("title", "1 derivative(s)")
    cell.get_by_role("link").click()
    expect(page).to_have_url(re.compile(r"/compounds\?"))
    page.wait_for_load_state()
    assert set(_table_codes(page)) == {campaign.code["a_c4"]}, "the cell's table lists more than the cell counts"
