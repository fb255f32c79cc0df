"""The inbox in a real browser: follow a compound from its page, see the unread count in the menu when
someone else adds a measurement, read the notifications at phone and desktop widths, mark them read."""

from __future__ import annotations

import re

import pytest
from playwright.sync_api import Page, expect

from server.access import Actor
from server.services import comments
from server.synth.ferro import miller_loop
from server.ingest.table import to_csv_bytes
from tests.browser.test_pages_for_everyone import _axe, _sideways

pytestmark = pytest.mark.browser


def test_follow_then_notified_then_mark_all_read(page: Page, live, login):
    code = live.compound("COc1ccc(OCCCCCCCCCCCC)cc1OC", "inbox ether")  # an invented test ether
    batch = live.batch(code, state="made")
    name = login("viewer")  # a viewer reads and follows; it need not write
    page.goto(f"/compounds/{code}")
    expect(page.locator("#unread-count")).to_have_count(0)
    page.get_by_role("button", name="Follow").click()
    expect(page.get_by_role("button", name="Unfollow")).to_be_visible()

    live.measurement(batch, "pe_loop", to_csv_bytes(miller_loop(8, 5.5, 50, 150), {"temperature": "300 K"}),
                     "loop_300K.csv")
    with live.session() as s:  # a long mention, as people write them, to see it wrap on a phone
        target = comments.resolve(s, "compound", code)
        poster = Actor(kind="user", name=live.user("member"), role="member")
        comments.post_comment(session=s, target=target, actor=poster,
                              body=f"@{name} the pellet from this batch cracked along the pressing direction "
                                   "after the second heating run; a polarised-microscopy image is on the sample page")
    page.reload()
    badge = page.locator("#unread-count")
    expect(badge).to_be_visible()
    for width in (390, 1440):
        page.set_viewport_size({"width": width, "height": 800})
        page.goto("/inbox")
        expect(page.locator('#inbox-list li[data-event="measurement"]')).to_have_count(1)
        expect(page.locator('#inbox-list li[data-event="mention"]')).to_have_count(1)
        shown = page.locator("#inbox-list > li").count()  # and a verdict change, if the loop changed the verdict
        assert page.locator("#unread-count").inner_text().split()[0] == str(shown)
        assert _sideways(page) == 0, f"/inbox scrolls sideways at {width} px"
        assert not _axe(page), _axe(page)
    expect(page.locator("#inbox-list li", has_text="mentioned you")).to_have_count(1)
    page.get_by_role("button", name="Mark all read").click()
    expect(page.locator("#unread-count")).to_have_count(0)
    expect(page.locator("#inbox-list li.unread")).to_have_count(0)
    page.locator('#inbox-list li[data-event="measurement"] a').click()
    expect(page).to_have_url(re.compile(r"/measurements/\d+$"))
