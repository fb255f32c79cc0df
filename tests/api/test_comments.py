"""Comment threads through the API (issue 23, item 1): all four targets, Markdown rendered safely,
mentions resolved to accounts, edit history in the audit trail, archive instead of delete, the
embargo (an embargoed compound's comments and those of its batches, samples and measurements)."""

from __future__ import annotations

from bs4 import BeautifulSoup
from sqlmodel import select

from server.models import AuditEvent, Comment
from tests.factories import bearer, login_as, make_token, make_user, targets


def _world(client, session, *, embargoed: bool = False) -> dict:
    return targets(client, session, embargoed=embargoed)


def test_every_target_takes_a_thread(client, session):
    world = _world(client, session)
    for plural, ref in world["refs"].items():
        url = f"/api/v1/{plural}/{ref}/comments"
        assert client.get(url, headers=world["w"]).json() == {"items": [], "withheld": False}
        r = client.post(url, json={"body": f"first on {plural}"}, headers=world["w"])
        assert r.status_code == 201, r.text
        client.post(url, json={"body": f"second on {plural}"}, headers=world["w"])
        got = client.get(url, headers=world["w"]).json()
        assert [c["body"] for c in got["items"]] == [f"first on {plural}", f"second on {plural}"]
        assert {c["ref"] for c in got["items"]} == {ref} and {c["compound"] for c in got["items"]} == {world["code"]}
    # Threads are separate: the compound's thread does not gather its batch's comments.
    assert len(client.get(f"/api/v1/compounds/{world['code']}/comments", headers=world["w"]).json()["items"]) == 2
    assert client.get("/api/v1/batches/NOPE-B99/comments", headers=world["w"]).status_code == 404
    assert client.get("/api/v1/measurements/99999/comments", headers=world["w"]).status_code == 404


def test_bad_bodies_are_refused_and_nothing_is_stored(client, session):
    world = _world(client, session)
    url = f"/api/v1/compounds/{world['code']}/comments"
    for body in ("", "   \n ", "x" * 20001):
        r = client.post(url, json={"body": body}, headers=world["w"])
        assert r.status_code == 422, (body[:5], r.text)
    assert session.exec(select(Comment)).all() == []


def test_markdown_is_rendered_safely(client, session):
    world = _world(client, session)
    r = client.post(f"/api/v1/compounds/{world['code']}/comments", headers=world["w"],
                    json={"body": "**cracked** pellet <script>alert(1)</script> [x](javascript:alert(1))"})
    html = BeautifulSoup(r.json()["html"], "html.parser")
    assert html.find("strong").text == "cracked"
    assert html.find("script") is None and html.find("a") is None
    assert "<script>" in r.json()["body"]  # the source is kept as written


def test_mentions_resolve_to_active_accounts_only(client, session):
    world = _world(client, session)
    make_user(session, name="ann")
    make_user(session, name="bob")
    gone = make_user(session, name="cyd")
    gone.active = False
    session.add(gone)
    session.commit()
    r = client.post(f"/api/v1/samples/{world['refs']['samples']}/comments", headers=world["w"],
                    json={"body": "@ann and @bob: the pellet cracked. @cyd left; @nobody exists; `@ann` in code"})
    assert r.status_code == 201, r.text
    assert r.json()["mentions"] == ["ann", "bob"]
    spans = BeautifulSoup(r.json()["html"], "html.parser").select("span.mention")
    assert [s["data-user"] for s in spans] == ["ann", "bob"]


def test_edits_keep_their_history_and_archive_replaces_delete(client, session):
    world = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    h = {"X-CSRF-Token": csrf}
    url = f"/api/v1/measurements/{world['refs']['measurements']}/comments"
    cid = client.post(url, json={"body": "Ec looks low"}, headers=h).json()["id"]
    r = client.patch(f"/api/v1/comments/{cid}", json={"body": "Ec looks low: thick sample"}, headers=h)
    assert r.status_code == 200 and r.json()["edited_at"], r.text
    assert client.patch(f"/api/v1/comments/{cid}", json={"body": "Ec looks low: thick sample"},
                        headers=h).status_code == 422  # nothing changed
    hist = client.get(f"/api/v1/comments/{cid}/history", headers=h).json()
    assert [e["body"] for e in hist["earlier"]] == ["Ec looks low"] and hist["comment"]["body"].endswith("thick sample")
    # Someone else (a write token, not the author) may not change it; an admin may.
    assert client.patch(f"/api/v1/comments/{cid}", json={"body": "mine now"}, headers=world["w"]).status_code == 403
    assert client.post(f"/api/v1/comments/{cid}/archive", headers=world["w"]).status_code == 403
    r = client.post(f"/api/v1/comments/{cid}/archive", headers=h)
    assert r.status_code == 200 and r.json()["archived"] is True
    assert client.get(url, headers=h).json()["items"] == []
    assert session.get(Comment, cid) is not None  # archived, not deleted
    session.expire_all()
    actions = [e.action for e in session.exec(select(AuditEvent).where(AuditEvent.entity == "comment")
                                              .order_by(AuditEvent.id)).all()]
    assert actions == ["comment.create", "comment.edit", "comment.archive"]
    assert client.post(f"/api/v1/comments/{cid}/restore", headers=h).json()["archived"] is False
    assert len(client.get(url, headers=h).json()["items"]) == 1


def test_embargoed_threads_are_withheld_from_those_who_may_not_see(client, session):
    world = _world(client, session, embargoed=True)
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    plain = bearer(make_token(session, scope="read", name="plain-reader"))
    granted = bearer(make_token(session, scope="read", name="granted-reader", sees_embargoed=True))
    for plural, ref in world["refs"].items():
        url = f"/api/v1/{plural}/{ref}/comments"
        cid = client.post(url, json={"body": "six SC8H17 arms, see @ann"}, headers=world["w"]).json()["id"]
        for who in (up, plain):
            got = client.get(url, headers=who)
            assert got.status_code == 200 and got.json() == {"items": [], "withheld": True}, got.text
            assert client.get(f"/api/v1/comments/{cid}/history", headers=who).status_code == 404
        # The control: a granted read token sees the thread.
        assert [c["id"] for c in client.get(url, headers=granted).json()["items"]] == [cid]
