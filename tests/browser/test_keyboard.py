"""Keyboard use in a real browser (issue 24): Tab reaches the main controls of the compound list, the
compound page and the upload form; Enter and Space activate them; every stop on the way shows a
focus outline (computed style); the skip link leads to the main content."""

from __future__ import annotations

import re

import pytest
from playwright.sync_api import Page, expect

from server.kinds import KINDS

pytestmark = pytest.mark.browser

MAX_TABS = 120

# What the focused element is, and whether it draws a visible focus indicator: an outline of some
# width that is not 'none', or a box shadow (either is a WCAG 2.4.7 focus indicator).
FOCUSED = """() => {
  const el = document.activeElement;
  const cs = getComputedStyle(el);
  const outline = cs.outlineStyle !== 'none' && parseFloat(cs.outlineWidth) > 0;
  return {tag: el.tagName.toLowerCase(), id: el.id || '', name: el.getAttribute('name') || '',
          href: el.getAttribute('href') || '', text: (el.innerText || el.value || '').trim().slice(0, 60),
          type: el.getAttribute('type') || '', visible: outline || cs.boxShadow !== 'none'};
}"""


@pytest.fixture(scope="module")
def site(live):
    code = live.compound("CCOc1ccc(OCCCCCCCC)cc1OCC", "keyboard ether")  # an invented test ether
    return {"code": code, "batch": live.batch(code, state="made")}


def _walk(page: Page, until) -> list[dict]:
    """Tab from the top of the page until ``until(stop)`` holds; every stop on the way."""
    page.locator("body").focus()
    stops = []
    for _ in range(MAX_TABS):
        page.keyboard.press("Tab")
        stop = page.evaluate(FOCUSED)
        stops.append(stop)
        if until(stop):
            return stops
    raise AssertionError(f"not reached in {MAX_TABS} Tab presses; stops: {[(s['tag'], s['name'] or s['text']) for s in stops]}")


def _all_visible(stops: list[dict]) -> None:
    invisible = [(s["tag"], s["id"] or s["name"] or s["text"]) for s in stops if not s["visible"]]
    assert not invisible, f"focus not visible on: {invisible}"


def test_compound_list_by_keyboard(page: Page, live, login, site):
    login("member")
    page.goto("/compounds")
    stops = _walk(page, lambda s: s["tag"] == "a" and s["href"] == f"/compounds/{site['code']}")
    names = {s["name"] for s in stops}
    assert stops[0]["text"] == "Skip to content"
    assert {"q", "scaffold", "verdict"} <= names  # the text filter and the main choice filters
    assert any(s["id"] == "sort-label" for s in stops)  # a sort header comes before the rows
    _all_visible(stops)
    page.keyboard.press("Enter")  # the compound link opens its page
    expect(page).to_have_url(f"{live.url}/compounds/{site['code']}")


def test_compound_page_by_keyboard(page: Page, live, login, site):
    login("member")
    page.goto(f"/compounds/{site['code']}")
    stops = _walk(page, lambda s: s["tag"] == "summary" and s["text"].startswith("Edit label"))
    assert any(s["tag"] == "a" and s["href"].endswith("/batches/new") for s in stops)
    _all_visible(stops)
    details = page.locator("details", has=page.locator("summary", has_text="Edit label"))
    page.keyboard.press("Enter")
    expect(details).to_have_attribute("open", "")
    page.keyboard.press("Space")
    expect(details).not_to_have_attribute("open", "")
    page.keyboard.press("Enter")
    label = details.locator("input[name=label]")
    page.keyboard.press("Tab")
    expect(label).to_be_focused()
    assert page.evaluate(FOCUSED)["visible"]
    # back to the "Add a batch" link; Enter follows it
    page.goto(f"/compounds/{site['code']}")
    _walk(page, lambda s: s["tag"] == "a" and s["href"].endswith("/batches/new"))
    page.keyboard.press("Enter")
    expect(page).to_have_url(f"{live.url}/compounds/{site['code']}/batches/new")


def test_upload_form_by_keyboard(page: Page, live, login, site):
    login("member")
    page.goto(f"/batches/{site['batch']}/upload")
    stops = _walk(page, lambda s: s["tag"] == "button" and s["text"] == "Upload and analyse")
    tags = [(s["tag"], s["name"] or s["type"]) for s in stops]
    assert ("select", "kind") in tags and ("input", "file") in tags
    assert any(s["tag"] == "button" and s["text"].startswith("Preview") for s in stops)
    _all_visible(stops)
    # choose the kind with the keyboard, give the file (a file chooser is the system's), upload with Space
    example = KINDS["pe_loop"].example()
    page.locator("select[name=kind]").select_option("pe_loop")
    page.locator("input[type=file][name=file]").set_input_files(
        {"name": example.filename, "mimeType": "text/csv", "buffer": example.raw})
    page.locator("button", has_text="Upload and analyse").focus()
    page.keyboard.press("Space")
    expect(page).to_have_url(re.compile(r"/measurements/\d+$"), timeout=20000)  # stored and analysed


def test_skip_link_leads_to_the_main_content_on_every_checked_page(page: Page, live, login, site):
    login("member")
    for url in ("/compounds", f"/compounds/{site['code']}", f"/batches/{site['batch']}/upload"):
        page.goto(url)
        page.locator("body").focus()
        page.keyboard.press("Tab")
        assert page.evaluate(FOCUSED)["text"] == "Skip to content"
        assert page.evaluate(FOCUSED)["visible"]
        page.keyboard.press("Enter")
        assert page.evaluate("() => document.activeElement.id") == "main", url
