"""Repeated refused uploads from one caller are answered 429 with Retry-After (issue 12 item 8).

Each test puts in a window of 3 refusals per 60 s with a clock of its own (no sleeps); the suite's
default settings allow 100 000 (tests/conftest.py), so the bad-input suites are unaffected.
SQLite and PostgreSQL through the ``app`` fixture.
"""

from __future__ import annotations

import pytest

from server.app import takes_file
from server.ratelimit import FailureWindow
from tests.factories import bearer, csrf_of, login_as, make_token

from .conftest import counts, loop_bytes

SMILES = "COc1c(OC)c(OC)c(OC)c(OC)c1OC"  # invented hexa-methoxy benzene (C12H18O6)
BAD = b"E (kV/cm),P (uC/cm^2)\n1,n/a\n"  # a P-E table whose only value is not a number: 422


class Clock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock(app) -> Clock:
    c = Clock()
    app.state.upload_failures = FailureWindow(3, 60.0, clock=c)
    return c


@pytest.fixture
def target(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    code = client.post("/api/v1/compounds", json={"smiles": SMILES}, headers=writer).json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    return {"batch": batch, "pc1": bearer(make_token(session, scope="upload", name="pc-1")),
            "pc2": bearer(make_token(session, scope="upload", name="pc-2"))}


def _upload(client, target, who: str, raw: bytes):
    return client.post(f"/api/v1/batches/{target['batch']}/measurements", data={"kind": "pe_loop"},
                       files={"file": ("loop.csv", raw, "text/csv")}, headers=target[who])


def test_three_refusals_then_429_with_retry_after(app, client, clock, target):
    for _ in range(3):
        assert _upload(client, target, "pc1", BAD).status_code == 422
    before = counts(app.state.engine)
    r = _upload(client, target, "pc1", loop_bytes(1))  # even a good file waits: the caller is refused first
    assert r.status_code == 429, r.text
    assert r.headers["Retry-After"] == "60"
    assert r.json()["limit"] == "upload_failures" and r.json()["limit_value"] == 3
    assert "REMANENCE_UPLOAD_FAILURES" in r.json()["detail"]
    assert counts(app.state.engine) == before
    clock.now += 45
    r = _upload(client, target, "pc1", BAD)
    assert r.status_code == 429 and r.headers["Retry-After"] == "15"


def test_successes_do_not_count(client, clock, target):
    assert _upload(client, target, "pc1", BAD).status_code == 422
    assert _upload(client, target, "pc1", BAD).status_code == 422
    for i in range(5):
        assert _upload(client, target, "pc1", loop_bytes(10 + i)).status_code == 201
    assert _upload(client, target, "pc1", loop_bytes(10)).status_code == 200  # the same bytes again: not a refusal
    assert _upload(client, target, "pc1", BAD).status_code == 422  # the third refusal is still answered
    assert _upload(client, target, "pc1", loop_bytes(20)).status_code == 429


def test_another_token_is_unaffected(client, clock, target):
    for _ in range(3):
        _upload(client, target, "pc1", BAD)
    assert _upload(client, target, "pc1", loop_bytes(1)).status_code == 429
    assert _upload(client, target, "pc2", loop_bytes(1)).status_code == 201
    assert _upload(client, target, "pc2", BAD).status_code == 422


def test_the_window_expires(client, clock, target):
    for _ in range(3):
        _upload(client, target, "pc1", BAD)
    clock.now += 59.5
    assert _upload(client, target, "pc1", loop_bytes(1)).status_code == 429
    clock.now += 0.5
    assert _upload(client, target, "pc1", loop_bytes(1)).status_code == 201
    for _ in range(3):  # the old refusals left the window: three new ones are answered again
        assert _upload(client, target, "pc1", BAD).status_code == 422
    assert _upload(client, target, "pc1", BAD).status_code == 429


def test_the_web_form_counts_per_session(client, session, clock, target):
    login_as(client, session, role="member")
    token = csrf_of(client.get(f"/batches/{target['batch']}/upload").text)

    def post(raw: bytes):
        return client.post(f"/batches/{target['batch']}/upload", data={"kind": "pe_loop", "csrf_token": token},
                           files={"file": ("loop.csv", raw, "text/csv")}, follow_redirects=False)

    for _ in range(3):
        assert post(BAD).status_code == 422
    r = post(loop_bytes(3))
    assert r.status_code == 429 and r.headers["Retry-After"] == "60"
    assert _upload(client, target, "pc1", loop_bytes(3)).status_code == 201  # a token is another caller


def test_every_route_that_takes_a_file_is_counted(app):
    assert takes_file(app) == ["/api/v1/batches/{batch_code}/measurements",
                               "/api/v1/batches/{code}/attachments",  # image attachments (issue 23)
                               "/api/v1/compounds/{code}/attachments",
                               "/api/v1/measurements/{measurement_id}/attachments",
                               "/api/v1/measurements/{measurement_id}/revise",
                               "/api/v1/samples/{sample_code}/attachments",
                               "/api/v1/samples/{sample_code}/measurements",
                               "/batches/{code}/attachments",  # the gallery's upload form (issue 23)
                               "/batches/{code}/upload",
                               "/compounds/{code}/attachments",
                               "/measurements/{measurement_id}/attachments",
                               "/measurements/{measurement_id}/revise",
                               "/samples/{code}/attachments"]


def test_the_web_attachment_form_counts_per_session(client, session, clock, target):
    """Refused images from the gallery's form count like refused instrument files, per caller."""
    from tests.api.test_attachments import micrograph

    login_as(client, session, role="member", name="mia")
    page = f"/batches/{target['batch']}"
    token = csrf_of(client.get(page).text)

    def post(raw: bytes, name: str = "pom.png", ctype: str = "image/png"):
        return client.post(f"{page}/attachments", data={"csrf_token": token}, files={"file": (name, raw, ctype)},
                           follow_redirects=False)

    assert post(micrograph("PNG", size=(40, 30), seed=1)).status_code == 303  # a good image: not counted
    for raw in (b"not an image at all", micrograph("JPEG", size=(40, 30)), micrograph("PNG", size=(40, 30))[:200]):
        assert post(raw).status_code == 422  # no signature, JPEG bytes claimed PNG, truncated
    r = post(micrograph("PNG", size=(40, 30), seed=2))
    assert r.status_code == 429 and r.headers["Retry-After"] == "60"
    # The same caller's measurement form waits too; the API attachment route counts the same way for a token.
    assert client.post(f"/batches/{target['batch']}/upload", data={"kind": "pe_loop", "csrf_token": token},
                       files={"file": ("loop.csv", loop_bytes(3), "text/csv")}, follow_redirects=False).status_code == 429
    assert _upload(client, target, "pc1", loop_bytes(3)).status_code == 201  # a token is another caller
