"""Accounts' display names: set when an admin adds the account, the default of the batch form's chemist
field (the login name when none is set) (SQLite and PostgreSQL)."""

from __future__ import annotations

from sqlmodel import select

from server.models import AuditEvent, User
from server.services import accounts
from tests.factories import PASSWORD, csrf_of, login_as, make_user, soup


def _chemist_default(client, code: str) -> str:
    return soup(client.get(f"/compounds/{code}/batches/new").text).select_one("input[name=chemist]")["value"]


def _log_in(client, name: str) -> str:
    r = client.post("/login", data={"username": name, "password": PASSWORD, "csrf_token": csrf_of(client.get("/login").text),
                                    "next": "/compounds"}, follow_redirects=False)
    assert r.status_code == 303
    return csrf_of(client.get("/compounds").text)


def _admin_names(client) -> dict[str, str]:
    return {tr.td.text: tr.select_one("input[name=display_name]")["value"]
            for tr in soup(client.get("/admin").text).select("#users tbody tr")}


def test_admin_sets_a_display_name_and_the_batch_form_signs_with_it(client, session):
    csrf = login_as(client, session, role="admin", name="boss")
    client.post("/compounds/new", data={"smiles": "CCCCCCOc1ccccc1", "csrf_token": csrf})
    assert _chemist_default(client, "RVZ-00001") == "boss"  # no display name: the login name

    r = client.post("/admin/users", data={"username": "aex", "password": PASSWORD, "role": "member",
                                          "display_name": " Dr.  A. Example ", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    assert session.exec(select(User).where(User.username == "aex")).one().display_name == "Dr. A. Example"
    assert _admin_names(client) == {"boss": "", "aex": "Dr. A. Example"}

    client.post("/logout", data={"csrf_token": csrf})
    _log_in(client, "aex")
    assert _chemist_default(client, "RVZ-00001") == "Dr. A. Example"
    accounts.set_display_name(session=session, username="aex", display_name="", actor="test")
    assert _chemist_default(client, "RVZ-00001") == "aex"  # cleared: back to the login name


def test_a_too_long_display_name_is_refused_naming_the_field(client, session):
    csrf = login_as(client, session, role="admin", name="boss")
    r = client.post("/admin/users", data={"username": "long", "password": PASSWORD, "role": "member",
                                          "display_name": "x" * 121, "csrf_token": csrf})
    assert r.status_code == 422 and "display names are at most 120" in soup(r.text).find(class_="error").text
    assert session.exec(select(User).where(User.username == "long")).first() is None


def test_an_account_edits_its_own_name_and_an_admin_edits_anyones(client, anon, session):
    csrf = login_as(client, session, role="admin", name="boss")
    client.post("/compounds/new", data={"smiles": "CCCCCCOc1ccccc1", "csrf_token": csrf})
    make_user(session, name="vera", role="viewer")
    make_user(session, name="mo", role="member")
    _log_in(anon, "vera")
    own = anon.get("/inbox")
    assert soup(own.text).select_one("#my-name input[name=display_name]")["value"] == ""
    r = anon.post("/inbox/display-name", data={"display_name": "V. Reader", "csrf_token": csrf_of(own.text)},
                  follow_redirects=False)
    assert r.status_code == 303  # a viewer may name itself
    assert soup(anon.get("/inbox").text).select_one("#my-name input[name=display_name]")["value"] == "V. Reader"
    bad = anon.post("/inbox/display-name", data={"display_name": "y" * 121, "csrf_token": csrf_of(own.text)})
    assert bad.status_code == 422 and "at most 120" in soup(bad.text).select_one("#my-name [role=alert]").text
    # ...but not anyone else
    assert anon.post("/admin/users/mo/display-name", data={"display_name": "x", "csrf_token": csrf_of(own.text)},
                     follow_redirects=False).status_code == 403

    r = client.post("/admin/users/mo/display-name", data={"display_name": "M. Okafor", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303
    assert _admin_names(client) == {"boss": "", "vera": "V. Reader", "mo": "M. Okafor"}
    assert client.post("/admin/users/nobody/display-name", data={"display_name": "x", "csrf_token": csrf}).status_code == 404
    audit = [e.action for e in session.exec(select(AuditEvent).where(AuditEvent.action == "user.display_name")).all()]
    assert len(audit) == 2


def test_the_api_takes_and_answers_a_display_name(client, session):
    login_as(client, session, role="admin", name="boss")  # an admin session: the users API is admin-only
    csrf = csrf_of(client.get("/compounds").text)
    r = client.post("/api/v1/users", json={"username": "api-made", "password": PASSWORD, "display_name": "Dr. B. Example"},
                    headers={"X-CSRF-Token": csrf})
    assert r.status_code == 201, r.text
    assert r.json()["display_name"] == "Dr. B. Example"
    listed = {u["username"]: u["display_name"] for u in client.get("/api/v1/users").json()["items"]}
    assert listed == {"boss": None, "api-made": "Dr. B. Example"}
