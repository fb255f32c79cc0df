"""Repeated controls say what they act on (WCAG 2.1 2.4.6 / 4.1.2): a screen reader's list of
buttons and links must not read "revoke, revoke, revoke"."""

from __future__ import annotations

from server.kinds.base import EXAMPLE_SMILES
from tests.factories import login_as, make_token, make_user, soup


def test_admin_buttons_name_their_account_and_token(client, session):
    login_as(client, session, role="admin", name="boss")
    for name in ("ana", "ben"):
        make_user(session, name=name)
    for name in ("xrd-pc", "dsc-pc"):
        make_token(session, name=name)
    page = soup(client.get("/admin").text)
    deactivate = [b["aria-label"] for b in page.select("form[action$='/deactivate'] button")]
    revoke = [b["aria-label"] for b in page.select("form[action$='/revoke'] button")]
    assert {"deactivate ana", "deactivate ben"} <= set(deactivate) and len(set(deactivate)) == len(deactivate)
    assert {"revoke token xrd-pc", "revoke token dsc-pc"} <= set(revoke)


def test_upload_links_name_their_batch(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": EXAMPLE_SMILES, "csrf_token": csrf})
    for _ in range(2):
        client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    page = soup(client.get("/compounds/RVZ-00001").text)
    names = [a["aria-label"] for a in page.select("#batches a[href$='/upload']")]
    assert names == ["Upload to batch RVZ-00001-B01", "Upload to batch RVZ-00001-B02"]
    steps = [a["aria-label"] for a in page.select("#next-steps a")]
    assert steps == ["Describe a sample of batch RVZ-00001-B02", "Upload a file to batch RVZ-00001-B02"]
