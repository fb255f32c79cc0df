"""Compound registration over the JSON API (runs on SQLite and PostgreSQL)."""

from __future__ import annotations

import pytest
from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.models import AuditEvent, Compound
from tests.factories import bearer, make_token

# Benzene's standard InChIKey, as published by PubChem (CID 241) and the InChI Trust.
BENZENE_INCHIKEY = "UHOVQNZJYSORNB-UHFFFAOYSA-N"


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write"))


def test_register_returns_identity_and_side_chains(client, writer):
    smiles = build_from_scaffold(PARENT_BOWLS["CH2"], "alkoxy", 12)
    r = client.post("/api/v1/compounds", json={"smiles": smiles, "label": "hexa-C12O", "notes": "first batch soon"},
                    headers=writer)
    assert r.status_code == 201, r.text
    body = r.json()
    for key in ("code", "smiles", "inchi", "inchikey", "formula", "mw", "exact_mass", "side_chains"):
        assert key in body
    assert body["code"] == "RVZ-00001"
    assert body["side_chains"] == [{"kind": "alkoxy", "carbons": 12, "branched": False, "count": 6}]
    # C21H12 core with six H replaced by OC12H25: C21H6(OC12H25)6 = C93H156O6 (counted by hand).
    assert body["formula"] == "C93H156O6"


def test_benzene_identity_matches_published_inchikey(client, writer):
    r = client.post("/api/v1/compounds", json={"smiles": "C1=CC=CC=C1"}, headers=writer)
    assert r.status_code == 201
    assert r.json()["inchikey"] == BENZENE_INCHIKEY
    # Molar mass 78.11 g/mol (PubChem, from IUPAC standard atomic weights).
    assert r.json()["mw"] == pytest.approx(78.11, abs=0.01)


def test_duplicate_spelling_is_refused_with_existing_code(client, writer, session):
    first = client.post("/api/v1/compounds", json={"smiles": "c1ccccc1O"}, headers=writer)
    assert first.status_code == 201
    again = client.post("/api/v1/compounds", json={"smiles": "Oc1ccccc1"}, headers=writer)
    assert again.status_code == 409
    assert again.json()["existing"] == first.json()["code"]
    assert len(session.exec(select(Compound)).all()) == 1


@pytest.mark.parametrize(
    "payload, fragment",
    [
        ({"smiles": "C1CC"}, "unclosed ring"),
        ({"smiles": "C(C)(C)(C)(C)C"}, "valence"),
        ({"smiles": ""}, "give a SMILES"),
        ({"smiles": "xyz"}, "SMILES"),
        ({"smiles": "foo\n  RDKit\n\n  2  1  0  0  0  0  0  0  0  0999 V2000\n"}, "MOL"),
    ],
)
def test_bad_structures_give_422_and_store_nothing(client, writer, session, payload, fragment):
    r = client.post("/api/v1/compounds", json=payload, headers=writer)
    assert r.status_code == 422
    assert fragment.lower() in r.json()["detail"].lower()
    assert session.exec(select(Compound)).all() == []


def test_codes_are_never_reused_after_archive(client, writer):
    a = client.post("/api/v1/compounds", json={"smiles": "CCO"}, headers=writer).json()["code"]
    assert client.post(f"/api/v1/compounds/{a}/archive", headers=writer).json()["archived"] is True
    b = client.post("/api/v1/compounds", json={"smiles": "CCCO"}, headers=writer).json()["code"]
    assert (a, b) == ("RVZ-00001", "RVZ-00002")
    listed = client.get("/api/v1/compounds", headers=writer).json()
    assert [i["code"] for i in listed["items"]] == ["RVZ-00002"]
    assert client.get("/api/v1/compounds?include_archived=true", headers=writer).json()["total"] == 2
    assert client.post(f"/api/v1/compounds/{a}/restore", headers=writer).json()["archived"] is False


def test_register_from_scaffold(client, writer):
    sc = client.post("/api/v1/scaffolds", json={"code": "BWL-S", "name": "S-bridged bowl", "smiles": PARENT_BOWLS["S"]},
                     headers=writer)
    assert sc.status_code == 201, sc.text
    assert sc.json()["attachment_points"] == 6
    assert sc.json()["bridge"] == "S"
    r = client.post("/api/v1/compounds",
                    json={"scaffold": "BWL-S", "side_chain": {"kind": "alkoxy", "branched_form": "2-ethylhexyl"}},
                    headers=writer)
    assert r.status_code == 201, r.text
    assert r.json()["scaffold"] == "BWL-S"
    assert r.json()["side_chains"] == [{"kind": "alkoxy", "carbons": 8, "branched": True, "count": 6}]


