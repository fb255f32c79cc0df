"""Routes, lineage and reagents with entered hazard data (issue 20 items 2-3), on both back ends."""

from __future__ import annotations

import pytest
from sqlmodel import select

from server import hazards
from server.models import AuditEvent, SynthesisStep
from tests.factories import bearer, make_token

STEP = {"description": "deprotonate, then add the electrophile", "solvent": "THF", "temperature": "-78 degC",
        "time": "90 min", "yield_pct": 71.0,
        "reagents": [{"reagent": "n-butyllithium", "smiles": "[Li]CCCC", "amount": "2.2 mmol", "equivalents": 2.2},
                     {"reagent": "elemental selenium", "smiles": "[Se]", "amount": "174 mg"},
                     {"reagent": "THF", "amount": "15 mL"}]}


@pytest.fixture
def w(client, session):
    return bearer(make_token(session, scope="write", name="bench"))


def _batch(client, w, smiles):
    code = client.post("/api/v1/compounds", json={"smiles": smiles}, headers=w).json()["code"]
    return client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=w).json()["code"]


@pytest.fixture
def chain(client, w):
    """An intermediate batch and two products made from it, one further product made from a product."""
    inter = _batch(client, w, "Brc1ccc(Br)cc1")
    a = _batch(client, w, "COc1ccc(OC)cc1")
    b = _batch(client, w, "CSc1ccc(SC)cc1")
    c = _batch(client, w, "CCOc1ccc(OCC)cc1")
    for product, pre in ((a, [inter]), (b, [inter]), (c, [a])):
        r = client.put(f"/api/v1/batches/{product}/route", json={"steps": [STEP], "precursors": pre}, headers=w)
        assert r.status_code == 200, r.text
    return {"inter": inter, "a": a, "b": b, "c": c}


def test_route_steps_units_and_hazards(client, w, chain):
    body = client.get(f"/api/v1/batches/{chain['a']}/route", headers=w).json()
    step = body["steps"][0]
    assert step["temperature_K"] == pytest.approx(195.15)  # -78 degC = 195.15 K (definition of the kelvin scale)
    assert step["time_h"] == pytest.approx(1.5)
    amounts = [(u["amount_value"], u["amount_unit"], u["amount_dimension"]) for u in step["reagents"]]
    assert amounts == [(2.2, "mmol", "amount"), (174.0, "mg", "mass"), (15.0, "mL", "volume")]
    # No reagent has entered hazard data yet: every one says so; structure-based cautions are general ones.
    assert all(u["notice"] == hazards.NO_DATA and not u["hazard_data_entered"] for u in step["reagents"])
    assert [c["key"] for c in step["reagents"][0]["cautions"]] == ["organolithium"]
    assert [c["key"] for c in step["reagents"][1]["cautions"]] == ["chalcogen"]
    assert {c["key"] for c in body["cautions"]} == {c.key for c in hazards.CAMPAIGN_CAUTIONS}
    assert "risk assessment" in body["defer"]


def test_entered_hazard_data_appears_on_the_route(client, w, chain):
    r = client.post("/api/v1/reagents", json={"name": "N-Butyllithium", "hazard_codes": ["h250", "H314"],
                                               "pictograms": ["GHS02", "GHS05"], "hazard_statements": "as on the SDS",
                                               "sds_source": "supplier X, rev. 2026-03"}, headers=w)
    assert r.status_code == 201, r.text
    assert r.json()["hazard_codes"] == ["H250", "H314"] and r.json()["hazard_data_entered"]
    use = client.get(f"/api/v1/batches/{chain['a']}/route", headers=w).json()["steps"][0]["reagents"][0]
    assert use["pictograms"] == ["GHS02", "GHS05"] and use["notice"] == "" and use["hazard_data_entered"]
    assert client.post("/api/v1/reagents", json={"name": "n-butyllithium"}, headers=w).status_code == 409
    for bad, field in (({"hazard_codes": ["H999x1"]}, "hazard_codes"), ({"pictograms": ["GHS10"]}, "pictograms")):
        r = client.post("/api/v1/reagents", json={"name": "other", **bad}, headers=w)
        assert r.status_code == 422 and r.json()["field"] == field
    rid = client.get("/api/v1/reagents", headers=w).json()[0]["id"]
    r = client.patch(f"/api/v1/reagents/{rid}", json={"pictograms": ["GHS02"]}, headers=w)
    assert r.status_code == 200 and r.json()["pictograms"] == ["GHS02"]


