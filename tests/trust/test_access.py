"""Access control against the access table in ``server/deps.py``, over every write endpoint of the API.

The write endpoints are read from the app's own OpenAPI schema (every POST/PATCH/PUT/DELETE), so a
new endpoint is covered the day it appears. For each one:

* anonymous -> 401; read token -> 403; viewer session -> 403 (even with a valid CSRF token);
* upload token -> 403, except the measurement upload (allowed, for its kinds only);
* member or admin session without the CSRF header -> 403;
* positive controls: a write token, a member and an admin session (with CSRF) are not refused
  (member and write token refused only by the admin-only endpoints), and nothing answers 5xx.

Plus: revoked tokens stop at once; upload tokens never see embargoed structures (API, drawing,
structure search, HTML page). Runs on SQLite and PostgreSQL through the ``client``/``session`` fixtures.
"""

from __future__ import annotations

import re
import zlib

import pytest
from fastapi.testclient import TestClient
from sqlmodel import select

from server import access
from server.ingest.table import to_csv_bytes
from server.models import ApiToken
from server.services import accounts
from server.synth.dsc import dsc_trace
from tests.api.test_attachments import micrograph
from tests.factories import bearer, login_as, make_token, make_user, soup

from .conftest import loop_bytes

WRITE_METHODS = ("post", "patch", "put", "delete")
UPLOAD = ("post", "/api/v1/batches/{batch_code}/measurements")
UPLOADS = {UPLOAD, ("post", "/api/v1/samples/{sample_code}/measurements")}  # an upload token may post files
# Admin-only (the Admin dependency of deps.py): a member or a write token is refused there too, with
# require_admin's own message. These are known to be admin-only; others are found by that message.
ADMIN_ONLY = {("post", "/api/v1/compounds/{code}/verdict/override"), ("post", "/api/v1/compounds/{code}/verdict/clear")}
ADMIN_DETAIL = "only an admin may do this"
# Owner-or-admin (access.may_cancel_job): the world's job was queued by the "registrar" token, so a
# member session and another write token are refused with NOT_JOB_OWNER; an admin is not.
OWNER_ONLY = {("post", "/api/v1/jobs/{job_id}/cancel")}
# An account's own inbox, follows and preferences (access.has_inbox): every logged-in account, a viewer
# too, with CSRF; no token of any scope.
ACCOUNT_ONLY = {("post", "/api/v1/notifications/read-all"), ("post", "/api/v1/notifications/{notification_id}/read"),
                ("put", "/api/v1/notifications/preferences"), ("put", "/api/v1/compounds/{code}/follow"),
                ("delete", "/api/v1/compounds/{code}/follow")}

PLAIN = "COc1c(OC)c(OC)c(OC)c(OC)c1OC"  # invented hexa-methoxy benzene (C12H18O6)
SECRET = "CSc1c(SC)c(SC)c(SC)c(SC)c1SC"  # invented hexa-methylthio benzene, registered under embargo


def write_operations(app) -> list[tuple[str, str]]:
    ops = []
    for path, item in app.openapi()["paths"].items():
        for method in item:
            if method in WRITE_METHODS:
                ops.append((method, path))
    return sorted(ops)


