"""Admin page and API: accounts, tokens shown once, revocation at once; archive and restore (SQLite and PostgreSQL)."""

from __future__ import annotations

from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.models import ApiToken
from server.synth.ferro import miller_loop
from tests.factories import bearer, login_as, make_token, soup


def test_token_shown_once_then_revoked(client, anon, session):
    csrf = login_as(client, session, role="admin")
    page = client.post("/admin/tokens", data={"name": "tester-pc", "scope": "upload", "kinds": ["pe_loop"],
                                              "csrf_token": csrf})
    secret = soup(page.text).select_one("#new-token .mono").text.strip()
    assert secret.startswith("rmn_")
    again = client.get("/admin").text
    assert secret not in again  # never shown again
    token = session.exec(select(ApiToken)).one()
    assert secret not in token.token_hash and token.kinds == ["pe_loop"]
    assert anon.get("/api/v1/compounds", headers=bearer(secret)).status_code == 200
    client.post(f"/admin/tokens/{token.id}/revoke", data={"csrf_token": csrf})
    assert anon.get("/api/v1/compounds", headers=bearer(secret)).status_code == 401


def test_accounts_and_access(client, anon, session):
    csrf = login_as(client, session, role="admin")
    r = client.post("/admin/users", data={"username": "kai", "password": "long-enough-pw", "role": "viewer",
                                         "csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303
    rows = {tr.find("td").text: tr.find_all("td")[1].text for tr in soup(client.get("/admin").text).select("#users tbody tr")}
    assert rows["kai"] == "viewer"
    bad = client.post("/admin/users", data={"username": "x", "password": "short", "csrf_token": csrf})
    assert bad.status_code == 422 and "8 characters" in soup(bad.text).find(role="alert").text
    login_as(anon, session, role="member", name="mo")
    assert anon.get("/admin").status_code == 403
    assert anon.get("/api/v1/tokens").status_code == 403
    client.post("/admin/users/mo/deactivate", data={"csrf_token": csrf})
    assert anon.get("/compounds", follow_redirects=False).status_code == 303  # session ends with the account


def test_api_token_admin(client, session):
    csrf = login_as(client, session, role="admin")
    h = {"X-CSRF-Token": csrf}
    r = client.post("/api/v1/tokens", json={"name": "dsc-pc", "scope": "upload", "kinds": ["dsc"]}, headers=h)
    assert r.status_code == 201 and r.json()["token"].startswith("rmn_")
    assert "token" not in client.get("/api/v1/tokens").json()["items"][0]
    assert client.post("/api/v1/tokens", json={"name": "x", "scope": "upload", "kinds": ["nmr"]},
                       headers=h).status_code == 422


def test_archive_and_restore_measurement_and_batch(client, session):
    h = bearer(make_token(session, scope="write"))
    client.post("/api/v1/compounds", json={"smiles": "CCOc1ccccc1"}, headers=h)
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=h)
    m = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": "pe_loop"},
                    files={"file": ("l.csv", to_csv_bytes(miller_loop(10, 8, 50, 300)))}, headers=h).json()
    assert client.get("/api/v1/compounds/RVZ-00001", headers=h).json()["verdict"] == "loop_switching_only"
    assert client.post(f"/api/v1/measurements/{m['id']}/archive", headers=h).json()["archived"] is True
    assert client.get("/api/v1/compounds/RVZ-00001", headers=h).json()["verdict"] == "untested"
    assert client.get("/api/v1/measurements?compound=RVZ-00001", headers=h).json()["total"] == 0
    assert client.get(f"/api/v1/measurements/{m['id']}/raw", headers=h).status_code == 200  # raw kept
    client.post(f"/api/v1/measurements/{m['id']}/restore", headers=h)
    assert client.get("/api/v1/compounds/RVZ-00001", headers=h).json()["verdict"] == "loop_switching_only"
    assert client.post("/api/v1/batches/RVZ-00001-B01/archive", headers=h).json()["archived"] is True
    assert client.post("/api/v1/batches/RVZ-00001-B01/restore", headers=h).json()["archived"] is False


def test_an_upload_token_is_bound_to_an_import_profile_on_the_admin_page(client, session):
    import json
    from pathlib import Path

    from server.services import import_profiles

    spec = json.loads((Path(__file__).parent.parent / "data" / "exports" / "pund_semicolon_cp1252.profile.json")
                      .read_text())
    import_profiles.create_profile(session=session, data=spec, actor="test")
    csrf = login_as(client, session, role="admin", name="root-p")
    page = soup(client.get("/admin").text)
    options = [o["value"] for o in page.select("select[name=profile] option")]
    assert options == ["", "pulse-g"]
    r = client.post("/admin/tokens", data={"csrf_token": csrf, "name": "pulse-pc", "scope": "upload",
                                           "profile": "pulse-g", "expires": "90d"})
    assert r.status_code == 200, r.text
    session.expire_all()
    token = session.exec(select(ApiToken).where(ApiToken.name == "pulse-pc")).one()
    assert token.profile == "pulse-g"
