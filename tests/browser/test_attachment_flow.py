"""An image attached from the compound page in a real browser (issue 23, item 2): the htmx form swaps
the gallery, the thumbnail loads (the page's content security policy allows it), the caption carries
the metadata, the thumbnail opens the original, and the gallery fits a 390 px phone and 1440 px."""

from __future__ import annotations

import pytest
from playwright.sync_api import Page, expect

from tests.api.test_attachments import micrograph

pytestmark = pytest.mark.browser


@pytest.mark.parametrize("width", (390, 1440))
def test_attach_an_image_and_open_the_original(page: Page, live, login, tmp_path, width, browser_log):
    page.set_viewport_size({"width": width, "height": 900})
    code = live.compound("CCCCCCCOc1ccc(OCCCCCCC)cc1" if width == 390 else "CCCCCCCCOc1ccc(OCCCCCCCC)cc1")
    login("member")
    page.goto(f"/compounds/{code}")
    gallery = page.locator("section.attachments")
    expect(gallery.get_by_text("No images yet.")).to_be_visible()
    image = tmp_path / "pom_cooling.png"
    image.write_bytes(micrograph("PNG", size=(800, 600), seed=width))
    gallery.locator('input[type="file"][name="file"]').set_input_files(image)
    gallery.get_by_label("Caption").fill("schlieren texture on cooling")
    gallery.get_by_label("Scale bar").fill("200 um")
    gallery.get_by_label("Polarisers").select_option("crossed")
    gallery.get_by_label("Temperature").fill("150 °C")
    with page.expect_response(lambda r: r.request.method == "POST" and r.url.endswith("/attachments")):
        gallery.get_by_role("button", name="Attach").click()
    thumb = page.locator("section.attachments li.attachment img")
    expect(thumb).to_have_count(1)
    expect(page.locator("section.attachments .meta")).to_have_text(
        "scale bar 200 \u00b5m \u00b7 crossed polarisers \u00b7 423.1 K")
    page.wait_for_function("img => img.complete && img.naturalWidth > 0", arg=thumb.element_handle())
    assert thumb.evaluate("img => img.naturalWidth") == 320
    assert page.evaluate("() => document.documentElement.scrollWidth - document.documentElement.clientWidth") <= 0
    box = thumb.bounding_box()
    assert box["x"] >= 0 and box["x"] + box["width"] <= width
    # Chromium asks a bare image document for /favicon.ico (the pages link their own icon), which the
    # app does not serve: that one 404 is the browser's, after every request of the page itself succeeded.
    browser_log.expect_status(404)
    with page.expect_response(lambda r: r.url.endswith("/original")) as orig:
        thumb.click()
    assert orig.value.status == 200 and orig.value.body() == image.read_bytes()