@pytest.fixture
def world(app, client, session):
    """A compound, a batch and a job to aim at, and one client per kind of caller."""
    writer = bearer(make_token(session, scope="write", name="registrar"))
    r = client.post("/api/v1/compounds", json={"smiles": PLAIN}, headers=writer)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    r = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer)
    assert r.status_code == 201, r.text
    batch = r.json()["code"]
    job = client.post(f"/api/v1/compounds/{code}/estimates", json={}, headers=writer)
    assert job.status_code == 202, job.text
    m = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                    files={"file": ("m.csv", loop_bytes(77), "text/csv")}, headers=writer)
    assert m.status_code == 201, m.text
    image = client.post(f"/api/v1/compounds/{code}/attachments", headers=writer,
                        files={"file": ("pom.png", micrograph("PNG", size=(32, 24), seed=77), "image/png")})
    assert image.status_code == 201, image.text
    freeze = client.post("/api/v1/freezes", json={"name": "matrix freeze", "compounds": [code]}, headers=writer)
    assert freeze.status_code == 201, freeze.text
    # Sacrificial targets for the admin endpoints, so the positive controls revoke nothing we use.
    make_user(session, name="spare-user", role="viewer")
    spare, _ = accounts.create_token(session=session, name="spare-pc", scope="read", actor="test")

    sessions = {}
    for role in ("viewer", "member", "admin"):
        c = TestClient(app)
        c.__enter__()
        sessions[role] = (c, login_as(c, session, role=role, name=f"{role}-x"))
    yield {
        "params": {"code": code, "batch_code": batch, "job_id": job.json()["job"], "measurement_id": m.json()["id"],
                   "sample_code": m.json()["sample"],
                   "username": "spare-user", "token_id": spare.id, "name": "no-such-profile", "reagent_id": 1,
                   # No such comment: only its author or an admin may change one (tests/api/test_comments.py),
                   # so the matrix's positive controls aim past that rule and test the access table alone.
                   "comment_id": 999999, "freeze_id": freeze.json()["id"], "notification_id": 999999,
                   # A real image: archive and restore need a reason, so the positive controls' empty bodies
                   # are refused with 422 after the access check and change nothing.
                   "attachment_id": image.json()["id"]},
        "code": code,
        "batch": batch,
        # The read token is granted the embargo (it is the positive control of the embargo tests).
        "tokens": {scope: bearer(make_token(session, scope=scope, name=f"{scope}-pc", sees_embargoed=scope == "read"))
                   for scope in ("read", "upload", "write")},
        "dsc_only": bearer(make_token(session, scope="upload", name="dsc-pc", kinds=["dsc"])),
        "sessions": sessions,
    }
    for c, _ in sessions.values():
        c.__exit__(None, None, None)


def call(c: TestClient, method: str, path: str, params: dict, headers: dict | None = None, kind: str = "pe_loop"):
    # /batches/{code}/... names a batch by `code`; everywhere else `code` is a compound.
    values = {**params, "code": params["batch_code"]} if path.startswith("/api/v1/batches/{code}") else params
    url = re.sub(r"\{(\w+)\}", lambda m: str(values[m.group(1)]), path)
    if (method, path) in UPLOADS:
        # A fixed offset past the world's own files (loop_bytes(77), (91)) and a stable hash, so a
        # probe's bytes never equal a stored file's (that answers 200 "already stored", not 201).
        return c.request(method.upper(), url, data={"kind": kind},
                         files={"file": ("loop.csv", loop_bytes(1000 + len(url) + zlib.crc32(kind.encode()) % 50), "text/csv")},
                         headers=headers or {})
    return c.request(method.upper(), url, json={}, headers=headers or {})


def test_schema_lists_the_write_endpoints(app):
    ops = write_operations(app)
    # A guard against a matrix that silently iterates over nothing.
    assert UPLOAD in ops and ADMIN_ONLY <= set(ops) and len(ops) >= 10, ops


def test_denied_callers_over_every_write_endpoint(app, client, world):
    params, tokens, sessions = world["params"], world["tokens"], world["sessions"]
    anon = TestClient(app)
    failures = []

    def expect(who, status, r, method, path, detail_has=None):
        if r.status_code != status or (detail_has and detail_has not in r.text):
            failures.append(f"{who:>22} {method.upper():5} {path}: {r.status_code} {r.text[:160]}")

    for method, path in write_operations(app):
        expect("anonymous", 401, call(anon, method, path, params), method, path)
        expect("read token", 403, call(client, method, path, params, tokens["read"]), method, path)
        viewer, viewer_csrf = sessions["viewer"]
        if (method, path) in ACCOUNT_ONLY:
            expect("write token", 403, call(client, method, path, params, tokens["write"]), method, path,
                   access.NO_INBOX)
            expect("viewer without CSRF", 403, call(viewer, method, path, params), method, path, "CSRF")
        else:
            expect("viewer session", 403, call(viewer, method, path, params, {"X-CSRF-Token": viewer_csrf}), method,
                   path)
        if (method, path) not in UPLOADS:
            expect("upload token", 403, call(client, method, path, params, tokens["upload"]), method, path)
        for role in ("member", "admin"):
            c, _ = sessions[role]
            needs = "CSRF" if role == "admin" else None
            expect(f"{role} without CSRF", 403, call(c, method, path, params), method, path, needs)
        # A made-up bearer token is refused before anything else, whatever the cookie says.
        member, member_csrf = sessions["member"]
        expect("bogus token + cookie", 401,
               call(member, method, path, params, {"Authorization": "Bearer not-a-token", "X-CSRF-Token": member_csrf}),
               method, path)
    assert not failures, "access table violated:\n" + "\n".join(failures)
    anon.close()


