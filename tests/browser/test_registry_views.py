"""The registry table's view in a real browser: the filter form, the sort headers and the pager
give one view, whatever order a chemist's typing and clicking reach the server in (issue 22 item 7).

A filter box sends its request after a 500 ms pause in typing; a header clicked within that pause
used to ask for the view without the new filter, and the filter's request then came without the
sort. The tests wait on requests and on the table's ``aria-busy`` mark, never on time.
"""

from __future__ import annotations

from urllib.parse import parse_qs, urlparse

import pytest
from playwright.sync_api import Page, expect

pytestmark = pytest.mark.browser

# Boxes of the form that always hold a value (a select without an empty choice, a threshold with a
# default): the address of any view sent from the form carries them.
FORM_DEFAULTS = {"barrier_source": "measured", "threshold": "0.7"}


def _esters(live, stem: str, ring: str) -> list[str]:
    """Five invented esters labelled ``<stem> ester <n>``, and two decoys the text filter leaves out."""
    codes = [live.compound(f"{'C' * n}OC(=O){ring}", f"{stem} ester {n}") for n in range(1, 6)]
    for n in (6, 7):
        live.compound(f"{'C' * n}OC(=O){ring}", f"decoy {live.unique('d')}")
    return codes


def _settled(page: Page) -> None:
    expect(page.locator("#compound-table")).not_to_have_attribute("aria-busy", "true")


def _shown(page: Page) -> dict:
    """What the address, the form and the table each say the view is."""
    rows = page.locator("#compound-table tbody tr")
    return {
        "url": {k: v[-1] for k, v in parse_qs(urlparse(page.url).query).items()},
        "form": page.evaluate("""() => { const f = document.getElementById('filters');
            return {q: f.elements.q.value, sort: f.elements.sort.value, dir: f.elements.dir.value}; }"""),
        "codes": rows.evaluate_all("rows => rows.map(r => r.dataset.code)"),
        "labels": rows.evaluate_all("rows => rows.map(r => r.children[2].textContent.trim())"),
        "sorted_by": page.locator("#compound-table th[aria-sort]").evaluate_all(
            "ths => ths.map(th => th.querySelector('a').id + ' ' + th.getAttribute('aria-sort'))"),
    }


def _from_filters(request) -> bool:  # noqa: ANN001 - playwright Request
    return urlparse(request.url).path == "/compounds" and request.headers.get("hx-trigger") == "filters"


def test_the_filter_then_sort_race_gives_one_consistent_view(page: Page, live, login):
    stem = live.unique("racefilter")
    codes = _esters(live, stem, "c1ccc(Cl)cc1")
    login("member")
    page.goto("/compounds")
    # Type a filter and click a header at once. Two requests follow: the box's "change" as it loses
    # focus to the header (still the old sort) and the header's. Both carry the filter; the pause in
    # typing that would have sent the form again is cancelled, as the form was sent.
    sent: list = []

    def second_from_filters(request) -> bool:  # noqa: ANN001 - playwright Request
        if _from_filters(request):
            sent.append(request)
        return len(sent) == 2

    with page.expect_request(second_from_filters) as clicked:
        page.locator("#filters input[name=q]").fill(stem)
        page.locator("#sort-label").click()
    clicked.value.response()
    asked = [{k: v[-1] for k, v in parse_qs(urlparse(r.url).query).items()} for r in sent]
    assert [a["q"] for a in asked] == [stem] * 2
    assert [a["sort"] for a in asked] == ["code", "label"]
    _settled(page)
    view = _shown(page)
    assert view["url"] == {"q": stem, "sort": "label", "dir": "desc", **FORM_DEFAULTS}
    assert view["form"] == {"q": stem, "sort": "label", "dir": "desc"}
    assert view["sorted_by"] == ["sort-label descending"]
    assert sorted(view["codes"]) == sorted(codes)
    assert view["labels"] == sorted(view["labels"], reverse=True)

    # And the other way round: a header clicked while the filter's request is under way is queued
    # behind it (hx-sync) and asks with the filter the form shows.
    with page.expect_request(_from_filters):
        page.locator("#filters input[name=q]").fill(f"{stem} ester")
    page.locator("#sort-code").click()
    _settled(page)
    view = _shown(page)
    assert view["url"] == {"q": f"{stem} ester", "sort": "code", "dir": "desc", **FORM_DEFAULTS}
    assert view["form"] == {"q": f"{stem} ester", "sort": "code", "dir": "desc"}
    assert view["sorted_by"] == ["sort-code descending"]
    assert view["codes"] == sorted(codes, reverse=True)


def test_an_invalid_smarts_stays_in_its_box_and_no_list_is_shown(page: Page, live, login, browser_log):
    stem = live.unique("smartsbox")
    codes = _esters(live, stem, "c1ccc(Br)cc1")
    login("member")
    page.goto(f"/compounds?q={stem}")
    expect(page.locator("#compound-table tbody tr")).to_have_count(5)
    browser_log.expect_status(422)
    box = page.locator("#filters input[name=substructure]")
    with page.expect_request(_from_filters) as typed:
        box.fill("c1ccc(")  # a branch opened, never closed
    assert typed.value.response().status == 422
    _settled(page)
    alert = page.locator("#compound-table [role=alert]")
    expect(alert).to_contain_text("Substructure (SMARTS): 'c1ccc(' is neither a valid SMARTS pattern")
    expect(alert).not_to_contain_text("RDKit")
    expect(page.locator("#compound-table table")).to_have_count(0)
    expect(box).to_have_value("c1ccc(")
    expect(box).to_be_focused()
    expect(box).to_have_attribute("aria-invalid", "true")
    expect(box).to_have_attribute("aria-describedby", "view-error")
    assert parse_qs(urlparse(page.url).query)["substructure"] == ["c1ccc("]

    # Corrected in place: the filtered list comes back, the error and the mark go.
    with page.expect_request(_from_filters):
        box.fill("c1ccc(Br)cc1")
    _settled(page)
    expect(alert).to_have_count(0)
    expect(box).not_to_have_attribute("aria-invalid", "true")
    assert sorted(_shown(page)["codes"]) == sorted(codes)
