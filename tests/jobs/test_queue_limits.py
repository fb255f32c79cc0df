"""Bounds on queued work (issue 12, item 10): cancel only by the job's owner or an admin, a bulk
limit, a per-account quota of waiting jobs, and claiming that takes turns across accounts.

Runs on SQLite and PostgreSQL through the ``client``/``session``/``db_url`` fixtures.
"""

from __future__ import annotations

import pytest
from sqlmodel import Session

from server import access, bounds
from server.errors import OverLimit, QuotaExceeded
from server.jobs import queue
from server.models import Job
from server.services import estimates
from tests.factories import bearer, login_as, make_token

from . import make_compound

# Invented alkoxy benzenes: small, estimable (a six-membered ring core), all different.
SMILES = ["COc1ccccc1", "CCOc1ccccc1", "CCCOc1ccccc1", "CCCCOc1ccccc1", "CCCCCOc1ccccc1"]


def _register(client, headers, smiles):
    r = client.post("/api/v1/compounds", json={"smiles": smiles}, headers=headers)
    assert r.status_code == 201, r.text
    return r.json()["code"]


def test_only_the_owner_or_an_admin_cancels_a_job(app, client, session):
    owner = bearer(make_token(session, scope="write", name="owner-pc"))
    other = bearer(make_token(session, scope="write", name="other-pc"))
    code = _register(client, owner, SMILES[0])
    job = client.post(f"/api/v1/compounds/{code}/estimates", json={}, headers=owner).json()["job"]

    r = client.post(f"/api/v1/jobs/{job}/cancel", headers=other)
    assert r.status_code == 403 and r.json()["detail"] == access.NOT_JOB_OWNER
    assert client.get(f"/api/v1/jobs/{job}", headers=other).json()["state"] == "queued"  # untouched

    r = client.post(f"/api/v1/jobs/{job}/cancel", headers=owner)
    assert r.status_code == 200 and r.json()["state"] == "cancelled"

    # An admin may cancel anyone's job (web form, with CSRF).
    job2 = client.post(f"/api/v1/compounds/{code}/estimates", json={"truncate_side_chains": False},
                       headers=owner).json()["job"]
    from fastapi.testclient import TestClient

    with TestClient(app) as admin:
        csrf = login_as(admin, session, role="admin", name="admin-q")
        r = admin.post(f"/api/v1/jobs/{job2}/cancel", headers={"X-CSRF-Token": csrf})
        assert r.status_code == 200 and r.json()["state"] == "cancelled", r.text


def test_a_member_cannot_cancel_another_members_job_from_the_page(app, client, session):
    from fastapi.testclient import TestClient

    owner = bearer(make_token(session, scope="write", name="owner-pc"))
    code = _register(client, owner, SMILES[1])
    job = client.post(f"/api/v1/compounds/{code}/estimates", json={}, headers=owner).json()["job"]
    with TestClient(app) as member:
        csrf = login_as(member, session, role="member", name="member-q")
        r = member.post(f"/jobs/{job}/cancel", headers={"X-CSRF-Token": csrf})
        assert r.status_code == 403
    assert client.get(f"/api/v1/jobs/{job}", headers=owner).json()["state"] == "queued"


def test_the_cancel_button_shows_only_to_who_may_cancel(app, client, session):
    """The job panel (compound page, queue) offers Cancel to the job's owner or an admin, not to other members."""
    from fastapi.testclient import TestClient

    owner = bearer(make_token(session, scope="write", name="owner-pc"))
    code = _register(client, owner, SMILES[2])
    job = client.post(f"/api/v1/compounds/{code}/estimates", json={}, headers=owner).json()["job"]
    with TestClient(app) as member:
        login_as(member, session, role="member", name="member-c")
        panel = member.get(f"/jobs/{job}/panel")
        assert panel.status_code == 200 and f"/jobs/{job}/cancel" not in panel.text
        assert f"/jobs/{job}/cancel" not in member.get(f"/compounds/{code}").text
    with TestClient(app) as admin:
        login_as(admin, session, role="admin", name="admin-c")
        assert f"/jobs/{job}/cancel" in admin.get(f"/jobs/{job}/panel").text


