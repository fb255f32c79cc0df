"""Cautions where work is recorded (issue 20): the batch form shows the synthesis cautions, the upload form
the high-voltage ones, both worded by server/hazards.py only; the heating caution of a sulfur or selenium
compound appears only to a caller who may see its structure (the embargo)."""

from __future__ import annotations

from server import hazards
from tests.factories import bearer, login_as, make_token, soup

SE_BOWL = "COc1ccc2[se]c3ccccc3c2c1"  # an invented methoxy dibenzoselenophene (contains Se)
PLAIN = "COc1ccccc1"


def _register(client, session, smiles, **extra):
    writer = bearer(make_token(session, scope="write", name="cautions-pc"))
    r = client.post("/api/v1/compounds", json={"smiles": smiles, **extra}, headers=writer)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    return code, batch


def _cautions(html):
    return {p["data-caution"]: p.get_text(" ", strip=True) for p in soup(html).select("[data-caution]")}


def test_batch_and_upload_forms_show_their_cautions(client, session):
    se, se_batch = _register(client, session, SE_BOWL)
    plain, plain_batch = _register(client, session, PLAIN)
    login_as(client, session, role="member")
    shown = _cautions(client.get(f"/compounds/{se}/batches/new").text)
    assert {"organolithium", "chalcogen", "heating_chalcogen"} <= set(shown)
    assert hazards.CAUTIONS_BY_KEY["organolithium"].text in shown["organolithium"]
    assert "heating_chalcogen" not in _cautions(client.get(f"/compounds/{plain}/batches/new").text)
    up = _cautions(client.get(f"/batches/{plain_batch}/upload").text)
    assert set(up) == {"high_voltage", "hot_bath_high_voltage"}
    assert hazards.HIGH_VOLTAGE.text in up["high_voltage"]
    assert "heating_chalcogen" in _cautions(client.get(f"/batches/{se_batch}/upload").text)


def test_the_heating_caution_needs_the_formula():
    # Both forms are open to writers only, and every writer may see embargoed structures (server/access.py);
    # the template still passes the formula only through may_see_structure, so no other caller could learn it.
    assert "heating_chalcogen" in {c.key for c in hazards.form_cautions("batch", "C13H10OSe")}
    assert "heating_chalcogen" in {c.key for c in hazards.form_cautions("upload", "C20H14O2S")}
    assert "heating_chalcogen" not in {c.key for c in hazards.form_cautions("upload", None)}
    assert "heating_chalcogen" not in {c.key for c in hazards.form_cautions("batch", "C12H18O6Si")}  # Si is not S
