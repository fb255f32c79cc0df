"""NUL (U+0000) in any text a caller sends is refused with 422 naming the field, on both databases.

PostgreSQL cannot store U+0000 in text at all; the schema fuzzer found it route by route (a freeze's
compound codes, then a reagent's name). server/text_guard.py refuses it once, before any handler, and
the DataError handler in server/app.py answers 422 for anything that still reaches the database.
"""

from __future__ import annotations

from server.text_guard import nul_in_body, nul_in_query
from tests.factories import bearer, login_as, make_token


def test_locations_are_named():
    assert nul_in_body("application/json", b'{"name": "a\\u0000b"}') == "name"
    assert nul_in_body("application/json; charset=utf-8", b'{"compounds": ["RVZ-1", "\\u0000"]}') == "compounds.1"
    assert nul_in_body("application/json", b'{"conditions": {"area": "1\\u0000"}}') == "conditions.area"
    assert nul_in_body("application/json", b'{"name": "plain \\\\u0000 text"}') is None  # an escaped backslash
    assert nul_in_body("application/x-www-form-urlencoded", b"name=ok&notes=a%00b") == "notes"
    assert nul_in_body("multipart/form-data; boundary=x", b"\x00\x00") is None  # files may hold NUL
    assert nul_in_query("/api/v1/compounds", [("q", "a\x00")]) == "q"
    assert nul_in_query("/api/v1/compounds/\x00", []) == "path"


def test_api_json_body_query_and_path(client, session):
    writer = bearer(make_token(session, scope="write", name="nul-writer"))
    r = client.post("/api/v1/reagents", json={"name": "\x00"}, headers=writer)
    assert r.status_code == 422, r.text
    assert r.json()["field"] == "name" and "NUL" in r.json()["detail"]
    r = client.get("/api/v1/compounds", params={"q": "bowl\x00"}, headers=writer)
    assert r.status_code == 422 and r.json()["field"] == "q"
    assert client.get("/api/v1/compounds/RVZ%0000001", headers=writer).status_code == 422
    # Ordinary text still passes.
    assert client.post("/api/v1/reagents", json={"name": "anisole"}, headers=writer).status_code in (200, 201)


def test_web_form_gets_the_error_page(client, session):
    login_as(client, session, role="member")
    r = client.get("/compounds", params={"q": "x\x00"})
    assert r.status_code == 422
    assert "text/html" in r.headers["content-type"] and "NUL" in r.text
