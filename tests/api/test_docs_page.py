"""/docs without a browser: our page, only our own scripts, every asset served, the CSP unchanged.

The browser test (tests/browser/test_api_docs.py) shows Swagger UI actually rendering; this one
pins what makes that possible and fails fast without chromium: no inline script (the policy
``script-src 'self'`` would block it), no asset from another origin, and each referenced file
present under static/.
"""

from __future__ import annotations

from server.api.docs_page import PAGE_TITLE, SWAGGER_UI_VERSION
from server.app import CSP
from tests.factories import soup


def test_docs_page_uses_only_our_own_files(client):
    r = client.get("/docs")
    assert r.status_code == 200
    assert r.headers["content-security-policy"] == CSP
    page = soup(r.text)
    assert page.title.string == PAGE_TITLE == "Remanence API"
    scripts = page.find_all("script")
    assert scripts and all(s.get("src") and not s.string for s in scripts), "inline script: the CSP blocks it"
    assets = [s["src"] for s in scripts] + [link["href"] for link in page.find_all("link")]
    assert any(f"swagger-ui-dist-{SWAGGER_UI_VERSION}/swagger-ui-bundle.js" in a for a in assets)
    for url in assets:
        assert url.startswith("/static/"), url  # nothing from a CDN: the page works offline
        asset = client.get(url)
        assert asset.status_code == 200, url
        kind = asset.headers["content-type"]
        if url.endswith(".js"):
            assert "javascript" in kind, (url, kind)
        elif url.endswith(".css"):
            assert kind.startswith("text/css"), (url, kind)
    root = page.find(id="swagger-ui")
    assert root["data-openapi-url"] == "/openapi.json"


def test_vendored_swagger_ui_carries_its_licence(client):
    for name in ("LICENSE", "NOTICE"):
        r = client.get(f"/static/vendor/swagger-ui-dist-{SWAGGER_UI_VERSION}/{name}")
        assert r.status_code == 200 and r.text.strip()
    assert "Apache License" in client.get(f"/static/vendor/swagger-ui-dist-{SWAGGER_UI_VERSION}/LICENSE").text


def test_redoc_leads_to_docs_and_the_schema_is_titled(client):
    r = client.get("/redoc", follow_redirects=False)
    assert r.status_code == 308 and r.headers["location"] == "/docs"
    assert client.get("/openapi.json").json()["info"]["title"] == PAGE_TITLE
    paths = client.get("/openapi.json").json()["paths"]
    assert "/docs" not in paths and "/redoc" not in paths
