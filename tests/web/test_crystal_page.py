"""Result pages without an empty panel (issue 22 item 11): a crystal's page draws its unit cell and
packing; a kind without a figure gets no figure panel at all (SQLite and PostgreSQL)."""

from __future__ import annotations

import json

from server.kinds import KINDS
from tests.factories import bearer, login_as, make_token, soup


def _upload(client, h, batch, kind):
    ex = KINDS[kind].example()
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind},
                    files={"file": (ex.filename, ex.raw)}, headers=h)
    assert r.status_code == 201, r.text
    return r.json()["id"]


def test_crystal_page_shows_the_cell_and_no_kind_shows_an_empty_panel(client, session):
    h = bearer(make_token(session, scope="write"))
    code = client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC"},
                       headers=h).json()["code"]  # an invented test compound
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=h).json()["code"]
    crystal, elemental = _upload(client, h, batch, "crystal"), _upload(client, h, batch, "elemental")
    login_as(client, session)
    page = soup(client.get(f"/measurements/{crystal}").text)
    panel = page.select_one("#figure-panel")
    fig = json.loads(panel.find("script", type="application/json").string)
    assert fig["data"][0]["name"] == "unit cell" and len(fig["data"]) > 1
    assert panel.select_one("[data-figure]") is not None and panel.find("figcaption").text.strip()
    assert page.find("script", src=lambda s: s and "plotly" in s) is not None
    other = soup(client.get(f"/measurements/{elemental}").text)
    assert other.select_one("#figure-panel") is None
    assert not other.select("[data-figure]") and "No plot" not in other.text
    assert other.find("script", src=lambda s: s and "plotly" in s) is None
    # every card on the page holds something
    for card in other.select("section.card"):
        assert card.get_text(strip=True), card
