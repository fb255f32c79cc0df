"""Factories and helpers shared by the tests: accounts, tokens, logins, compounds."""

from __future__ import annotations

from bs4 import BeautifulSoup
from sqlmodel import Session

from server.services import accounts

PASSWORD = "correct-horse-battery"



def make_user(session: Session, name: str = "ana", role: str = "member", password: str = PASSWORD):
    return accounts.create_user(session=session, username=name, password=password, role=role, actor="test")


def make_token(session: Session, scope: str = "write", name: str = "test-pc", kinds=None,
               sees_embargoed: bool = False) -> str:
    _, secret = accounts.create_token(session=session, name=name, scope=scope, kinds=kinds, actor="test",
                                      sees_embargoed=sees_embargoed)
    return secret


def bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def csrf_of(html: str) -> str:
    """The CSRF token a page carries (meta tag), read structurally."""
    soup = BeautifulSoup(html, "html.parser")
    meta = soup.find("meta", attrs={"name": "csrf-token"})
    assert meta is not None, "page has no csrf-token meta tag"
    return meta["content"]


def login_as(client, session: Session, role: str = "member", name: str | None = None) -> str:
    """Create a user with ``role``, log ``client`` in through the login form; returns the CSRF token."""
    name = name or f"{role}1"
    make_user(session, name=name, role=role)
    page = client.get("/login")
    token = csrf_of(page.text)
    resp = client.post("/login", data={"username": name, "password": PASSWORD, "csrf_token": token, "next": "/compounds"},
                       follow_redirects=False)
    assert resp.status_code == 303, resp.text
    return csrf_of(client.get("/compounds").text)


def soup(html: str) -> BeautifulSoup:
    return BeautifulSoup(html, "html.parser")
