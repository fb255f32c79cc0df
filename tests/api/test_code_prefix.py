"""The code prefix: a setting for new codes only; stored codes keep working whatever it is now.

Runs on SQLite and PostgreSQL. A database registered under the former default prefix RMN is
served by an app with today's default: old codes resolve, get new batches under their own
code, and new compounds take the new prefix with the next number.
"""

from __future__ import annotations

import dataclasses

from fastapi.testclient import TestClient

from server.app import create_app
from server.settings import SETTINGS, Settings
from tests.factories import bearer, make_token


def test_default_prefix_is_rvz_and_documented():
    assert Settings().code_prefix == "RVZ"
    setting, = [s for s in SETTINGS if s.name == "code_prefix"]
    assert "RVZ" in setting.help


def test_codes_made_under_another_prefix_stay_as_they_are(settings, client, session):
    writer = bearer(make_token(session, scope="write"))
    old_app = create_app(dataclasses.replace(settings, code_prefix="RMN"))
    try:
        with TestClient(old_app) as old:
            first = old.post("/api/v1/compounds", json={"smiles": "COc1ccc(OC)cc1"}, headers=writer)
            assert first.status_code == 201, first.text
            assert first.json()["code"] == "RMN-00001"
            batch = old.post("/api/v1/compounds/RMN-00001/batches", json={}, headers=writer)
            assert batch.json()["code"] == "RMN-00001-B01"
    finally:
        old_app.state.engine.dispose()

    assert settings.code_prefix == "RVZ"
    new = client.post("/api/v1/compounds", json={"smiles": "CCOc1ccc(OCC)cc1"}, headers=writer)
    assert new.status_code == 201, new.text
    assert new.json()["code"] == "RVZ-00002"  # numbers run on across prefixes: never reused
    assert client.get("/api/v1/compounds/RMN-00001", headers=writer).json()["code"] == "RMN-00001"
    second = client.post("/api/v1/compounds/RMN-00001/batches", json={}, headers=writer)
    assert second.status_code == 201 and second.json()["code"] == "RMN-00001-B02"
    assert client.get("/api/v1/batches/RMN-00001-B01", headers=writer).status_code == 200
    listed = client.get("/api/v1/compounds", headers=writer).json()
    assert sorted(i["code"] for i in listed["items"]) == ["RMN-00001", "RVZ-00002"]
