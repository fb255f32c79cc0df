"""A chemist registers a target, finds it on the planning page, claims it, records a route step; the
pages fit a 1440 px desktop and a 390 px phone without sideways scrolling (Debian chromium)."""

from __future__ import annotations

import re

import pytest

pytest.importorskip("playwright")
from playwright.sync_api import Page, expect  # noqa: E402

from server import hazards  # noqa: E402


def _fits(page: Page) -> bool:
    return page.evaluate("() => document.documentElement.scrollWidth <= document.documentElement.clientWidth + 1")


def test_target_to_claim_to_route_step(page: Page, live, login):
    login("member")
    page.goto("/compounds/new")
    page.get_by_label("SMILES or MOL block").fill("CCCCCOc1ccc(OCCCCC)cc1")
    page.get_by_role("checkbox", name=re.compile("Planned")).check()
    page.get_by_label("Rationale").fill("pentyloxy analogue to close the gap")
    page.get_by_role("button", name="Register").click()
    expect(page.locator("#planning h2")).to_contain_text("planned")
    code = page.url.rsplit("/", 1)[1]
    page.goto("/planning")
    row = page.locator(f"#targets tr[data-code='{code}']")
    expect(row).to_contain_text("pentyloxy analogue")
    expect(page.locator(".cautions .caution")).to_have_count(len(hazards.CAMPAIGN_CAUTIONS))
    row.get_by_role("button", name="Claim").click()
    expect(page.locator(f"#targets tr[data-code='{code}']")).to_contain_text("in synthesis")
    for width in (1440, 390):
        page.set_viewport_size({"width": width, "height": 900})
        page.goto("/planning")
        assert _fits(page), f"/planning scrolls sideways at {width} px"
    batch = live.batch(code, state="made")
    page.set_viewport_size({"width": 1440, "height": 900})
    page.goto(f"/planning/routes/{batch}")
    page.get_by_text("Add a step").click()
    page.get_by_label(re.compile("What is done")).fill("etherify the hydroquinone")
    page.get_by_label(re.compile("Reagents, one a line")).fill("1-bromopentane; 2.4 mmol; 2.4")
    page.get_by_label("Temperature").fill("80 degC")
    page.get_by_role("button", name="Add step").click()
    expect(page.locator("#steps .no-hazard-data")).to_have_text([hazards.NO_DATA])
    page.set_viewport_size({"width": 390, "height": 900})
    page.reload()
    assert _fits(page), "the route page scrolls sideways at 390 px"
