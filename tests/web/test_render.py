"""Regression tests for the web layer's seams (issue 11): page or fragment, the account on every
render, error pages included, and the audit entry of a cleared scaffold (SQLite and PostgreSQL)."""

from __future__ import annotations

import pytest
from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS
from server.models import AuditEvent, Compound, Scaffold
from tests.factories import login_as, soup

HX = {"HX-Request": "true"}
RESTORE = {"HX-Request": "true", "HX-History-Restore-Request": "true"}


def _is_full_page(html: str) -> bool:
    s = soup(html)
    return s.find("html") is not None and s.find("nav", attrs={"aria-label": "main"}) is not None


@pytest.mark.parametrize("path", ["/compounds", "/explorer"])
def test_history_restore_gets_the_full_page(client, session, path):
    login_as(client, session, role="viewer")
    # Control: an ordinary htmx swap gets only the fragment, so the check below can fail.
    swap = client.get(path, headers=HX)
    assert swap.status_code == 200 and not _is_full_page(swap.text)
    restored = client.get(path, headers=RESTORE)
    assert restored.status_code == 200 and _is_full_page(restored.text), restored.text[:200]
    assert "HX-History-Restore-Request" in restored.headers["vary"]
    # The filters live in the page, not the fragment: a restore must bring them back.
    assert soup(restored.text).find("form") is not None


@pytest.mark.parametrize("path, status", [("/compounds/NO-SUCH-1", 404), ("/no/such/page", 404), ("/admin", 403),
                                          ("/measurements/99999", 404)])
def test_error_pages_show_the_logged_in_menu(client, session, path, status):
    login_as(client, session, role="viewer", name="vera")
    r = client.get(path)
    assert r.status_code == status, r.text[:200]
    badge = soup(r.text).find("span", class_="badge")
    assert badge is not None and "vera" in badge.text, r.text[:400]
    assert soup(r.text).find("a", href="/explorer") is not None  # the logged-in menu, not the visitor's


def test_error_page_for_a_visitor_shows_the_visitor_menu(anon):
    r = anon.get("/no/such/page")
    assert r.status_code == 404
    assert soup(r.text).find("span", class_="badge") is None


def test_clearing_the_scaffold_in_the_web_form_audits_what_was_there(client, session):
    csrf = login_as(client, session)
    assert client.post("/scaffolds", data={"code": "BWL-C", "name": "CH2 bowl", "smiles": PARENT_BOWLS["CH2"],
                                           "csrf_token": csrf}).status_code == 200
    r = client.post("/compounds/new", data={"scaffold": "BWL-C", "chain_kind": "alkoxy", "chain_carbons": "2",
                                            "label": "bowl", "csrf_token": csrf})
    assert r.status_code == 200, r.text[:300]
    compound = session.exec(select(Compound)).one()
    scaffold_id = session.exec(select(Scaffold.id).where(Scaffold.code == "BWL-C")).one()
    assert compound.scaffold_id == scaffold_id
    r = client.post(f"/compounds/{compound.code}/edit",
                    data={"label": "bowl", "notes": "", "scaffold": "", "csrf_token": csrf})
    assert r.status_code == 200, r.text[:300]
    event = session.exec(select(AuditEvent).where(AuditEvent.action == "compound.update")).one()
    assert event.before["scaffold_id"] == scaffold_id and event.after["scaffold_id"] is None
    session.expire_all()
    assert session.get(Compound, compound.id).scaffold_id is None
