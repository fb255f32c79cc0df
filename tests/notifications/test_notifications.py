"""Notifications (issue 23 item 3) through the API and the pages, on SQLite and PostgreSQL: who hears of
what (registrant, followers, job owner, exactly the mentioned, the assignee), never the actor itself,
the embargo, the unread count, follow/unfollow, preferences."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from sqlmodel import select

from server import access
from server.jobs import queue
from server.models import Compound, Notification, User
from server.verdict_codes import LABELS
from tests.factories import PASSWORD, csrf_of, login_as, make_user, soup
from tests.trust.conftest import loop_bytes

SMILES = "c1ccc2ccccc2c1"  # naphthalene: any registrable structure serves


class Person:
    """One logged-in browser: its client and the CSRF header its API writes carry."""

    def __init__(self, client: TestClient, session, name: str, role: str = "member", *, exists: bool = False):
        self.client, self.name = client, name
        if exists:
            page = client.get("/login")
            client.post("/login", data={"username": name, "password": PASSWORD, "csrf_token": csrf_of(page.text),
                                        "next": "/compounds"}, follow_redirects=False)
            self.csrf = csrf_of(client.get("/compounds").text)
        else:
            self.csrf = login_as(client, session, role=role, name=name)
        self.h = {"X-CSRF-Token": self.csrf}

    def post(self, url: str, **kw):
        return self.client.post(url, headers=self.h, **kw)

    def inbox(self, **params) -> dict:
        r = self.client.get("/api/v1/notifications", params=params)
        assert r.status_code == 200, r.text
        return r.json()


def _register(person: Person, **extra) -> str:
    r = person.post("/api/v1/compounds", json={"smiles": SMILES, **extra})
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    assert person.post(f"/api/v1/compounds/{code}/batches", json={}).status_code == 201
    return code


def _upload(person: Person, code: str, i: int = 0) -> dict:
    r = person.post(f"/api/v1/batches/{code}-B01/measurements", data={"kind": "pe_loop"},
                    files={"file": ("m.csv", loop_bytes(i), "text/csv")})
    assert r.status_code == 201, r.text
    return r.json()


def _of(session, name: str) -> list[Notification]:
    session.expire_all()
    uid = session.exec(select(User.id).where(User.username == name)).one()
    return list(session.exec(select(Notification).where(Notification.user_id == uid).order_by(Notification.id)).all())


def test_mentions_notify_exactly_the_mentioned_accounts(alice, session):
    code = _register(alice)
    for name in ("bob", "carol", "dave"):
        make_user(session, name=name)
    r = alice.post(f"/api/v1/compounds/{code}/comments",
                   json={"body": "@bob and @carol: cracked pellet. @nobody @alice"})
    assert r.status_code == 201, r.text
    got = {n: [x.event for x in _of(session, n)] for n in ("alice", "bob", "carol", "dave")}
    assert got == {"alice": [], "bob": ["mention"], "carol": ["mention"], "dave": []}
    bob_note = _of(session, "bob")[0]
    assert bob_note.url == f"/compounds/{code}#comments" and "alice mentioned you" in bob_note.text
    # An edit notifies only the accounts it newly mentions.
    cid = r.json()["id"]
    r = alice.client.patch(f"/api/v1/comments/{cid}", json={"body": "@bob @carol @dave: see the loop"}, headers=alice.h)
    assert r.status_code == 200, r.text
    got = {n: len(_of(session, n)) for n in ("bob", "carol", "dave")}
    assert got == {"bob": 1, "carol": 1, "dave": 1}


def test_measurement_and_verdict_change_old_to_new_reach_registrant_not_actor(alice, bob, session):
    code = _register(alice)
    assert alice.inbox() == {"items": [], "unread": 0}
    m = _upload(bob, code)
    items = alice.inbox()["items"]
    events = [i["event"] for i in items]
    assert sorted(events) == ["measurement", "verdict"]
    verdict = next(i for i in items if i["event"] == "verdict")
    new = bob.client.get(f"/api/v1/compounds/{code}").json()["verdict"]
    assert new != "untested"
    assert verdict["text"] == f"Verdict of {code}: {LABELS['untested']} → {LABELS[new]}"
    measured = next(i for i in items if i["event"] == "measurement")
    assert measured["url"] == f"/measurements/{m['id']}" and measured["compound"] == code
    assert bob.inbox()["items"] == []  # bob's own upload tells bob nothing
    # newest first
    assert [i["id"] for i in items] == sorted((i["id"] for i in items), reverse=True)


def test_own_actions_do_not_notify(alice, session):
    code = _register(alice)
    assert alice.client.put(f"/api/v1/compounds/{code}/follow", headers=alice.h).json()["following"] is True
    _upload(alice, code)
    alice.post(f"/api/v1/compounds/{code}/comments", json={"body": "note to @alice herself"})
    assert alice.inbox() == {"items": [], "unread": 0}
    assert _of(session, "alice") == []


def test_followers_hear_and_unfollow_stops_it(alice, bob, session):
    code = _register(alice)
    make_user(session, name="carol")
    page = soup(bob.client.get(f"/compounds/{code}").text)
    assert page.select_one("#follow").get_text(strip=True) == "Follow"
    r = bob.client.post(f"/compounds/{code}/follow", data={"csrf_token": bob.csrf, "follow": "1"},
                        follow_redirects=False)
    assert r.status_code == 303
    assert soup(bob.client.get(f"/compounds/{code}").text).select_one("#follow").get_text(strip=True) == "Unfollow"
    _upload(alice, code, 1)
    assert "measurement" in [i["event"] for i in bob.inbox()["items"]]
    assert _of(session, "carol") == []  # neither registrant nor follower
    before = len(bob.inbox()["items"])
    bob.client.post(f"/compounds/{code}/follow", data={"csrf_token": bob.csrf, "follow": "0"})
    _upload(alice, code, 2)
    assert len(bob.inbox()["items"]) == before
    # CSRF as elsewhere: a follow posted without the token is refused
    assert bob.client.post(f"/compounds/{code}/follow", data={"follow": "1"}).status_code == 403


def test_unread_count_badge_and_marking_read(alice, bob, session):
    code = _register(alice)
    _upload(bob, code, 3)
    _upload(bob, code, 4)
    unread = alice.inbox()["unread"]
    assert unread >= 2
    badge = soup(alice.client.get("/compounds").text).select_one("#unread-count")
    assert badge is not None and badge.contents[0].strip() == str(unread)
    first = alice.inbox()["items"][0]["id"]
    r = alice.post(f"/api/v1/notifications/{first}/read")
    assert r.status_code == 200 and r.json() == {"id": first, "read": True, "unread": unread - 1}
    assert alice.post(f"/api/v1/notifications/{first}/read", json={"read": False}).json()["unread"] == unread
    # a read without the CSRF header (cookie session) is refused; another account's id is not found
    assert alice.client.post(f"/api/v1/notifications/{first}/read").status_code == 403
    assert bob.post(f"/api/v1/notifications/{first}/read").status_code == 404
    # the inbox page lists them with links, and "Mark all read" empties the badge
    page = soup(alice.client.get("/inbox").text)
    rows = page.select("#inbox-list > li")
    assert len(rows) == len(alice.inbox()["items"]) and all(li.find("a") for li in rows)
    assert {li["class"][1] for li in rows} == {"unread"}
    r = alice.client.post("/inbox/read-all", data={"csrf_token": alice.csrf}, follow_redirects=False)
    assert r.status_code == 303
    assert alice.inbox()["unread"] == 0
    assert soup(alice.client.get("/inbox").text).select_one("#unread-count") is None
    assert alice.inbox(unread="true")["items"] == []


def test_tokens_have_no_inbox(client, session):
    from tests.factories import bearer, make_token

    h = bearer(make_token(session, scope="write"))
    assert client.get("/api/v1/notifications", headers=h).status_code == 403
    assert client.get("/api/v1/notifications").status_code == 401


def test_preferences_are_respected(alice, bob, session):
    code = _register(alice)
    r = alice.client.post("/inbox/preferences", data={"csrf_token": alice.csrf,
                                                      "inbox": ["verdict", "conflict", "mention"]},
                          follow_redirects=False)
    assert r.status_code == 303
    prefs = alice.client.get("/api/v1/notifications/preferences").json()
    assert {e["event"]: e["inbox"] for e in prefs["events"]} == {
        "measurement": False, "verdict": True, "conflict": True, "estimate": False, "mention": True, "assigned": False}
    _upload(bob, code, 5)
    assert [i["event"] for i in alice.inbox()["items"]] == ["verdict"]
    # the form shows the choices back
    boxes = soup(alice.client.get("/inbox").text).select('input[name="inbox"]')
    assert {b["value"]: b.has_attr("checked") for b in boxes}["measurement"] is False
    # e-mail without an address is refused, naming the field
    r = alice.client.put("/api/v1/notifications/preferences", headers=alice.h,
                         json={"email": "", "events": [{"event": "mention", "inbox": True, "email": True}]})
    assert r.status_code == 422 and r.json()["field"] == "email"


def test_assignee_of_a_planned_compound_is_notified(alice, bob, session):
    make_user(session, name="carol")
    r = alice.post("/api/v1/compounds", json={"smiles": "c1ccc2cc3ccccc3cc2c1", "state": "planned",
                                              "rationale": "longer core", "assignee": "bob"})
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    assert [(i["event"], i["compound"]) for i in bob.inbox()["items"]] == [("assigned", code)]
    r = alice.client.patch(f"/api/v1/compounds/{code}", json={"assignee": "carol"}, headers=alice.h)
    assert r.status_code == 200, r.text
    assert [n.event for n in _of(session, "carol")] == ["assigned"]
    assert alice.inbox()["items"] == []


def test_estimate_owner_hears_of_done_and_failed(alice, session, app):
    code = _register(alice)
    engine = app.state.engine
    cid = session.exec(select(Compound.id).where(Compound.code == code)).one()
    ids = [queue.enqueue(session, kind="xtb_estimate", params={"n": i}, compound_id=cid, actor="user:alice").id
           for i in range(2)]
    for expect in ("done", "failed"):
        job = queue.claim(engine, worker="w1")
        if expect == "done":
            assert queue.finish(engine, job.id, result={"ok": 1}, worker="w1")
        else:
            assert queue.fail(engine, job.id, error="xtb: SCF did not converge\ntrace", worker="w1")
    texts = [i["text"] for i in alice.inbox()["items"] if i["event"] == "estimate"]
    assert texts == [f"Your xtb_estimate job {ids[1]} for {code} failed: xtb: SCF did not converge",
                     f"Your xtb_estimate job {ids[0]} for {code} is done"]


def test_embargo_reveals_nothing_to_an_account_that_may_not_see(alice, app, session, monkeypatch):
    """The access table lets every account see embargoed compounds today, and the callers who may not
    (tokens without the grant, nobody) have no inbox, so no real caller can take this path: the patch
    bars one account, as a future rule may. It must get no notification about an embargoed compound, and
    lose those it had. test_grouping.test_embargo_premise_no_caller_without_the_grant_has_an_inbox fails
    the day that premise changes, so this test is then rewritten with a real caller."""
    with TestClient(app) as c:
        eve = Person(c, session, "eve")
    real = access.sees_embargoed
    monkeypatch.setattr(access, "sees_embargoed", lambda actor: real(actor) and getattr(actor, "name", "") != "eve")
    code = _register(alice)
    with TestClient(app) as c:
        eve = Person(c, session, "eve", exists=True)
        assert eve.client.put(f"/api/v1/compounds/{code}/follow", headers=eve.h).status_code == 200
        alice.post(f"/api/v1/compounds/{code}/comments", json={"body": "@eve before the embargo"})
        assert [i["event"] for i in eve.inbox()["items"]] == ["mention"]
        old = eve.inbox()["items"][0]["id"]
        r = alice.client.patch(f"/api/v1/compounds/{code}", json={"embargoed": True}, headers=alice.h)
        assert r.status_code == 200, r.text
        _upload(alice, code, 6)
        alice.post(f"/api/v1/compounds/{code}/comments", json={"body": "@eve after the embargo"})
        # nothing new was created for eve, and the old one is hidden while the embargo lasts
        assert [n.event for n in _of(session, "eve")] == ["mention"]
        assert eve.inbox() == {"items": [], "unread": 0}
        assert soup(eve.client.get("/inbox").text).select("#inbox-list > li") == []
        assert soup(eve.client.get("/inbox").text).select_one("#unread-count") is None
        assert eve.post(f"/api/v1/notifications/{old}/read").status_code == 404
        assert eve.client.put(f"/api/v1/compounds/{code}/follow", headers=eve.h).status_code == 404
        # alice (who may see it) was not the actor of eve's follow, and sees her own compound's events as usual
        alice.client.patch(f"/api/v1/compounds/{code}", json={"embargoed": False}, headers=alice.h)
        assert [i["event"] for i in eve.inbox()["items"]] == ["mention"]
