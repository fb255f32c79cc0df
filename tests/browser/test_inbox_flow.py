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


def test_badge_follows_events_and_marking_read_without_a_reload(page: Page, live, login):
    """The menu badge refreshes by itself: on its minute poll when an event arrives (the page's clock is
    moved on, the server's is not), and at once when an entry is marked read on /inbox (htmx, HX-Trigger).
    The page is never reloaded: a mark set on ``window`` survives."""
    code = live.compound("CCCCCCCCCCCCCCOc1ccc(OC)c(OC)c1", "badge ether")  # an invented test ether
    batch = live.batch(code, state="made")
    name = login("viewer")
    page.goto(f"/compounds/{code}")
    page.get_by_role("button", name="Follow").click()
    expect(page.get_by_role("button", name="Unfollow")).to_be_visible()
    page.clock.install()
    page.goto("/inbox")
    expect(page.locator("#unread-count")).to_have_count(0)
    region = page.locator("#nav-inbox #inbox-badge")
    assert region.get_attribute("aria-live") == "polite" and region.get_attribute("aria-atomic") == "true"
    page.evaluate("window.notReloaded = true")
    for i, pr in enumerate((5.5, 5.8)):  # two loops in one sitting: one grouped entry
        live.measurement(batch, "pe_loop", to_csv_bytes(miller_loop(8, pr, 50, 150), {"temperature": f"{300 + i} K"}),
                         f"loop_{300 + i}K.csv")
    page.clock.fast_forward("01:05")  # the badge's poll is due
    badge = page.locator("#unread-count")
    expect(badge).to_be_visible()
    with live.session() as s:
        from sqlmodel import select

        from server.models import Notification, User

        uid = s.exec(select(User.id).where(User.username == name)).one()
        unread = len(s.exec(select(Notification).where(Notification.user_id == uid,
                                                       Notification.read_at.is_(None))).all())
    expect(badge).to_have_text(re.compile(rf"^{unread}\s*unread$"))
    assert page.evaluate("window.notReloaded") is True
    # the list is stale (it was drawn before the events); marking read brings the fresh list and badge
    page.reload()
    page.evaluate("window.notReloaded = true")
    entry = page.locator('#inbox-list > li[data-event="measurement"]')
    expect(entry).to_have_attribute("data-count", "2")
    entry.locator("summary").click()
    expect(entry.locator("details li")).to_have_count(2)
    entry.get_by_role("button", name=re.compile("^Mark read")).click()
    expect(page.locator('#inbox-list > li[data-event="measurement"].read')).to_have_count(1)
    if unread > 1:
        expect(badge).to_have_text(re.compile(rf"^{unread - 1}\s*unread$"))
    else:
        expect(badge).to_have_count(0)
    assert page.evaluate("window.notReloaded") is True
    assert not _axe(page), _axe(page)
