"""The HTML pages: login, registration with live preview, compound and batch pages (SQLite and PostgreSQL)."""

from __future__ import annotations

from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.models import Batch, Compound
from tests.factories import PASSWORD, csrf_of, login_as, make_user, soup


def test_pages_need_login_and_redirect_back(client):
    r = client.get("/compounds/new", follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/login?next=/compounds/new"


def test_wrong_password_and_csrf_less_login(client, session):
    make_user(session, name="rosa")
    token = csrf_of(client.get("/login").text)
    bad = client.post("/login", data={"username": "rosa", "password": "nope-nope", "csrf_token": token})
    assert bad.status_code == 401
    assert "Wrong user name or password" in soup(bad.text).find(role="alert").text
    no_csrf = client.post("/login", data={"username": "rosa", "password": PASSWORD})
    assert no_csrf.status_code == 403


def test_login_redirect_stays_on_site(client, session):
    make_user(session, name="rosa")
    token = csrf_of(client.get("/login").text)
    r = client.post("/login", data={"username": "rosa", "password": PASSWORD, "csrf_token": token,
                                    "next": "//elsewhere.example/x"}, follow_redirects=False)
    assert r.headers["location"] == "/compounds"


def test_live_preview_fragment(client, session):
    csrf = login_as(client, session)
    smiles = build_from_scaffold(PARENT_BOWLS["CH2"], "alkoxy", 6)
    r = client.post("/compounds/preview", data={"smiles": smiles}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert r.status_code == 200
    doc = soup(r.text)
    assert doc.find("html") is None, "an htmx preview returns the fragment, not a page"
    assert doc.find("svg") is not None
    assert doc.find("dd", attrs={"data-field": "formula"}).text == "C57H84O6"
    assert doc.find("dd", attrs={"data-field": "side_chains"}).text == "6 x C6 alkoxy (linear)"
    bad = client.post("/compounds/preview", data={"smiles": "C1CC"}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert "unclosed ring" in soup(bad.text).find(role="alert").text


def test_preview_builds_from_scaffold(client, session):
    csrf = login_as(client, session)
    client.post("/scaffolds", data={"code": "BWL-C", "name": "CH2-bridged bowl", "smiles": PARENT_BOWLS["CH2"],
                                    "csrf_token": csrf})
    r = client.post("/compounds/preview", data={"scaffold": "BWL-C", "chain_kind": "alkylthio", "chain_carbons": "4"},
                    headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    assert soup(r.text).find("dd", attrs={"data-field": "side_chains"}).text == "6 x C4 alkylthio (linear)"


def test_register_through_form_then_batch(client, session):
    csrf = login_as(client, session)
    form = {"smiles": "CCCCCCOc1ccccc1", "label": "hexyloxybenzene test", "csrf_token": csrf}
    r = client.post("/compounds/new", data=form, follow_redirects=False)
    assert r.status_code == 303
    code = r.headers["location"].rsplit("/", 1)[-1]
    page = soup(client.get(f"/compounds/{code}").text)
    assert page.find("h1").text.strip().startswith(code)
    assert page.find("img", attrs={"alt": f"structure of {code}"}) is not None

    r = client.post(f"/compounds/{code}/batches/new",
                    data={"made_on": "2026-11-28", "chemist": "J. Mbeki", "scale_mg": "80", "yield_pct": "44",
                          "purity_pct": "97.5", "state": "made", "notes": "", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    rows = soup(client.get(f"/compounds/{code}").text).select("#batches tbody tr")
    assert len(rows) == 1 and rows[0].find("td").text == f"{code}-B01"
    batch = session.exec(select(Batch)).one()
    assert (batch.yield_pct, batch.purity_pct, batch.chemist) == (44.0, 97.5, "J. Mbeki")

    listing = soup(client.get("/compounds").text)
    assert listing.find("img", attrs={"alt": f"structure of {code}"}) is not None


def test_form_errors_are_shown_and_nothing_stored(client, session):
    csrf = login_as(client, session)
    r = client.post("/compounds/new", data={"smiles": "C(C)(C)(C)(C)C", "csrf_token": csrf})
    assert r.status_code == 422
    assert "valence" in soup(r.text).find(role="alert").text.lower()
    assert session.exec(select(Compound)).all() == []
    client.post("/compounds/new", data={"smiles": "CCO", "csrf_token": csrf})
    dup = client.post("/compounds/new", data={"smiles": "OCC", "csrf_token": csrf})
    assert dup.status_code == 409
    assert soup(dup.text).find("a", string="Open RVZ-00001") is not None
    bad_batch = client.post("/compounds/RVZ-00001/batches/new", data={"yield_pct": "lots", "csrf_token": csrf})
    assert bad_batch.status_code == 422 and "not a number" in soup(bad_batch.text).find(role="alert").text


def test_form_post_without_csrf_fails(client, session):
    login_as(client, session)
    r = client.post("/compounds/new", data={"smiles": "CCO"})
    assert r.status_code == 403
    assert session.exec(select(Compound)).all() == []


def test_viewer_cannot_write(client, session):
    csrf = login_as(client, session, role="viewer")
    assert client.get("/compounds").status_code == 200
    r = client.post("/compounds/new", data={"smiles": "CCO", "csrf_token": csrf})
    assert r.status_code == 403
    assert client.get("/compounds/new").status_code == 403


def test_compound_list_pages_in_place(client, session):
    csrf = login_as(client, session)
    for n in range(1, 53):
        client.post("/compounds/new", data={"smiles": "C" * n + "O", "csrf_token": csrf})
    full = soup(client.get("/compounds").text)
    assert len(full.select("table.registry tbody tr")) == 50
    frag = client.get("/compounds?page=2", headers={"HX-Request": "true"})
    assert "HX-Request" in frag.headers["vary"]
    doc = soup(frag.text)
    assert doc.find("html") is None and len(doc.select("tbody tr")) == 2


def test_security_headers(client):
    r = client.get("/login")
    assert "script-src 'self'" in r.headers["content-security-policy"]
    assert r.headers["x-frame-options"] == "DENY" and r.headers["x-content-type-options"] == "nosniff"
    cookie = r.headers.get("set-cookie", "")
    assert "httponly" in cookie.lower() and "samesite=lax" in cookie.lower()


def test_login_is_throttled_after_repeated_failures(client, session):
    make_user(session, name="rosa")
    token = csrf_of(client.get("/login").text)
    for _ in range(5):
        client.post("/login", data={"username": "rosa", "password": "wrong-guess", "csrf_token": token})
    # Locked for a few minutes now: even the right password is refused.
    r = client.post("/login", data={"username": "rosa", "password": PASSWORD, "csrf_token": token},
                    follow_redirects=False)
    assert r.status_code == 401 and int(r.headers["retry-after"]) > 0
    from sqlmodel import select as _select

    from server.models import User
    from server.services import accounts

    assert accounts.is_locked(session, "rosa")
    user = session.exec(_select(User).where(User.username == "rosa")).one()
    assert user.password_hash.startswith("$argon2id$")  # Argon2id, RFC 9106
