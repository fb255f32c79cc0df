"""What pages and assets cost a slow line, and what they let the browser send: compression,
versioned long-lived static files, the smaller plotting bundle, the content security policy and the
CSRF token masked per response (BREACH)."""

from __future__ import annotations

import ast
from pathlib import Path

import plotly.graph_objects as go
from plotly.basedatatypes import BaseTraceType

from server.security import mask_token, unmask_token
from server.web.assets import LONG_CACHE, PLOTLY_BUNDLE, PLOTLY_TRACE_TYPES, REVALIDATE, file_version
from tests.factories import csrf_of, login_as, soup

SERVER = Path(__file__).resolve().parents[2] / "server"


def test_policy_refuses_requests_to_other_hosts(client):
    policy = client.get("/login").headers["content-security-policy"]
    directives = {d.split()[0]: d.split()[1:] for d in policy.split(";") if d.strip()}
    assert directives["connect-src"] == ["'self'"]
    assert directives["form-action"] == ["'self'"]
    assert directives["frame-ancestors"] == ["'none'"]
    assert directives["script-src"] == ["'self'"]
    assert set(directives["img-src"]) == {"'self'", "data:", "blob:"}  # blob: only for a plot's PNG download


def test_pages_and_text_assets_are_compressed(client, session):
    login_as(client, session)
    page = client.get("/compounds", headers={"Accept-Encoding": "gzip"})
    assert page.headers["content-encoding"] == "gzip"
    with client.stream("GET", f"/static/{PLOTLY_BUNDLE}", headers={"Accept-Encoding": "gzip"}) as bundle:
        assert bundle.headers["content-encoding"] == "gzip"
        sent = len(b"".join(bundle.iter_raw()))
    whole = (SERVER.parent / "static" / PLOTLY_BUNDLE).stat().st_size
    assert sent < 0.4 * whole, (sent, whole)  # measured: about 0.3 of the 1.19 MB bundle
    plain = client.get("/compounds", headers={"Accept-Encoding": "identity"})
    assert "content-encoding" not in plain.headers


def test_static_addresses_are_versioned_and_cached_for_a_year(client):
    page = soup(client.get("/login").text)
    assets = [s["src"] for s in page.find_all("script")] + [link["href"] for link in page.find_all("link")]
    assert assets and all(a.startswith("/static/") and "?v=" in a for a in assets), assets
    for url in assets:
        r = client.get(url)
        assert r.status_code == 200 and r.headers["cache-control"] == LONG_CACHE, url
    css = "css/remanence.css"
    assert client.get(f"/static/{css}").headers["cache-control"] == REVALIDATE
    assert client.get(f"/static/{css}?v=000000000000").headers["cache-control"] == REVALIDATE  # an old version
    assert f"/static/{css}?v={file_version(css)}" in assets


def test_only_plot_pages_load_the_plotting_bundle(client, session):
    login_as(client, session)
    scripts = [s["src"] for s in soup(client.get("/compounds").text).find_all("script", src=True)]
    assert not any("plotly" in s for s in scripts)
    scripts = [s["src"] for s in soup(client.get("/explorer").text).find_all("script", src=True)]
    assert any(s.startswith(f"/static/{PLOTLY_BUNDLE}?v=") for s in scripts)
    assert client.get("/assets/plotly-6.0.0.min.js").status_code == 404  # the full bundle is gone


def test_every_figure_uses_trace_types_the_basic_bundle_draws():
    used = set()
    for path in SERVER.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "go":
                cls = getattr(go, node.attr, None)
                if isinstance(cls, type) and issubclass(cls, BaseTraceType):
                    used.add(cls().type)
    assert used and used <= PLOTLY_TRACE_TYPES, used - PLOTLY_TRACE_TYPES


def test_csrf_token_is_masked_per_response_and_still_accepted(client, session):
    first = login_as(client, session)
    second = csrf_of(client.get("/compounds").text)
    assert first != second and unmask_token(first) == unmask_token(second)
    for token in (first, second):
        r = client.post("/compounds/new", data={"smiles": "CCOC(=O)c1ccccc1", "csrf_token": token},
                        follow_redirects=False)
        assert r.status_code in (303, 409), r.text  # accepted (the second is the duplicate)
    raw = unmask_token(second)
    refused = client.post("/compounds/new", data={"smiles": "CCCOC(=O)c1ccccc1", "csrf_token": raw},
                          follow_redirects=False)
    assert refused.status_code == 403  # the unmasked secret is never what a page carries


def test_mask_round_trip_and_garbage():
    token = "abc-DEF_123"
    masks = {mask_token(token) for _ in range(20)}
    assert len(masks) == 20 and all(unmask_token(m) == token for m in masks)
    for junk in ("", "x", "!!!!", "a" * 300, None):
        assert unmask_token(junk) != token