def test_lineage_both_ways(client, w, chain):
    inter = client.get(f"/api/v1/batches/{chain['inter']}/route", headers=w).json()
    assert [(p["batch"], p["depth"]) for p in inter["products"]] == sorted(
        [(chain["a"], 1), (chain["b"], 1)]) + [(chain["c"], 2)]
    c = client.get(f"/api/v1/batches/{chain['c']}/route", headers=w).json()
    assert [(p["batch"], p["depth"]) for p in c["precursors"]] == [(chain["a"], 1), (chain["inter"], 2)]


def test_cycles_and_wrong_dimensions_are_422_and_store_nothing(client, session, w, chain):
    before = session.exec(select(SynthesisStep)).all()
    r = client.put(f"/api/v1/batches/{chain['inter']}/route", json={"steps": [STEP], "precursors": [chain["c"]]},
                   headers=w)
    assert r.status_code == 422 and r.json()["field"] == "precursors[0]"
    r = client.put(f"/api/v1/batches/{chain['a']}/route", json={"precursors": [chain["a"]]}, headers=w)
    assert r.status_code == 422
    bad = {**STEP, "reagents": [{"reagent": "THF", "amount": "15 K"}]}
    r = client.put(f"/api/v1/batches/{chain['a']}/route", json={"steps": [bad]}, headers=w)
    assert r.status_code == 422 and r.json()["field"] == "steps[0].reagents[0].amount"
    r = client.put(f"/api/v1/batches/{chain['a']}/route", json={"steps": [{**STEP, "temperature": "-300 degC"}]},
                   headers=w)
    assert r.status_code == 422 and r.json()["field"] == "steps[0].temperature"
    assert len(session.exec(select(SynthesisStep)).all()) == len(before)


def test_copy_a_route_as_template(client, session, w, chain):
    new = _batch(client, w, "CCCOc1ccc(OCCC)cc1")
    r = client.post(f"/api/v1/batches/{new}/route/copy", json={"source": chain["a"]}, headers=w)
    assert r.status_code == 200, r.text
    step = r.json()["steps"][0]
    assert step["yield_pct"] is None and step["reagents"][0]["amount"] == "2.2 mmol" and r.json()["precursors"] == []
    again = client.post(f"/api/v1/batches/{new}/route/copy", json={"source": chain["a"]}, headers=w)
    assert again.status_code == 422
    ev = session.exec(select(AuditEvent).where(AuditEvent.action == "batch.route_copy")).one()
    assert ev.after["template"] == chain["a"]


def test_embargoed_routes_and_lineage_are_withheld(client, session, w, chain):
    secret = client.post("/api/v1/compounds", json={"smiles": "CCCCSc1ccc(SCCCC)cc1", "embargoed": True},
                         headers=w).json()["code"]
    sb = client.post(f"/api/v1/compounds/{secret}/batches", json={}, headers=w).json()["code"]
    assert client.put(f"/api/v1/batches/{sb}/route", json={"steps": [STEP], "precursors": [chain["inter"]]},
                      headers=w).status_code == 200
    up = bearer(make_token(session, scope="upload", name="pc"))
    hidden = client.get(f"/api/v1/batches/{sb}/route", headers=up).json()
    assert hidden["withheld"] and hidden["steps"] == [] and hidden["precursors"] == []
    products = client.get(f"/api/v1/batches/{chain['inter']}/route", headers=up).json()["products"]
    assert sb not in [p["batch"] for p in products]
    assert sb in [p["batch"] for p in client.get(f"/api/v1/batches/{chain['inter']}/route", headers=w).json()["products"]]
