"""Correcting a mistyped thickness on the measurement page, in a real browser.

The loop is a raw V/Q record of the Miller et al. tanh model (J. Appl. Phys. 68, 6463 (1990)) with
Ec = 50 kV/cm on a 150 µm specimen: E = V / d, so a thickness typed as 15 µm reports Ec ten times
too large, and the correction must bring it back to 50 kV/cm.
"""

from __future__ import annotations

import re

import pytest
from playwright.sync_api import Page, expect

from server.ingest.table import to_csv_bytes
from server.synth.ferro import miller_loop, raw_vq

pytestmark = pytest.mark.browser

EC_KV_CM = 50.0


def _ec_on_page(page: Page) -> float:
    row = page.locator("table.results tr").filter(has=page.locator("th", has_text=re.compile(r"^Ec$")))
    expect(row).to_have_count(1)
    return float(row.locator("td").first.text_content())


def test_correcting_the_thickness_changes_ec(page: Page, live, login):
    code = live.compound("CCCCCCCCCCCCCOc1ccccc1")
    batch = live.batch(code, state="made")
    raw = to_csv_bytes(raw_vq(miller_loop(10, 8, EC_KV_CM, 300), 0.0785, 150.0), {"temperature": "300 K"})
    mid = live.measurement(batch, "pe_loop", raw, "loop.csv", area="0.0785 cm^2", thickness="15 um")
    login("member")
    page.goto(f"/measurements/{mid}")
    assert _ec_on_page(page) == pytest.approx(10 * EC_KV_CM, rel=0.03)

    form = page.locator("#correct form")
    form.get_by_role("textbox", name="Thickness").fill("150 um")
    form.get_by_role("button", name="Store the correction").click()
    expect(page).to_have_url(re.compile(r"/measurements/\d+$"))
    assert page.url.rsplit("/", 1)[-1] != str(mid)
    expect(page.locator("#supersedes")).to_contain_text(f"#{mid}")
    assert _ec_on_page(page) == pytest.approx(EC_KV_CM, rel=0.03)

    # The old measurement stays readable and says it was superseded; it offers no second correction.
    page.goto(f"/measurements/{mid}")
    expect(page.locator("#superseded")).to_be_visible()
    expect(page.locator("#correct")).to_have_count(0)
    assert _ec_on_page(page) == pytest.approx(10 * EC_KV_CM, rel=0.03)


def test_archive_and_restore_from_the_measurement_page(page: Page, live, login):
    code = live.compound("CCCCCCCCCCCCCCOc1ccccc1")
    batch = live.batch(code, state="made")
    raw = to_csv_bytes(miller_loop(10, 7.5, EC_KV_CM, 300), {"temperature": "300 K"})
    mid = live.measurement(batch, "pe_loop", raw, "loop.csv")
    login("member")
    page.goto(f"/measurements/{mid}")
    page.get_by_role("button", name="Archive").click()
    expect(page.locator("#archived")).to_be_visible()
    page.get_by_role("button", name="Restore").click()
    expect(page.locator("#archived")).to_have_count(0)
