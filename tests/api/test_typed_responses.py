"""Routes that answered free-form dicts now declare typed Read models (issue 12 item 20): the JSON keys are the
ones they answered before, and the OpenAPI document names each model instead of an open object.
SQLite and PostgreSQL through the ``client`` fixture."""

from __future__ import annotations

import pytest

from tests.factories import bearer, make_token

# The keys of server.jobs.queue.job_read, as the routes answered them before they were typed.
JOB_KEYS = {"id", "kind", "state", "progress", "message", "result", "error", "compound", "options", "attempts",
            "cancel_requested", "created_by", "created_at", "started_at", "heartbeat_at", "finished_at", "worker"}
ROUTES = {("post", "/api/v1/compounds/{code}/estimates"): "QueuedJobRead", ("post", "/api/v1/estimates"): "JobPage",
          ("get", "/api/v1/jobs"): "JobPage", ("get", "/api/v1/jobs/summary"): "JobSummaryRead",
          ("get", "/api/v1/jobs/{job_id}"): "JobRead", ("post", "/api/v1/jobs/{job_id}/cancel"): "JobRead",
          ("get", "/api/v1/search"): "StructureHits"}


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write", name="typed-pc"))


def test_job_answers_keep_their_keys(client, writer):
    # Invented alkoxy benzenes (small and estimable).
    codes = [client.post("/api/v1/compounds", json={"smiles": s}, headers=writer).json()["code"]
             for s in ("CCCCCCOc1ccccc1", "CCCCCCCOc1ccccc1")]
    one = client.post(f"/api/v1/compounds/{codes[0]}/estimates", json={}, headers=writer)
    assert one.status_code == 202 and set(one.json()) == JOB_KEYS | {"job"} and one.json()["job"] == one.json()["id"]
    assert one.json()["options"] == {"truncate_side_chains": True} and one.json()["result"] is None
    many = client.post("/api/v1/estimates", json={"compounds": [codes[1]]}, headers=writer).json()
    assert set(many) == {"items", "total"} and [set(j) for j in many["items"]] == [JOB_KEYS]
    listed = client.get("/api/v1/jobs", headers=writer).json()
    assert set(listed) == {"items", "total"} and listed["total"] == 2 and all(set(j) == JOB_KEYS for j in listed["items"])
    summary = client.get("/api/v1/jobs/summary", headers=writer).json()
    assert set(summary) == {"counts", "total", "running", "queued", "recent", "workers"}
    assert summary["counts"]["queued"] == 2 and [set(j) for j in summary["queued"]] == [JOB_KEYS, JOB_KEYS]
    job = client.get(f"/api/v1/jobs/{one.json()['id']}", headers=writer).json()
    assert set(job) == JOB_KEYS and job["state"] == "queued" and job["compound"] == codes[0]
    cancelled = client.post(f"/api/v1/jobs/{job['id']}/cancel", headers=writer).json()
    assert set(cancelled) == JOB_KEYS and cancelled["state"] == "cancelled"


def test_structure_search_keeps_its_keys(client, writer):
    code = client.post("/api/v1/compounds", json={"smiles": "CCCCCCCCOc1ccccc1"}, headers=writer).json()["code"]
    sub = client.get("/api/v1/search", params={"substructure": "c1ccccc1O"}, headers=writer).json()
    assert sub == {"items": [{"code": code}], "total": 1}  # no similarity key in a substructure search
    sim = client.get("/api/v1/search", params={"similar": "CCCCCCCCOc1ccccc1"}, headers=writer).json()
    assert set(sim) == {"items", "total"} and sim["items"][0]["code"] == code
    assert sim["items"][0]["similarity"] == pytest.approx(1.0)


def test_the_openapi_document_names_the_models(client):
    doc = client.get("/openapi.json").json()
    for (method, path), model in ROUTES.items():
        answer = next(v for k, v in doc["paths"][path][method]["responses"].items() if k.startswith("2"))
        assert answer["content"]["application/json"]["schema"] == {"$ref": f"#/components/schemas/{model}"}
    assert set(doc["components"]["schemas"]["JobRead"]["properties"]) == JOB_KEYS
