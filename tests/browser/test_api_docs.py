"""/docs in a real browser: Swagger UI loads from our static files under the app's CSP.

The ``page`` fixture fails the test on any console error, page error or failed request, so a
script blocked by the content security policy, a missing vendored file or a fetch to a public
server (the page must work offline) all fail here, not only an empty operation list.
"""

from __future__ import annotations

import pytest
from playwright.sync_api import expect

from server.api.docs_page import PAGE_TITLE

pytestmark = pytest.mark.browser


def test_docs_lists_the_api_operations(page, live):
    page.goto("/docs")
    expect(page).to_have_title(PAGE_TITLE)
    operations = page.locator(".opblock")
    expect(operations.first).to_be_visible()
    # One operation from each end of the API, found by method and path as Swagger UI shows them.
    register = page.locator(".opblock-post", has=page.locator(".opblock-summary-path", has_text="/api/v1/compounds"))
    expect(register.first).to_be_visible()
    assert operations.count() >= 20
    assert page.locator(".info .title").inner_text().startswith(PAGE_TITLE)


def test_redoc_leads_to_the_working_page(page, live):
    page.goto("/redoc")
    expect(page).to_have_url(f"{live.url}/docs")
    expect(page.locator(".opblock").first).to_be_visible()
