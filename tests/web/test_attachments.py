"""The image gallery on the compound, batch, sample and measurement pages (issue 23, item 2): an upload
from the form (htmx swap or plain form and redirect), thumbnails that open the original, the metadata
caption, a refused file keeping what was typed."""

from __future__ import annotations

from tests.api.test_attachments import micrograph
from tests.factories import login_as, soup, targets


def _world(client, session):
    t = targets(client, session, cycles=8)
    return {f"/{plural}/{ref}": f"/{plural}/{ref}/attachments" for plural, ref in t["refs"].items()}


def test_upload_from_every_page_shows_a_thumbnail_that_opens_the_original(client, session):
    pages = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    for i, (page, post) in enumerate(pages.items()):
        gallery = soup(client.get(page).text).select_one("section.attachments")
        form = gallery.select_one("form.attachment-form")
        assert form["action"] == post and form["hx-post"] == post and form["enctype"] == "multipart/form-data"
        assert gallery.select("li.attachment") == []
        raw = micrograph("PNG", seed=i)
        r = client.post(post, files={"file": ("pom.png", raw, "image/png")},
                        data={"caption": "fan texture on cooling", "magnification": "20x", "scale_bar": "0.05 mm",
                              "polariser": "crossed", "temperature": "120 °C"},
                        headers={"HX-Request": "true", "X-CSRF-Token": csrf})
        assert r.status_code == 200, r.text
        frag = soup(r.text)
        assert frag.find("html") is None and frag.select_one("section.attachments")["id"] == gallery["id"]
        item = frag.select_one("li.attachment")
        link, img = item.select_one("figure a"), item.select_one("figure img")
        assert link["href"].endswith("/original") and img["src"].endswith("/thumbnail")
        assert item.select_one(".caption").text == "fan texture on cooling"
        assert item.select_one(".meta").text == "20\u00d7 \u00b7 scale bar 50 \u00b5m \u00b7 crossed polarisers \u00b7 393.1 K"
        # The page session reaches the bytes the gallery points at.
        assert client.get(link["href"]).content == raw
        assert client.get(img["src"]).headers["content-type"] == "image/jpeg"
        # A plain form (no JavaScript): 303 back to the page's gallery.
        r = client.post(post, files={"file": ("b.jpg", micrograph("JPEG", seed=40 + i), "image/jpeg")},
                        data={"csrf_token": csrf}, follow_redirects=False)
        assert r.status_code == 303 and r.headers["location"] == page + "#attachments", r.headers
        assert len(soup(client.get(page).text).select("section.attachments li.attachment")) == 2
        # Without the CSRF token: refused.
        assert client.post(post, files={"file": ("c.png", raw, "image/png")},
                           headers={"HX-Request": "true"}).status_code == 403


def test_a_refused_image_keeps_the_form_with_the_error(client, session):
    pages = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    post = next(iter(pages.values()))
    r = client.post(post, files={"file": ("fake.png", micrograph("JPEG"), "image/png")},
                    data={"caption": "cracked pellet", "scale_bar": "2 mm"},
                    headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 422
    frag = soup(r.text)
    assert "claims to be PNG but its bytes are JPEG" in frag.select_one("p.error[role=alert]").text
    assert frag.select_one("input[name=caption]")["value"] == "cracked pellet"
    assert frag.select("li.attachment") == []


def test_viewers_see_the_gallery_without_the_form(client, session):
    pages = _world(client, session)
    login_as(client, session, role="viewer", name="vic")
    gallery = soup(client.get(next(iter(pages))).text).select_one("section.attachments")
    assert gallery is not None and gallery.select_one("form") is None


def test_archive_from_the_gallery_needs_a_reason_and_keeps_the_image_labelled(client, session):
    pages = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    page, post = next(iter(pages.items()))
    for seed in (1, 2):
        client.post(post, files={"file": (f"pom{seed}.png", micrograph("PNG", seed=seed), "image/png")},
                    data={"caption": f"view {seed}", "csrf_token": csrf})
    items = soup(client.get(page).text).select("section.attachments ul.gallery > li.attachment")
    target = items[1]
    form = target.select_one("details.attachment-archive form")
    action = form["action"]
    assert action == f"/attachments/{target['data-attachment']}/archive" and form["hx-post"] == action
    # No reason: refused, the error beside that image's form, nothing archived.
    r = client.post(action, data={"reason": "  "}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 422
    frag = soup(r.text)
    failed = frag.select_one(f"#attachment-{target['data-attachment']}")
    assert "say why the image is archived" in failed.select_one("p.error[role=alert]").text
    assert failed.select_one("details.attachment-archive").has_attr("open")
    assert frag.select_one("details.archived-attachments") is None
    # A plain form with the reason: 303 back to the gallery; the image moves to the archived list, labelled.
    r = client.post(action, data={"reason": "glare from the hot stage window", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == page + "#attachments"
    gallery = soup(client.get(page).text).select_one("section.attachments")
    assert [li["data-attachment"] for li in gallery.select("ul.gallery > li.attachment:not(.archived)")] == [
        items[0]["data-attachment"]]
    archived = gallery.select_one("details.archived-attachments")
    assert "Archived images (1)" in archived.select_one("summary").text and not archived.has_attr("open")
    shown = archived.select_one("li.attachment.archived")
    assert shown["data-attachment"] == target["data-attachment"]
    assert shown.select_one(".archived-label").text == "archived"
    note = shown.select_one(".archive-note").get_text(" ", strip=True)
    assert "user:mia" in note and "glare from the hot stage window" in note
    assert client.get(shown.select_one("figure a")["href"]).status_code == 200  # still reachable
    # Restore through htmx, with its own reason: back in the gallery, the restore noted under it.
    restore = shown.select_one("form.attachment-restore")["action"]
    r = client.post(restore, data={"reason": "the glare is outside the domains"},
                    headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 200, r.text
    frag = soup(r.text)
    assert frag.select_one("details.archived-attachments") is None
    back = frag.select_one(f"#attachment-{target['data-attachment']}")
    assert "the glare is outside the domains" in back.get_text() and "archived" not in back.get("class", [])


def test_viewers_see_archived_images_without_the_forms(client, session):
    pages = _world(client, session)
    csrf = login_as(client, session, role="member", name="mia")
    page, post = next(iter(pages.items()))
    client.post(post, files={"file": ("pom.png", micrograph("PNG", seed=5), "image/png")}, data={"csrf_token": csrf})
    aid = soup(client.get(page).text).select_one("li.attachment")["data-attachment"]
    client.post(f"/attachments/{aid}/archive", data={"reason": "blurred", "csrf_token": csrf})
    client.cookies.clear()
    login_as(client, session, role="viewer", name="vic")
    gallery = soup(client.get(page).text).select_one("section.attachments")
    assert gallery.select_one("li.archived .archived-label").text == "archived"
    assert gallery.select_one("form") is None