def test_allowed_callers_are_not_refused(app, client, world):
    """Positive controls for the matrix above: the same requests from callers the table allows.

    An admin session (with CSRF) is refused nowhere. A member session and a write token are refused
    only by admin-only endpoints, with require_admin's message; the known admin-only ones must be
    among them. Nothing answers 5xx.
    """
    params, tokens, sessions = world["params"], world["tokens"], world["sessions"]
    failures, admin_only = [], set()
    for method, path in write_operations(app):
        callers = [("member session", sessions["member"][0], {"X-CSRF-Token": sessions["member"][1]}),
                   ("write token", client, tokens["write"]),
                   ("admin session", sessions["admin"][0], {"X-CSRF-Token": sessions["admin"][1]})]
        if (method, path) in ACCOUNT_ONLY:  # a viewer's own inbox; no token has one (the matrix above)
            callers = [c for c in callers if c[0] != "write token"]
            callers.append(("viewer session", sessions["viewer"][0], {"X-CSRF-Token": sessions["viewer"][1]}))
        for who, c, headers in callers:
            r = call(c, method, path, params, headers)
            if who != "admin session" and r.status_code == 403 and r.json().get("detail") == ADMIN_DETAIL:
                admin_only.add((method, path, who))
                continue
            if (method, path) in OWNER_ONLY and who != "admin session":
                if r.status_code != 403 or r.json().get("detail") != access.NOT_JOB_OWNER:
                    failures.append(f"{who} cancelled a job it did not queue: {r.status_code} {r.text[:160]}")
                continue
            if r.status_code in (401, 403) or r.status_code >= 500:
                failures.append(f"{who:>15} {method.upper():5} {path}: {r.status_code} {r.text[:160]}")
    for method, path in ADMIN_ONLY:
        for who in ("member session", "write token"):
            if (method, path, who) not in admin_only:
                failures.append(f"{who} was not refused by admin-only {method.upper()} {path}")
    assert not failures, "\n".join(failures)
    print("\nadmin-only write endpoints:", sorted({f"{m.upper()} {p}" for m, p, _ in admin_only}))


def test_upload_token_only_uploads_its_kinds(client, world):
    params, tokens = world["params"], world["tokens"]
    ok = call(client, *UPLOAD, params, tokens["upload"])
    assert ok.status_code == 201, ok.text

    refused = call(client, *UPLOAD, params, world["dsc_only"], kind="pe_loop")
    assert refused.status_code == 403 and "dsc" in refused.json()["detail"], refused.text
    # The same token may upload what it is for (a DSC melting peak, server.synth.dsc).
    trace = dsc_trace([{"kind": "melting", "t_K": 400.0, "dh_J_g": 80.0, "width_K": 1.5}], t_start_K=330,
                      t_end_K=450, rate_K_min=10.0, mass_mg=5.0)
    r = client.post(f"/api/v1/batches/{world['batch']}/measurements", data={"kind": "dsc", "mass": "5 mg"},
                    files={"file": ("dsc.csv", to_csv_bytes(trace), "text/csv")}, headers=world["dsc_only"])
    assert r.status_code == 201, r.text


