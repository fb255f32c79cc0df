"""The comment thread on the compound, sample and measurement pages: htmx posting with the CSRF
header, plain forms without JavaScript, edit and archive, who sees the form (issue 23, item 1)."""

from __future__ import annotations

from tests.factories import bearer, login_as, make_token, make_user, soup, targets


def _world(client, session, *, embargoed=False):
    t = targets(client, session, embargoed=embargoed, cycles=8)
    return {"w": t["w"], "pages": {f"/compounds/{t['code']}": f"/compounds/{t['code']}/comments",
                                   f"/samples/{t['sample']}": f"/samples/{t['sample']}/comments",
                                   f"/measurements/{t['measurement']}": f"/measurements/{t['measurement']}/comments"}}


def test_htmx_post_swaps_the_thread_and_plain_forms_redirect(client, session):
    world = _world(client, session)
    make_user(session, name="ann")
    csrf = login_as(client, session, role="member", name="mia")
    for page, post in world["pages"].items():
        thread = soup(client.get(page).text).select_one("section.comments")
        form = thread.select_one("form.comment-form")
        assert form["hx-post"] == post and form["action"] == post and thread.select("li.comment") == []
        # htmx: the CSRF header, and the answer is the thread alone with the new comment rendered.
        r = client.post(post, data={"body": "**cracked** on cooling, @ann"},
                        headers={"HX-Request": "true", "X-CSRF-Token": csrf})
        assert r.status_code == 200, r.text
        frag = soup(r.text)
        assert frag.find("html") is None and frag.select_one("section.comments")["id"] == thread["id"]
        body = frag.select_one("li.comment .comment-body")
        assert body.find("strong").text == "cracked" and body.select_one("span.mention")["data-user"] == "ann"
        # Without the CSRF token: refused.
        assert client.post(post, data={"body": "x"}, headers={"HX-Request": "true"}).status_code == 403
        # A plain form post (no JavaScript) answers 303 back to the page.
        r = client.post(post, data={"body": "second", "csrf_token": csrf}, follow_redirects=False)
        assert r.status_code == 303 and r.headers["location"].startswith(page)
        assert len(soup(client.get(page).text).select("section.comments li.comment")) == 2


def test_empty_comment_keeps_the_form_with_an_error(client, session):
    world = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    post = next(iter(world["pages"].values()))
    r = client.post(post, data={"body": "  "}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 422 and soup(r.text).select_one("p.error[role=alert]")


def test_edit_and_archive_from_the_page(client, session):
    world = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    page, post = next(iter(world["pages"].items()))
    client.post(post, data={"body": "first text", "csrf_token": csrf})
    li = soup(client.get(page).text).select_one("li.comment")
    cid = li["data-comment"]
    r = client.post(f"/comments/{cid}/edit", data={"body": "better text"}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 200 and "better text" in soup(r.text).select_one("li.comment").get_text()
    assert soup(r.text).select_one("li.comment .comment-head .muted")  # marked as edited
    r = client.post(f"/comments/{cid}/archive", headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 200 and soup(r.text).select("li.comment") == []


def test_viewers_read_but_get_no_form_and_others_cannot_edit(client, session):
    world = _world(client, session)
    page, post = next(iter(world["pages"].items()))
    client.post("/api/v1" + post, json={"body": "from the registrar"}, headers=world["w"])
    login_as(client, session, role="viewer", name="vic")
    thread = soup(client.get(page).text).select_one("section.comments")
    assert thread.select_one("form.comment-form") is None and thread.select_one("details.comment-edit") is None
    assert "from the registrar" in thread.get_text()


def test_embargoed_thread_is_withheld_on_pages_for_upload_tokens(client, session):
    world = _world(client, session, embargoed=True)
    page, post = next(iter(world["pages"].items()))
    client.post("/api/v1" + post, json={"body": "six SC8H17 arms"}, headers=world["w"])
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    thread = soup(client.get(page, headers=up).text).select_one("section.comments")
    assert "SC8H17" not in thread.get_text() and thread.select("li.comment") == []
    assert "SC8H17" in soup(client.get(page, headers=world["w"]).text).select_one("section.comments").get_text()
