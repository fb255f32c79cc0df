"""A pasted structure is filed under the scaffold it is built on: API, live preview, re-matching
(runs on SQLite and PostgreSQL; the matching is RDKit in-process on both, so the answers are one)."""

from __future__ import annotations

from sqlmodel import select

from seed_demo import scenario
from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.models import AuditEvent, Compound, Scaffold
from server.services import registry
from tests.factories import bearer, login_as, make_token, soup

SE_C8 = build_from_scaffold(PARENT_BOWLS["Se"], "alkoxy", 8)


def _scaffolds(client, writer, keys=("CH2", "S", "Se")):  # noqa: ANN001
    for key in keys:
        b = scenario.BOWLS[key]
        r = client.post("/api/v1/scaffolds", headers=writer, json={"code": b.code, "name": b.name, "smiles": b.smiles})
        assert r.status_code == 201, r.text


def test_a_pasted_smiles_gets_its_scaffold(client, session):
    writer = bearer(make_token(session, scope="write"))
    _scaffolds(client, writer)
    r = client.post("/api/v1/compounds", headers=writer, json={"smiles": SE_C8})
    assert r.status_code == 201, r.text
    assert r.json()["scaffold"] == "TB-SE"
    assert r.json()["side_chains"][0] | {"fragments": None} == {"kind": "alkoxy", "carbons": 8, "branched": False,
                                                              "count": 6, "fragments": None}
    event = session.exec(select(AuditEvent).where(AuditEvent.action == "compound.create")).one()
    assert event.after["scaffold_match"].startswith("built on TB-SE (21 core atoms; 6 of 6")
    # something that is built on none of them stays without a scaffold
    assert client.post("/api/v1/compounds", headers=writer, json={"smiles": "c1ccccc1OC"}).json()["scaffold"] is None


def test_a_named_scaffold_the_structure_is_not_built_on_is_refused(client, session):
    writer = bearer(make_token(session, scope="write"))
    _scaffolds(client, writer)
    r = client.post("/api/v1/compounds", headers=writer, json={"smiles": SE_C8, "scaffold": "TB-S"})
    assert r.status_code == 422 and r.json()["field"] == "scaffold"
    assert "not built on scaffold TB-S" in r.json()["detail"]
    assert session.exec(select(Compound)).all() == []


def test_live_preview_shows_the_match_and_the_choice(client, session):
    writer = bearer(make_token(session, scope="write"))
    _scaffolds(client, writer, ("S",))
    oxy = PARENT_BOWLS["S"]
    for n in range(1, 7):
        oxy = oxy.replace(f"[*:{n}]", f"O[*:{n}]")
    assert client.post("/api/v1/scaffolds", headers=writer,
                       json={"code": "TB-S-O", "name": "hexaoxy S bowl", "smiles": oxy}).status_code == 201
    csrf = login_as(client, session)
    r = client.post("/compounds/preview", data={"smiles": build_from_scaffold(PARENT_BOWLS["S"], "alkoxy", 2)},
                    headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    doc = soup(r.text)
    dd = doc.find("dd", attrs={"data-field": "scaffold"})
    assert dd.find(attrs={"data-scaffold": True})["data-scaffold"] == "TB-S-O"
    note = dd.find(attrs={"data-field": "scaffold_note"}).text
    assert "also matches TB-S (21)" in note and "largest core is chosen" in note
    assert "[*:1] *CC" in dd.find(attrs={"data-field": "substituents"}).text
    # the form's own choice wins where the structure is built on it, and the preview says so
    r = client.post("/compounds/preview", data={"smiles": build_from_scaffold(PARENT_BOWLS["S"], "alkoxy", 2),
                                                "scaffold": "TB-S"}, headers={"HX-Request": "true", "X-CSRF-Token": csrf})
    dd = soup(r.text).find("dd", attrs={"data-field": "scaffold"})
    assert dd.find(attrs={"data-scaffold": True})["data-scaffold"] == "TB-S"
    assert "as given" in dd.find(attrs={"data-field": "scaffold_note"}).text


def test_the_preview_is_for_writers_only(client, session):
    # Viewers and read tokens never reach it (it answers which compound has this InChIKey).
    login_as(client, session, role="viewer")
    r = client.post("/compounds/preview", data={"smiles": SE_C8}, follow_redirects=False)
    assert r.status_code in (403, 303)


def test_rematch_files_old_compounds_dry_run_first(client, session):
    writer = bearer(make_token(session, scope="write"))
    # registered before their scaffold existed: no scaffold
    codes = [client.post("/api/v1/compounds", headers=writer, json={"smiles": s}).json()["code"]
             for s in (SE_C8, build_from_scaffold(PARENT_BOWLS["CH2"], "alkylthio", 6), "c1ccccc1")]
    _scaffolds(client, writer)
    dry = registry.rematch_scaffolds(session=session, apply=False, actor="test")
    assert [(c.code, c.before, c.after) for c in dry] == [(codes[0], None, "TB-SE"), (codes[1], None, "TB-CH2")]
    session.expire_all()
    assert all(c.scaffold_id is None for c in session.exec(select(Compound)).all())
    done = registry.rematch_scaffolds(session=session, apply=True, actor="test")
    assert done == dry
    session.expire_all()
    ids = {s.id: s.code for s in session.exec(select(Scaffold)).all()}
    filed = {c.code: ids.get(c.scaffold_id) for c in session.exec(select(Compound)).all()}
    assert filed == {codes[0]: "TB-SE", codes[1]: "TB-CH2", codes[2]: None}
    assert client.get(f"/api/v1/compounds/{codes[0]}", headers=writer).json()["scaffold"] == "TB-SE"
    assert len(session.exec(select(AuditEvent).where(AuditEvent.action == "compound.update")).all()) == 2
    assert registry.rematch_scaffolds(session=session, apply=True, actor="test") == []