def test_a_bulk_request_past_the_limit_is_refused_before_any_lookup(client, session):
    writer = bearer(make_token(session, scope="write", name="bulk-pc"))
    codes = [f"NOPE-{i:05d}" for i in range(bounds.MAX_BULK_ESTIMATES + 1)]  # none exists: no lookup may run
    r = client.post("/api/v1/estimates", json={"compounds": codes}, headers=writer)
    assert r.status_code == 413, r.text
    body = r.json()
    assert body["limit"] == "bulk_estimates" and body["limit_value"] == bounds.MAX_BULK_ESTIMATES
    # 10 000 codes, as in the report: the same answer, nothing queued.
    r = client.post("/api/v1/estimates", json={"compounds": [f"X{i}" for i in range(10_000)]}, headers=writer)
    assert r.status_code == 413 and client.get("/api/v1/jobs", headers=writer).json()["total"] == 0


def test_the_job_quota_refuses_the_whole_request_and_other_accounts_still_queue(client, session, monkeypatch):
    monkeypatch.setattr(bounds, "MAX_ACTIVE_JOBS_PER_ACCOUNT", 3)
    greedy = bearer(make_token(session, scope="write", name="greedy-pc"))
    modest = bearer(make_token(session, scope="write", name="modest-pc"))
    codes = [_register(client, greedy, s) for s in SMILES]
    r = client.post("/api/v1/estimates", json={"compounds": codes[:2]}, headers=greedy)
    assert r.status_code == 202, r.text
    # 2 waiting + 2 new > 3: refused as a whole (429, limit named), nothing added.
    r = client.post("/api/v1/estimates", json={"compounds": codes[2:4]}, headers=greedy)
    assert r.status_code == 429, r.text
    assert r.json()["limit"] == "job_quota" and r.json()["limit_value"] == 3
    assert client.get("/api/v1/jobs", headers=greedy).json()["total"] == 2
    # Asking again for a compound already waiting adds no job and is not refused.
    r = client.post("/api/v1/estimates", json={"compounds": codes[:2]}, headers=greedy)
    assert r.status_code == 202
    # The quota is per account: another token queues freely.
    r = client.post("/api/v1/estimates", json={"compounds": codes[2:5]}, headers=modest)
    assert r.status_code == 202, r.text


def test_service_level_errors_carry_their_limit(db_url, engine_for, monkeypatch):
    monkeypatch.setattr(bounds, "MAX_ACTIVE_JOBS_PER_ACCOUNT", 1)
    with Session(engine_for(db_url)) as s:
        a, b = make_compound(s, SMILES[0]), make_compound(s, SMILES[1])
        estimates.queue_estimates(session=s, compounds=[a], actor="user:ana")
        with pytest.raises(QuotaExceeded) as err:
            estimates.queue_estimates(session=s, compounds=[b], actor="user:ana")
        assert err.value.status == 429 and err.value.limit == "job_quota"
        with pytest.raises(OverLimit) as err:
            estimates.check_bulk(bounds.MAX_BULK_ESTIMATES + 1)
        assert err.value.status == 413


def test_claiming_takes_turns_across_accounts(db_url, engine_for):
    """One account's 5 jobs queued first must not hold the worker: the next claim after its first
    job goes to the other account's job, though that one is younger."""
    engine = engine_for(db_url)
    with Session(engine) as s:
        for i in range(5):
            queue.enqueue(s, kind="fake", params={"i": i}, actor="token:1 (bulk)")
        late = queue.enqueue(s, kind="fake", params={"i": 99}, actor="user:bea").id
    first = queue.claim(engine, worker="w1")
    assert first.created_by == "token:1 (bulk)"
    second = queue.claim(engine, worker="w2")
    assert second.id == late, "the other account waited behind the bulk account's queue"
    third = queue.claim(engine, worker="w3")
    assert third.created_by == "token:1 (bulk)"
    with Session(engine) as s:
        assert s.get(Job, third.id).state == "running"