def test_patch_and_paging_and_audit(client, writer, session):
    for smi in ("CCO", "CCCO", "CCCCO"):
        client.post("/api/v1/compounds", json={"smiles": smi}, headers=writer)
    r = client.patch("/api/v1/compounds/RVZ-00002", json={"label": "propanol test", "embargoed": True}, headers=writer)
    assert r.status_code == 200
    assert (r.json()["label"], r.json()["embargoed"]) == ("propanol test", True)
    page = client.get("/api/v1/compounds?limit=2&offset=1", headers=writer).json()
    assert page["total"] == 3 and [i["code"] for i in page["items"]] == ["RVZ-00002", "RVZ-00001"]
    actions = [e.action for e in session.exec(select(AuditEvent).order_by(AuditEvent.id)).all()]
    assert actions.count("compound.create") == 3 and "compound.update" in actions
    update = session.exec(select(AuditEvent).where(AuditEvent.action == "compound.update")).one()
    assert update.before["label"] == "" and update.after["label"] == "propanol test"


def test_batches(client, writer):
    code = client.post("/api/v1/compounds", json={"smiles": "CCO"}, headers=writer).json()["code"]
    body = {"made_on": "2026-11-20", "chemist": "T. Okoro", "scale_mg": 250, "yield_pct": 61.5, "purity_pct": 98.2,
            "notes": "column, then recrystallised"}
    b1 = client.post(f"/api/v1/compounds/{code}/batches", json=body, headers=writer)
    b2 = client.post(f"/api/v1/compounds/{code}/batches", json={"state": "failed"}, headers=writer)
    assert (b1.status_code, b2.status_code) == (201, 201)
    assert b1.json()["code"] == f"{code}-B01" and b2.json()["code"] == f"{code}-B02"
    got = client.get(f"/api/v1/batches/{code}-B01", headers=writer).json()
    assert got["yield_pct"] == 61.5 and got["compound"] == code
    assert client.get(f"/api/v1/compounds/{code}", headers=writer).json()["batches"] == 2
    bad = client.post(f"/api/v1/compounds/{code}/batches", json={"yield_pct": 140}, headers=writer)
    assert bad.status_code == 422 and "yield_pct" in bad.json()["detail"]
    assert client.post(f"/api/v1/compounds/{code}/batches", json={"state": "lost"}, headers=writer).status_code == 422
    assert client.get("/api/v1/batches/NOPE-B01", headers=writer).status_code == 404


def test_access_rules(client, session):
    read = bearer(make_token(session, scope="read", name="reader"))
    upload = bearer(make_token(session, scope="upload", name="tester-pc"))
    assert client.post("/api/v1/compounds", json={"smiles": "CCO"}).status_code == 401
    assert client.post("/api/v1/compounds", json={"smiles": "CCO"}, headers=read).status_code == 403
    assert client.post("/api/v1/compounds", json={"smiles": "CCO"}, headers=upload).status_code == 403
    assert client.get("/api/v1/compounds", headers=read).status_code == 200
    assert client.get("/api/v1/compounds", headers=bearer("rmn_not-a-real-token")).status_code == 401
    assert client.get("/api/v1/compounds", headers={"Authorization": "Basic abc"}).status_code == 401


def test_embargoed_structure_hidden_from_upload_tokens(client, session):
    writer = bearer(make_token(session, scope="write"))
    upload = bearer(make_token(session, scope="upload", name="tester-pc"))
    code = client.post("/api/v1/compounds", json={"smiles": "CCOCC", "embargoed": True}, headers=writer).json()["code"]
    seen = client.get(f"/api/v1/compounds/{code}", headers=upload).json()
    assert seen["smiles"] is None and seen["inchikey"] is None and seen["formula"] is None
    assert client.get(f"/api/v1/compounds/{code}/structure.svg", headers=upload).status_code == 404
    assert client.get(f"/api/v1/compounds/{code}", headers=writer).json()["smiles"] == "CCOCC"


def test_openapi_documents_error_shapes(client):
    spec = client.get("/openapi.json").json()
    post = spec["paths"]["/api/v1/compounds"]["post"]
    assert {"201", "401", "403", "409", "422"} <= set(post["responses"])
    assert "existing" in spec["components"]["schemas"]["DuplicateOut"]["properties"]