def test_revoked_token_is_refused_at_once(client, session):
    secret = make_token(session, scope="write", name="doomed-pc")
    assert client.get("/api/v1/compounds", headers=bearer(secret)).status_code == 200
    assert client.post("/api/v1/compounds", json={"smiles": PLAIN}, headers=bearer(secret)).status_code == 201
    row = session.exec(select(ApiToken).where(ApiToken.name == "doomed-pc")).one()
    accounts.revoke_token(session=session, token_id=row.id, actor="test")
    # No cache, no grace period: the very next request with it is refused, reads and writes alike.
    assert client.get("/api/v1/compounds", headers=bearer(secret)).status_code == 401
    r = client.post("/api/v1/compounds", json={"smiles": SECRET}, headers=bearer(secret))
    assert r.status_code == 401 and "revoked" in r.json()["detail"]


@pytest.fixture
def embargoed(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar2"))
    r = client.post("/api/v1/compounds", json={"smiles": SECRET, "embargoed": True}, headers=writer)
    assert r.status_code == 201, r.text
    return r.json()


def test_upload_token_cannot_read_embargoed_structures(client, session, embargoed):
    code = embargoed["code"]
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    reader = bearer(make_token(session, scope="read", name="reader-pc", sees_embargoed=True))

    body = client.get(f"/api/v1/compounds/{code}", headers=up).json()
    assert {k: body[k] for k in ("smiles", "inchi", "inchikey", "formula")} == dict.fromkeys(
        ("smiles", "inchi", "inchikey", "formula"))
    assert body["mw"] is None and body["exact_mass"] is None and body["side_chains"] == []
    listed = {c["code"]: c for c in client.get("/api/v1/compounds", headers=up).json()["items"]}
    assert listed[code]["smiles"] is None and listed[code]["inchikey"] is None
    assert client.get(f"/api/v1/compounds/{code}/structure.svg", headers=up).status_code == 404
    assert client.get(f"/api/v1/compounds/{code}/structure.svg?thumbnail=true", headers=up).status_code == 404

    # A structure search must not answer "yes, an embargoed compound has this fragment".
    for query in ({"substructure": "CSc1ccccc1"}, {"similar": SECRET, "threshold": "0.3"}):
        found = client.get("/api/v1/search", params=query, headers=up)
        assert found.status_code == 200, found.text
        assert code not in {i["code"] for i in found.json()["items"]}

    # The HTML page, reached with the same token, withholds the structure too.
    page = soup(client.get(f"/compounds/{code}", headers=up).text)
    assert SECRET not in page.get_text() and embargoed["inchikey"] not in page.get_text()

    # Positive control: a read token sees it all (so the checks above can fail).
    seen = client.get(f"/api/v1/compounds/{code}", headers=reader).json()
    assert seen["smiles"] and seen["inchikey"] == embargoed["inchikey"]
    assert client.get(f"/api/v1/compounds/{code}/structure.svg", headers=reader).status_code == 200
    hits = client.get("/api/v1/search", params={"substructure": "CSc1ccccc1"}, headers=reader).json()
    assert code in {i["code"] for i in hits["items"]}


@pytest.mark.parametrize("where", ["/api/v1/compounds", "/compounds", "/compounds/export.csv"])
def test_upload_token_cannot_probe_embargoed_structures_through_the_list_filter(client, session, embargoed, where):
    """The compound list takes the same `substructure`/`similar` filters as /search; it must not be an oracle."""
    code = embargoed["code"]
    up = bearer(make_token(session, scope="upload", name="instrument-pc2"))
    r = client.get(where, params={"substructure": "CSc1ccccc1"}, headers=up)
    assert r.status_code == 200, r.text
    if where.startswith("/api/"):
        found = code in {c["code"] for c in r.json()["items"]}
    elif where.endswith(".csv"):
        found = code in r.text
    else:
        found = code in {a.get_text(strip=True) for a in soup(r.text).select("table a")}
    # Control: the same filter with a fragment the compound lacks must not list it either way.
    assert code not in client.get(where, params={"substructure": "c1ccncc1"}, headers=up).text
    assert not found, f"{where}: an upload token learns that embargoed {code} contains the fragment"


# --- web routes ----------------------------------------------------------------------------------
#
# The same table (server/access.py) over every web route, enumerated from app.routes: a route that
# is not classified below fails test_every_web_route_is_classified, so a new page is covered the day
# it appears. Pages answer for people: nobody logged in -> 303 to /login?next=..., a refused caller
# -> 403 page; a write from a session needs the CSRF token.

PUBLIC = {("GET", "/login"), ("POST", "/login"), ("POST", "/logout"), ("GET", "/"), ("GET", "/healthz"),
          ("GET", "/status"), ("GET", "/docs"), ("GET", "/redoc")}  # /status: public only when published (tested below both ways); /docs documents the API, no data
WEB_READ = {("GET", p) for p in (
    "/compounds", "/compounds/count", "/compounds/export.{fmt}", "/compounds/{code}", "/compounds/{code}/timeline",
    "/compounds/{code}/rates", "/scaffolds", "/measurements/{measurement_id}", "/explorer", "/outcomes",
    "/calibration", "/jobs/{job_id}/panel", "/queue", "/digest", "/digest.md", "/compare",
    "/compare.{fmt}", "/samples/{code}", "/planning", "/planning/routes/{batch_code}", "/planning/reagents",
    "/freezes", "/freezes/{freeze_id}", "/batches/{code}", "/import-profiles", "/import-profiles/{name}")}
WEB_WRITE = {("GET", "/compounds/new"), ("POST", "/compounds/preview"), ("POST", "/compounds/new"),
             ("POST", "/compounds/{code}/edit"), ("POST", "/compounds/{code}/archive"),
             ("POST", "/compounds/{code}/barriers"), ("POST", "/compounds/{code}/estimate"),
             ("GET", "/compounds/{code}/batches/new"), ("POST", "/compounds/{code}/batches/new"),
             ("POST", "/scaffolds"), ("GET", "/batches/{code}/upload"), ("POST", "/batches/{code}/upload"),
             ("POST", "/jobs/{job_id}/cancel"), ("POST", "/queue"), ("POST", "/batches/{code}/identity"),
             ("POST", "/measurements/{measurement_id}/revise"), ("POST", "/measurements/{measurement_id}/archive"),
             ("POST", "/measurements/{measurement_id}/signals"), ("POST", "/measurements/{measurement_id}/signals/revert"),
             ("POST", "/planning/{code}/claim"), ("POST", "/planning/routes/{batch_code}/steps"),
             ("POST", "/planning/routes/{batch_code}/precursors"), ("POST", "/planning/routes/{batch_code}/copy"),
             ("POST", "/planning/reagents"),
             ("POST", "/compounds/{code}/comments"), ("POST", "/batches/{code}/comments"),
             ("POST", "/samples/{code}/comments"), ("POST", "/measurements/{measurement_id}/comments"),
             ("POST", "/comments/{comment_id}/edit"), ("POST", "/comments/{comment_id}/archive"),
             ("POST", "/compounds/{code}/attachments"), ("POST", "/batches/{code}/attachments"),
             ("POST", "/samples/{code}/attachments"), ("POST", "/measurements/{measurement_id}/attachments"),
             ("POST", "/attachments/{attachment_id}/archive"), ("POST", "/attachments/{attachment_id}/restore"),
             ("POST", "/freezes"), ("POST", "/freezes/{freeze_id}/publication"),
             ("POST", "/import-profiles/draft"), ("POST", "/import-profiles"),
             ("POST", "/import-profiles/{name}")}
WEB_ADMIN = {("POST", "/compounds/{code}/verdict"), ("POST", "/status/public"), ("GET", "/admin"),
             ("POST", "/admin/users"), ("POST", "/admin/users/{username}/deactivate"), ("POST", "/admin/tokens"),
             ("POST", "/admin/tokens/{token_id}/revoke"), ("POST", "/admin/users/{username}/display-name")}
WEB_OWNER_ONLY = {("POST", "/jobs/{job_id}/cancel")}
# Every account's own inbox, follows and preferences (access.has_inbox): any role; no token.
WEB_ACCOUNT = {("GET", "/inbox"), ("POST", "/inbox/read-all"), ("POST", "/inbox/{notification_id}/read"),
               ("POST", "/inbox/preferences"), ("POST", "/compounds/{code}/follow"), ("POST", "/inbox/display-name")}
# The menu badge alone (GET /inbox/badge, polled by every page): an account's count; for anyone without an
# inbox (nobody logged in, a token) 204 and nothing else, so a poll from a tab whose login ended neither
# swaps a login page into the menu nor says anything.
WEB_BADGE = {("GET", "/inbox/badge")}
SECRET_LABEL = "hexakis-methylsulfanyl benzene, Q-7"  # an invented label that spells out the structure
SECRET_NOTES = "made from hexachlorobenzene and sodium thiomethoxide"  # invented


def web_routes(app) -> list[tuple[str, str]]:
    """(method, path) of every web route (not /api/), walking included routers."""
    from fastapi.routing import APIRoute

    def walk(routes, prefix=""):
        for r in routes:
            if hasattr(r, "original_router"):  # FastAPI >= 0.165 keeps included routers as branches
                yield from walk(r.original_router.routes, prefix + (r.include_context.prefix or ""))
            elif isinstance(r, APIRoute):
                for method in r.methods - {"HEAD"}:
                    yield method, prefix + r.path

    return sorted({(m, p) for m, p in walk(app.routes) if not p.startswith(("/api/", "/assets/"))})


def web_call(c: TestClient, method: str, path: str, params: dict, headers: dict | None = None):
    url = re.sub(r"\{(\w+)\}", lambda m: str(params[m.group(1)]), path)
    if path.startswith("/batches/{code}"):
        url = re.sub(r"^/batches/[^/]+", f"/batches/{params['batch_code']}", url)
    if path.startswith("/samples/{code}"):
        url = url.replace(f"/samples/{params['code']}", f"/samples/{params['sample_code']}")
    return c.request(method, url, data={} if method == "POST" else None, headers=headers or {},
                     follow_redirects=False)


def test_every_web_route_is_classified(app):
    routes = set(web_routes(app))
    classified = PUBLIC | WEB_READ | WEB_WRITE | WEB_ADMIN | WEB_ACCOUNT | WEB_BADGE
    assert routes - classified == set(), "classify these web routes in the access matrix"
    assert classified - routes == set(), "routes named in the matrix that the app does not have"
    assert len(WEB_READ) >= 10 and len(WEB_WRITE) >= 10 and len(WEB_ADMIN) >= 5  # not iterating over nothing


def test_web_routes_follow_the_access_table(app, client, world):
    p, tokens, sessions = {**world["params"], "fmt": "csv"}, world["tokens"], world["sessions"]
    anon = TestClient(app)
    failures = []

    def expect(who, ok, r, method, path):
        if not ok(r) or r.status_code >= 500:
            failures.append(f"{who:>22} {method:4} {path}: {r.status_code} {r.headers.get('location', '')} "
                            f"{r.text[:120]!r}")

    to_login = lambda r: r.status_code == 303 and r.headers["location"].startswith("/login?next=")  # noqa: E731
    refused = lambda r: r.status_code == 403  # noqa: E731
    allowed = lambda r: r.status_code not in (401, 403) and not to_login(r)  # noqa: E731

    for method, path in sorted(WEB_READ | WEB_WRITE | WEB_ADMIN | WEB_ACCOUNT):
        need = ("read" if (method, path) in WEB_READ else "write" if (method, path) in WEB_WRITE
                else "account" if (method, path) in WEB_ACCOUNT else "admin")
        expect("anonymous", to_login, web_call(anon, method, path, p), method, path)
        callers = {"viewer": (sessions["viewer"][0], {"X-CSRF-Token": sessions["viewer"][1]}),
                   "member": (sessions["member"][0], {"X-CSRF-Token": sessions["member"][1]}),
                   "admin": (sessions["admin"][0], {"X-CSRF-Token": sessions["admin"][1]}),
                   "read token": (client, tokens["read"]), "upload token": (client, tokens["upload"]),
                   "write token": (client, tokens["write"])}
        may = {"read": set(callers), "write": {"member", "admin", "write token"}, "admin": {"admin"},
               "account": {"viewer", "member", "admin"}}[need]
        if (method, path) in WEB_OWNER_ONLY:
            may = {"admin"}  # the world's job was queued by another token (access.may_cancel_job)
        for who, (c, headers) in callers.items():
            expect(who, allowed if who in may else refused, web_call(c, method, path, p, headers), method, path)
        if method == "POST":
            c, _ = sessions["admin"]
            expect("admin without CSRF", refused, web_call(c, method, path, p), method, path)
    quiet = lambda r: r.status_code == 204 and r.content == b""  # noqa: E731
    for method, path in sorted(WEB_BADGE):
        expect("anonymous", quiet, web_call(anon, method, path, p), method, path)
        for who in ("read token", "upload token", "write token"):
            expect(who, quiet, web_call(client, method, path, p, tokens[who.split()[0]]), method, path)
        for who in ("viewer", "member", "admin"):
            expect(who, allowed, web_call(sessions[who][0], method, path, p), method, path)
    anon.close()
    assert not failures, "access table violated on web routes:\n" + "\n".join(failures)


def test_status_page_is_public_only_when_published(app, client, session, world):
    anon = TestClient(app)
    private = anon.get("/status", follow_redirects=False)
    assert private.status_code == 403 and "This page is private" in private.text  # issue 22: not a bare login form
    admin, csrf = world["sessions"]["admin"]
    assert admin.post("/status/public", data={"enabled": "on", "confirm": "on", "csrf_token": csrf}).status_code == 200
    assert anon.get("/status", follow_redirects=False).status_code == 200
    anon.close()


@pytest.fixture
def embargoed_world(client, session, world):
    """An embargoed compound with a label and notes that give it away, a batch, a measurement and a job."""
    writer = world["tokens"]["write"]
    r = client.post("/api/v1/compounds", json={"smiles": SECRET, "embargoed": True, "label": SECRET_LABEL,
                                               "notes": SECRET_NOTES}, headers=writer)
    assert r.status_code == 201, r.text
    c = r.json()
    batch = client.post(f"/api/v1/compounds/{c['code']}/batches", json={"chemist": "lab"}, headers=writer).json()
    m = client.post(f"/api/v1/batches/{batch['code']}/measurements", data={"kind": "pe_loop"},
                    files={"file": ("m.csv", loop_bytes(91), "text/csv")}, headers=writer)
    assert m.status_code == 201, m.text
    job = client.post(f"/api/v1/compounds/{c['code']}/estimates", json={}, headers=writer)
    assert job.status_code == 202, job.text
    admin, csrf = world["sessions"]["admin"]
    admin.post("/status/public", data={"enabled": "on", "confirm": "on", "csrf_token": csrf})  # so visitors reach it too
    return {"params": {**world["params"], "fmt": "csv", "code": c["code"], "batch_code": batch["code"],
                       "measurement_id": m.json()["id"], "sample_code": m.json()["sample"], "job_id": job.json()["job"]},
            "giveaways": {"SMILES": SECRET, "InChIKey": c["inchikey"], "formula": c["formula"],
                          "label": SECRET_LABEL, "notes": SECRET_NOTES}}


def test_embargo_holds_on_every_web_route(app, client, world, embargoed_world):
    """For callers who may not see embargoed structures (an upload token; a visitor on the public
    status page), no web page they reach shows the embargoed compound's structure, label or notes."""
    p, giveaways = embargoed_world["params"], embargoed_world["giveaways"]
    anon = TestClient(app)
    reached, failures = 0, []
    for method, path in sorted(WEB_READ | PUBLIC):
        if method != "GET":
            continue
        for who, c, headers in (("upload token", client, world["tokens"]["upload"]), ("visitor", anon, {})):
            r = web_call(c, method, path, p, headers)
            if r.status_code != 200:
                continue
            reached += 1
            for what, text in giveaways.items():
                if text in r.text:
                    failures.append(f"{who} sees the {what} of the embargoed compound on {path}")
    anon.close()
    assert reached >= len(WEB_READ), reached  # the upload token reached every read page
    assert not failures, "\n".join(failures)

    # Positive control: a read token sees them where they belong, so the checks above can fail.
    reader = world["tokens"]["read"]
    page = client.get(f"/compounds/{p['code']}", headers=reader).text
    listed = client.get("/compounds", headers=reader).text
    assert SECRET_LABEL in page and SECRET_NOTES in page and giveaways["InChIKey"] in page
    assert SECRET_LABEL in listed
