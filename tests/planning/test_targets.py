"""Target compounds over the API: planned -> in synthesis -> made (from batches) or abandoned (issue 20 item 1)."""

from __future__ import annotations

import pytest
from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.models import AuditEvent, CompoundPlan, Job
from tests.factories import bearer, make_token


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write", name="planner"))


def _target(client, writer, n=6, **extra):
    smiles = build_from_scaffold(PARENT_BOWLS["S"], "alkoxy", n)
    r = client.post("/api/v1/compounds", json={"smiles": smiles, "state": "planned", "rationale": "longer chain",
                                                "priority": 2, "assignee": "lab-b", **extra}, headers=writer)
    assert r.status_code == 201, r.text
    return r.json()


def test_planned_compound_gets_a_code_a_plan_and_a_queued_estimate(client, session, writer):
    body = _target(client, writer)
    assert body["code"] == "RVZ-00001" and body["state"] == "planned"
    assert (body["rationale"], body["priority"], body["assignee"]) == ("longer chain", 2, "lab-b")
    jobs = session.exec(select(Job)).all()
    assert [j.kind for j in jobs] == ["xtb_estimate"]
    created = session.exec(select(AuditEvent).where(AuditEvent.action == "compound.create")).one()
    assert created.after["plan"]["state"] == "planned"


def test_state_moves_and_made_follows_from_batches(client, writer):
    code = _target(client, writer)["code"]
    r = client.patch(f"/api/v1/compounds/{code}", json={"state": "in_synthesis"}, headers=writer)
    assert r.status_code == 200 and r.json()["state"] == "in_synthesis"
    r = client.patch(f"/api/v1/compounds/{code}", json={"state": "made"}, headers=writer)
    assert r.status_code == 422 and r.json()["field"] == "state"
    # A failed batch does not make the compound; a made one does.
    assert client.post(f"/api/v1/compounds/{code}/batches", json={"state": "failed"}, headers=writer).status_code == 201
    assert client.get(f"/api/v1/compounds/{code}", headers=writer).json()["state"] == "in_synthesis"
    assert client.post(f"/api/v1/compounds/{code}/batches", json={"state": "made"}, headers=writer).status_code == 201
    assert client.get(f"/api/v1/compounds/{code}", headers=writer).json()["state"] == "made"
    listed = client.get("/api/v1/compounds?state=made", headers=writer).json()
    assert [c["code"] for c in listed["items"]] == [code]
    assert client.get("/api/v1/compounds?state=planned", headers=writer).json()["total"] == 0


def test_abandon_needs_a_reason(client, session, writer):
    code = _target(client, writer)["code"]
    r = client.patch(f"/api/v1/compounds/{code}", json={"state": "abandoned"}, headers=writer)
    assert r.status_code == 422 and r.json()["field"] == "reason"
    assert session.exec(select(CompoundPlan)).one().state == "planned"  # nothing half-stored
    r = client.patch(f"/api/v1/compounds/{code}", json={"state": "abandoned", "reason": "precursor unstable"},
                     headers=writer)
    assert r.status_code == 200, r.text
    assert (r.json()["state"], r.json()["state_reason"]) == ("abandoned", "precursor unstable")
    # Back to planned clears the reason.
    r = client.patch(f"/api/v1/compounds/{code}", json={"state": "planned"}, headers=writer)
    assert (r.json()["state"], r.json()["state_reason"]) == ("planned", "")


def test_bad_plans_are_refused(client, writer):
    smiles = build_from_scaffold(PARENT_BOWLS["CH2"], "alkoxy", 4)
    for body, field in (({"state": "made"}, "state"), ({"state": "wished"}, "state"), ({"state": "abandoned"}, "state"),
                        ({"state": "planned", "priority": 9}, None)):
        r = client.post("/api/v1/compounds", json={"smiles": smiles, **body}, headers=writer)
        assert r.status_code == 422, (body, r.text)
        if field:
            assert r.json()["field"] == field
    assert client.get("/api/v1/compounds", headers=writer).json()["total"] == 0
    # A planned duplicate of a registered molecule is 409, as any duplicate.
    assert client.post("/api/v1/compounds", json={"smiles": smiles}, headers=writer).status_code == 201
    r = client.post("/api/v1/compounds", json={"smiles": smiles, "state": "planned"}, headers=writer)
    assert r.status_code == 409


def test_compound_without_plan_is_registered_and_patch_needs_a_state(client, writer):
    r = client.post("/api/v1/compounds", json={"smiles": "COc1ccc(OC)cc1"}, headers=writer)
    assert r.json()["state"] == "registered" and r.json()["priority"] is None
    code = r.json()["code"]
    r = client.patch(f"/api/v1/compounds/{code}", json={"priority": 1}, headers=writer)
    assert r.status_code == 422 and r.json()["field"] == "state"


def test_upload_token_does_not_see_the_assignee(client, session, writer):
    code = _target(client, writer)["code"]
    up = bearer(make_token(session, scope="upload", name="pc"))
    assert client.get(f"/api/v1/compounds/{code}", headers=up).json()["assignee"] == "(hidden)"
