"""The registry page fits (issue 22 item 6): no sideways scroll at 1440 and 390 px, and codes, badges and
tags stay on one line each (a wrapped badge draws a broken outline)."""

from __future__ import annotations

import numpy as np
import pytest
from playwright.sync_api import Page, expect

from server.ingest.table import to_csv_bytes
from server.precision import trade_unit
from server.synth.ferro import miller_loop, pund_train

pytestmark = pytest.mark.browser

# Boxes of one line draw one client rectangle; a box broken over lines draws one per line.
BROKEN = """() => [...document.querySelectorAll(
    'table.registry td:first-child a, table.registry .verdict-badge, table.registry .tag')]
  .filter(el => el.getClientRects().length > 1).map(el => el.textContent.trim())"""


@pytest.fixture(scope="module")
def registry(live):
    codes = []
    for n in range(2, 8):  # invented test ethers with long labels; the first one switches
        code = live.compound(f"COc1cccc(O{'C' * n})c1OC", f"fit ether with a rather long label number {n}")
        codes.append(code)
    # an unclassified substituent is summarised by its fragment SMILES, one long word (another test's
    # compound like this once widened the whole table past its card)
    live.compound("COc1cccc(OCC(=O)OCC(=O)OCC(=O)OCC(=O)OCC(=O)OCC(=O)OC)c1OC", "fit ether with an ester chain")
    # one with the longest verdict badge, 'switches, phase unknown' (a saturated loop and a PUND that
    # switches, no structure); the table must fit with it (a CI run once found the badge's column 245 px wide)
    switching = live.compound("COc1cccc(OCCCCCCCCC)c1OC", "fit ether that switches under PUND")
    codes.append(switching)
    for code in (codes[0], switching):
        batch = live.batch(code, state="made")
        live.measurement(batch, "pe_loop", to_csv_bytes(miller_loop(10, 6.0, 50, 300), {"temperature": "300 K"}),
                         "loop.csv")
    train = pund_train(8.0, 10.0, 50.0, 200.0, eps_r_background=6.0, noise_uC_cm2=0.05, points=3000,
                       rng=np.random.default_rng(7), area_cm2=0.00785, thickness_um=100.0)
    live.measurement(batch, "pund", to_csv_bytes(train, {"temperature": "300 K", "area": "0.785 mm^2",
                                                         "thickness": "100 um"}), "pund.csv")
    # a label of one long word must break inside its cell too
    codes.append(live.compound("COc1cccc(OCCCCCCCCCC)c1OC", "fit-ether-" + "x" * 60))
    return codes


@pytest.mark.parametrize("width", (1440, 390))
def test_registry_fits_and_nothing_wraps(page: Page, live, login, registry, width):
    page.set_viewport_size({"width": width, "height": 900})
    login("member")
    page.goto("/compounds")
    expect(page.locator("table.registry tbody tr").first).to_be_visible()
    assert page.evaluate("() => document.documentElement.scrollWidth - document.documentElement.clientWidth") <= 0
    assert page.evaluate(BROKEN) == []
    # headers carry units and temperatures; at desk width the whole table fits its card (no inner scroll)
    expect(page.locator("table.registry thead a#sort-pr")).to_have_accessible_name(
        f"Pr, largest ({trade_unit('µC/cm²')}) at T (K)")
    if width >= 1440:
        assert page.evaluate("() => { const s = document.querySelector('table.registry')"
                             ".closest('.scroll'); return s.scrollWidth - s.clientWidth; }") <= 0
    badge = page.locator(f'table.registry tr[data-code="{registry[6]}"] .verdict-badge')
    expect(badge).to_have_text("switches, phase unknown")
    caption = page.locator("table.registry caption")
    expect(caption).to_contain_text(registry[0].split("-")[0] + "-")
    link = page.get_by_role("link", name=registry[0], exact=True)
    expect(link).to_have_text(registry[0].split("-", 1)[1])
