"""Every JSON answer of the API is a typed object in the OpenAPI document (issues 12 item 20 and 14).

A route declared as ``dict`` (or with no model) documents its success answer as a bare object with no
properties, so a client learns nothing of its keys and the conformance test
(tests/trust/test_openapi_conformance.py) checks nothing of its body. This walks the document the app
serves and fails on any 2xx JSON answer, or the items of an answer that is a list, that is such a
free-form object. Free-form values *inside* a typed answer (a kind's ``results``, keyed by that kind's
figures of merit) are not this test's matter: their keys depend on the measurement kind.
"""

from __future__ import annotations

from typing import Any

#: (METHOD, path) whose 2xx JSON answer is free-form by nature, with the reason. Empty today.
FREE_FORM: dict[tuple[str, str], str] = {}


def _resolve(schema: dict[str, Any], components: dict[str, Any]) -> dict[str, Any]:
    while "$ref" in schema:
        schema = components[schema["$ref"].rsplit("/", 1)[-1]]
    return schema


def _free_form(schema: dict[str, Any], components: dict[str, Any]) -> bool:
    """A bare object (no properties), an empty schema, or a union/list whose member is one."""
    schema = _resolve(schema, components)
    if not schema:
        return True
    if schema.get("type") == "array":
        return _free_form(schema.get("items") or {}, components)
    for key in ("anyOf", "oneOf"):
        if key in schema:
            return any(_free_form(s, components) for s in schema[key] if s.get("type") != "null")
    if schema.get("type") == "object" or "additionalProperties" in schema:
        return not schema.get("properties")
    return False


def free_form_answers(document: dict[str, Any]) -> list[tuple[str, str, str]]:
    components = document.get("components", {}).get("schemas", {})
    found = []
    for path, operations in document["paths"].items():
        for method, op in operations.items():
            for status, answer in op.get("responses", {}).items():
                if not status.startswith("2"):
                    continue
                for media, content in (answer.get("content") or {}).items():
                    if "json" in media and _free_form(content.get("schema", {}), components):
                        found.append((method.upper(), path, status))
    return found


def test_the_checker_finds_a_free_form_answer():
    """The walker itself: a dict answer, a list of dicts and a $ref to a bare object are caught; a typed
    object, a list of typed objects and a typed object with a free-form field are not."""
    bare = {"type": "object", "additionalProperties": True}
    typed = {"type": "object", "properties": {"id": {"type": "integer"}, "results": bare}}
    doc = {"components": {"schemas": {"Bare": bare, "Typed": typed}}, "paths": {
        "/a": {"get": {"responses": {"200": {"content": {"application/json": {"schema": bare}}}}}},
        "/b": {"get": {"responses": {"200": {"content": {"application/json": {
            "schema": {"type": "array", "items": {"$ref": "#/components/schemas/Bare"}}}}}}}},
        "/c": {"post": {"responses": {"201": {"content": {"application/json": {"schema": {}}}},
                                      "422": {"content": {"application/json": {"schema": bare}}}}}},
        "/d": {"get": {"responses": {"200": {"content": {"application/json": {
            "schema": {"$ref": "#/components/schemas/Typed"}}}}}}},
        "/e": {"get": {"responses": {"200": {"content": {"application/json": {
            "schema": {"type": "array", "items": {"$ref": "#/components/schemas/Typed"}}}}}}}},
        "/f": {"get": {"responses": {"200": {"content": {"image/svg+xml": {"schema": {"type": "string"}}}}}}},
    }}
    assert free_form_answers(doc) == [("GET", "/a", "200"), ("GET", "/b", "200"), ("POST", "/c", "201")]


def test_no_api_answer_is_a_free_form_object(app):
    found = [f for f in free_form_answers(app.openapi()) if f[:2] not in FREE_FORM]
    assert not found, "2xx JSON answers documented as free-form objects (give the route a response model): " + \
        ", ".join(" ".join(f) for f in found)
    stale = set(FREE_FORM) - {f[:2] for f in free_form_answers(app.openapi())}
    assert not stale, f"FREE_FORM names answers that are typed now: {sorted(stale)}"


def test_the_typed_answers_keep_their_keys(client, session):
    """The admin answers typed here keep every key they had as dicts (the models refuse undeclared keys,
    and leave none out): the key sets as the web admin page and the CLI read them."""
    from tests.factories import login_as

    csrf = {"X-CSRF-Token": login_as(client, session, "admin")}
    user = client.post("/api/v1/users", json={"username": "kai", "password": "long-enough-pw", "role": "viewer"},
                       headers=csrf)
    assert user.status_code == 201, user.text
    assert set(user.json()) == {"username", "display_name", "role", "active", "created_at", "locked"}
    token = client.post("/api/v1/tokens", json={"name": "xrd-pc", "scope": "upload", "expires": "90d"}, headers=csrf)
    assert token.status_code == 201, token.text
    keys = {"id", "name", "prefix", "scope", "kinds", "sees_embargoed", "profile", "created_by", "created_at",
            "last_used_at", "expires_at", "revoked_at"}
    assert set(token.json()) == keys | {"token"}
    listed = client.get("/api/v1/tokens", headers=csrf).json()
    assert listed["total"] == 1 and set(listed["items"][0]) == keys  # the secret is shown once only
