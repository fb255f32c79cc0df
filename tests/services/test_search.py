"""Structure search through the service, on SQLite (in-process index) and PostgreSQL (RDKit cartridge).

Compounds are registered through the JSON API, as a chemist would. Expected answers come
from brute force outside the code under test: ``HasSubstructMatch`` on every registered
molecule and the count-vector Tanimoto of RDKit's legacy Morgan count implementation
(``rdMolDescriptors.GetMorganFingerprint``, radius 2) for every pair, written out in
tests/chem/test_search.py.
The last test registers the same 40 molecules in both back ends and compares the answers.
"""

from __future__ import annotations

import math
import shutil

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from rdkit import Chem, DataStructs, rdBase
from sqlmodel import Session, select

from server.access import Actor
from server.app import create_app
from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.chem.search import fingerprint
from server.errors import ChemistryError, InputError
from server.models import Compound
from server.services import search as structure_search
from server.services import views
from server.settings import Settings
from tests.chem.test_search import (KIND_QUERIES, MOLECULES, RING_QUERIES, SMARTS_QUERIES, count_tanimoto,
                                    legacy_fp)
from tests.conftest import _empty_pg
from tests.factories import bearer, login_as, make_token

# A smaller set for the per-back-end tests: 4 bowls of each bridge kind and 6 simple aromatics.
SMALL = [m for i, m in enumerate(MOLECULES[:21]) if i % 7 in (0, 1, 3, 6)] + MOLECULES[21:27]
QUERIES = ["c1ccccc1", "[#34]", "c1ccsc1", "[OX2][CH2][CH2]", "[CH2;R]", "C1=CC=CC=C1", "*~*"]
SIMILAR = [(MOLECULES[1], 0.5), (MOLECULES[8], 0.3), ("COc1ccccc1", 0.25), ("c1ccccc1", 1.0)]


def register(client, token_headers, smiles_list) -> dict[str, str]:
    codes = {}
    for smi in smiles_list:
        r = client.post("/api/v1/compounds", json={"smiles": smi}, headers=token_headers)
        assert r.status_code == 201, r.text
        codes[r.json()["code"]] = r.json()["smiles"]
    return codes


def stored(session: Session) -> list[Compound]:
    session.expire_all()
    return list(session.exec(select(Compound).order_by(Compound.id)).all())


def brute_sub(compounds, text: str, *, kekule_smiles: bool = False) -> list[int]:
    q = Chem.MolFromSmiles(text) if kekule_smiles else Chem.MolFromSmarts(text)
    return [c.id for c in compounds if Chem.MolFromSmiles(c.smiles).HasSubstructMatch(q)]


def brute_sim(compounds, smiles: str, threshold: float) -> list[tuple[int, float]]:
    q = legacy_fp(smiles)
    pairs = [(c.id, count_tanimoto(q, legacy_fp(c.smiles))) for c in compounds]
    return sorted([p for p in pairs if p[1] >= threshold], key=lambda p: (-p[1], p[0]))


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write"))


@pytest.fixture
def small_set(client, writer, session):
    register(client, writer, SMALL)
    return stored(session)


def test_backend_is_the_cartridge_on_postgresql(session, small_set):
    name = session.get_bind().dialect.name
    expected = "cartridge" if name == "postgresql" else "in-process"
    assert structure_search.backend(session) == expected
    if name == "postgresql":
        probe = small_set[0].smiles
        rows = session.execute(sa.text(
            "SELECT compound_id, tanimoto_sml(mcfp, morgan_fp(mol_from_smiles(CAST(:q AS text)), 2)), "
            "tanimoto_sml(mcfp, mcfp) FROM compound_structure ORDER BY compound_id"), {"q": probe}).all()
        assert [r[0] for r in rows] == [c.id for c in small_set]  # every registration indexed
        q = fingerprint(Chem.MolFromSmiles(probe))
        for (compound_id, sim, own), c in zip(rows, small_set):
            # The cartridge's count fingerprint of each compound compares exactly as the in-process one.
            assert own == 1.0
            assert sim == DataStructs.TanimotoSimilarity(q, fingerprint(Chem.MolFromSmiles(c.smiles)))


def test_substructure_and_similarity_equal_brute_force(session, small_set):
    codes = {c.id: c.code for c in small_set}
    for query in QUERIES:
        hits = structure_search.search(session, substructure=query)
        expected = brute_sub(small_set, query, kekule_smiles=query.startswith("C1="))
        assert [h.compound_id for h in hits] == expected, query
        assert [h.code for h in hits] == [codes[i] for i in expected]
        assert all(h.similarity is None for h in hits)
    for query, threshold in SIMILAR:
        hits = structure_search.search(session, similar=query, threshold=threshold)
        expected = brute_sim(small_set, query, threshold)
        assert [h.compound_id for h in hits] == [i for i, _ in expected], (query, threshold)
        for hit, (_, sim) in zip(hits, expected):
            assert hit.similarity == pytest.approx(sim, abs=1e-9)
    # Both filters: compounds with sulfur, by similarity to an S-bridged bowl.
    hits = structure_search.search(session, substructure="[#16]", similar=MOLECULES[8], threshold=0.2)
    with_s = set(brute_sub(small_set, "[#16]"))
    expected = [p for p in brute_sim(small_set, MOLECULES[8], 0.2) if p[0] in with_s]
    assert [h.compound_id for h in hits] == [i for i, _ in expected]
    assert len(expected) >= 3  # the combined check has something to compare


def test_archived_compounds_are_left_out_by_default(client, writer, session, small_set):
    benzene_ring = brute_sub(small_set, "c1ccccc1")
    gone = next(c for c in small_set if c.id == benzene_ring[0])
    assert client.post(f"/api/v1/compounds/{gone.code}/archive", headers=writer).status_code == 200
    session.expire_all()
    ids = [h.compound_id for h in structure_search.search(session, substructure="c1ccccc1")]
    assert ids == benzene_ring[1:]
    ids = [h.compound_id for h in structure_search.search(session, substructure="c1ccccc1", include_archived=True)]
    assert ids == benzene_ring
    sim = structure_search.search(session, similar=gone.smiles, threshold=1.0)
    assert sim == []


def test_candidate_ids_restrict_the_result(session, small_set):
    subset = [c.id for c in small_set[::2]]
    hits = structure_search.search(session, substructure="c1ccccc1", candidate_ids=subset)
    assert [h.compound_id for h in hits] == [i for i in brute_sub(small_set, "c1ccccc1") if i in subset]
    hits = structure_search.search(session, similar=MOLECULES[1], threshold=0.3, candidate_ids=subset)
    assert [h.compound_id for h in hits] == [i for i, _ in brute_sim(small_set, MOLECULES[1], 0.3) if i in subset]
    assert structure_search.search(session, substructure="c1ccccc1", candidate_ids=[]) == []


def test_embargoed_compounds_can_be_left_out(client, writer, session):
    r = client.post("/api/v1/compounds", json={"smiles": "c1cc[se]c1", "embargoed": True}, headers=writer)
    assert r.status_code == 201, r.text
    assert [h.code for h in structure_search.search(session, substructure="[#34]")] == [r.json()["code"]]
    assert structure_search.search(session, substructure="[#34]", include_embargoed=False) == []


def test_a_new_registration_is_found_at_once(client, writer, session, small_set):
    assert structure_search.search(session, substructure="[N+](=O)[O-]") == []  # builds/uses the index
    code = next(iter(register(client, writer, ["O=[N+]([O-])c1ccccc1"])))
    session.expire_all()
    assert [h.code for h in structure_search.search(session, substructure="[N+](=O)[O-]")] == [code]
    assert [h.code for h in structure_search.search(session, similar="O=[N+]([O-])c1ccccc1", threshold=1.0)] == [code]


BAD_QUERIES = [
    ({"substructure": "c1ccc("}, "substructure", "neither a valid SMARTS"),
    ({"substructure": "[C"}, "substructure", "neither a valid SMARTS"),
    ({"similar": "C1CC"}, "similar", "ring"),
    ({}, "substructure", "give a substructure"),
    ({"substructure": "  "}, "substructure", "give a substructure"),
    ({"similar": "c1ccccc1", "threshold": 0}, "threshold", "above 0"),
    ({"similar": "c1ccccc1", "threshold": 1.5}, "threshold", "at most 1"),
    ({"similar": "c1ccccc1", "threshold": math.nan}, "threshold", "number"),
    ({"similar": "c1ccccc1", "threshold": True}, "threshold", "number"),
]


def test_bad_queries_give_clear_errors(session):
    for kwargs, field, fragment in BAD_QUERIES:
        with pytest.raises(InputError) as err:
            structure_search.search(session, **kwargs)
        assert err.value.field == field, kwargs
        assert fragment.lower() in err.value.message.lower(), kwargs
        if field in ("substructure", "similar") and "give" not in fragment:
            assert isinstance(err.value, ChemistryError)


def test_threshold_of_one_is_allowed(session, small_set):
    hits = structure_search.search(session, similar=small_set[0].smiles, threshold=1.0)
    assert [h.compound_id for h in hits] == [small_set[0].id]
    assert hits[0].similarity == 1.0


# --- the two back ends on the same data -------------------------------------------------------


def _app_for(url: str, data_dir):
    settings = Settings(data_dir=data_dir, database_url=url, secret_key="test-secret-key-not-for-production",
                        embedded_worker=False).resolved()
    return create_app(settings)


def _answers(app) -> dict:
    """Every query's answer keyed by compound code (ids may differ between databases)."""
    out = {}
    with Session(app.state.engine) as s:
        for q in SMARTS_QUERIES + RING_QUERIES + KIND_QUERIES + ["C1=CC=CC=C1"]:
            out[("sub", q)] = [(h.code, None) for h in structure_search.search(s, substructure=q)]
        for smi in MOLECULES[::4] + ["COc1ccccc1"]:
            for t in (0.15, 0.4, 0.7):
                out[("sim", smi, t)] = [(h.code, h.similarity) for h in structure_search.search(s, similar=smi,
                                                                                                 threshold=t)]
        out["backend"] = structure_search.backend(s)
    return out


@pytest.mark.pg
@pytest.mark.parametrize("pair", [pytest.param(("sqlite", "postgresql"), id="sqlite-vs-postgresql")])
def test_sqlite_and_postgresql_give_identical_answers(pair, tmp_path, sqlite_template, pg_database):
    sqlite_path = tmp_path / "same.db"
    shutil.copyfile(sqlite_template, sqlite_path)
    _empty_pg(pg_database)
    answers = []
    for url, sub in ((f"sqlite:///{sqlite_path}", "a"), (pg_database, "b")):
        app = _app_for(url, tmp_path / sub)
        try:
            with TestClient(app) as client, Session(app.state.engine) as s:
                register(client, bearer(make_token(s, scope="write")), MOLECULES)
            answers.append(_answers(app))
        finally:
            app.state.engine.dispose()
    lite, pg = answers
    assert (lite.pop("backend"), pg.pop("backend")) == ("in-process", "cartridge")
    assert lite.keys() == pg.keys()
    assert any(len(v) > 3 for v in lite.values())  # the comparison is not between empty answers
    for key in lite:
        assert [code for code, _ in lite[key]] == [code for code, _ in pg[key]], key
        for (_, a), (_, b) in zip(lite[key], pg[key]):
            if a is None or b is None:
                assert a is b is None, key
            else:
                # Both back ends compute the same bits and the same integer ratio, so the Tanimoto
                # values must agree to 1e-9 (in practice they are identical doubles).
                assert abs(a - b) <= 1e-9, key


# --- bounded work per search (issue 12 item 9) --------------------------------------------------


def test_too_general_query_answers_422_naming_the_limit(client, writer, small_set):
    # 24 wildcards in a chain: a query of this shape took 10-13 s over 61 molecules before limits existed.
    r = client.get("/api/v1/search", params={"substructure": "~".join(["*"] * 24)}, headers=writer)
    assert r.status_code == 422
    body = r.json()
    assert body["field"] == "substructure"
    assert "query too general" in body["detail"] and "generic_atoms" in body["detail"]
    ok = client.get("/api/v1/search", params={"substructure": "[#34]"}, headers=writer)
    assert ok.status_code == 200


def test_cartridge_statement_over_budget_is_too_general_and_the_transaction_goes_on(session):
    if session.get_bind().dialect.name != "postgresql":
        pytest.skip("the statement budget is PostgreSQL's statement_timeout")
    from server.chem.search import QueryTooGeneral

    with pytest.raises(QueryTooGeneral, match="time budget of 0.05 s"):
        structure_search._within_budget(session, sa.text("SELECT pg_sleep(2)"), {}, 0.05)
    # Only the savepoint was rolled back, and the caller's statement_timeout is what it was.
    assert session.execute(sa.text("SELECT 1")).scalar_one() == 1
    assert session.execute(sa.text("SHOW statement_timeout")).scalar_one() == "0"
    rows = structure_search._within_budget(session, sa.text("SELECT 42"), {}, 0.5)
    assert rows[0][0] == 42
    assert session.execute(sa.text("SHOW statement_timeout")).scalar_one() == "0"


def test_searches_are_rate_limited_per_caller(tmp_path, db_url, session):
    settings = Settings(data_dir=tmp_path, database_url=db_url, secret_key="test-secret-key-not-for-production",
                        embedded_worker=False, search_per_minute=1, search_burst=3).resolved()
    one, other = bearer(make_token(session, scope="read")), bearer(make_token(session, scope="read"))
    app = create_app(settings)
    try:
        with TestClient(app) as c:
            codes = [c.get("/api/v1/search", params={"substructure": "c1ccccc1"}, headers=one).status_code
                     for _ in range(4)]
            assert codes == [200, 200, 200, 429]
            refused = c.get("/api/v1/search", params={"substructure": "c1ccccc1"}, headers=one)
            assert int(refused.headers["Retry-After"]) >= 1
            assert "REMANENCE_SEARCH_PER_MINUTE" in refused.json()["detail"]
            # Another caller has its own bucket; requests without a structure query spend nothing.
            assert c.get("/api/v1/search", params={"similar": "c1ccccc1"}, headers=other).status_code == 200
            assert c.get("/api/v1/compounds", headers=one).status_code == 200
            # The registry page's structure filter spends from the same per-caller allowance.
            assert c.get("/api/v1/compounds", params={"substructure": "c1ccccc1"}, headers=one).status_code == 429
    finally:
        app.state.engine.dispose()


def test_homologues_are_told_apart_on_both_back_ends(client, writer, session):
    # Issue 22, item 5: with bit vectors the C6...C12 alkoxy bowls all scored 1.0; counts rank the
    # nearest chain length first, and both back ends give the same numbers (reference: the count
    # Tanimoto of the legacy implementation, tests/chem/test_search.py).
    series = {n: build_from_scaffold(PARENT_BOWLS["S"], "alkoxy", n, None) for n in (6, 8, 10, 12)}
    codes = register(client, writer, list(series.values()))
    by_smiles = {smi: code for code, smi in codes.items()}
    hits = structure_search.search(session, similar=series[8], threshold=0.3)
    ref = {by_smiles[series[n]]: count_tanimoto(legacy_fp(series[8]), legacy_fp(series[n])) for n in series}
    assert [h.code for h in hits] == sorted(ref, key=lambda code: -ref[code])  # C8, C10, C6, C12
    for h in hits:
        assert h.similarity == pytest.approx(ref[h.code], abs=1e-12)
    assert hits[1].similarity < 1.0 and hits[-1].code == by_smiles[series[12]]


def test_the_index_is_read_back_from_the_data_directory_after_a_restart(client, writer, session, small_set,
                                                                        tmp_path, monkeypatch):
    """A restarted process reads the entries from the file instead of parsing and fingerprinting again;
    a compound registered meanwhile (by another process) is computed and found; a damaged file is ignored."""
    from server.chem import search as chem_search

    engine = session.get_bind()
    structure_search.keep_index_in(engine, tmp_path / "data")
    computed = []
    real_entry = chem_search._entry
    monkeypatch.setattr(chem_search, "_entry", lambda i, smi: computed.append(i) or real_entry(i, smi))

    def restart():
        structure_search._indexes.pop(engine, None)
        computed.clear()
        return structure_search.structure_index(session)

    try:
        restart()
        path = tmp_path / "data" / structure_search.INDEX_FILE
        assert path.exists() and sorted(computed) == [c.id for c in small_set]
        index = restart()
        assert computed == [] and index.ids() == {c.id for c in small_set}
        for q in QUERIES:
            assert index.substructure(chem_search.read_query(q).mol) == brute_sub(
                small_set, q, kekule_smiles=q == "C1=CC=CC=C1"), q
        new = next(iter(register(client, writer, ["O=[N+]([O-])c1ccccc1"])))
        index = restart()
        session.expire_all()
        assert len(computed) == 1
        assert [h.code for h in structure_search.search(session, substructure="[N+](=O)[O-]")] == [new]
        assert {c.id for c in stored(session)} == index.ids()
        path.write_bytes(path.read_bytes()[:-1] + b"\0")  # damaged: every entry computed again
        restart()
        assert len(computed) == len(small_set) + 1
        restart()  # and written back whole
        assert computed == []
    finally:
        structure_search.keep_index_in(engine, None)


def test_a_first_page_is_the_head_of_the_whole_answer(client, writer, session, small_set):
    """limit= and newest_first= give the head of the full answer (brute force), archived hits left out first."""
    benzene_ring = brute_sub(small_set, "c1ccccc1")
    for gone_id in (benzene_ring[0], benzene_ring[-1], benzene_ring[-2]):
        gone = next(c for c in small_set if c.id == gone_id)
        assert client.post(f"/api/v1/compounds/{gone.code}/archive", headers=writer).status_code == 200
    session.expire_all()
    visible = [i for i in benzene_ring if i not in (benzene_ring[0], benzene_ring[-1], benzene_ring[-2])]
    for limit in (1, 2, 3, 100):
        hits = structure_search.search(session, substructure="c1ccccc1", limit=limit)
        assert [h.compound_id for h in hits] == visible[:limit]
        hits = structure_search.search(session, substructure="c1ccccc1", limit=limit, newest_first=True)
        assert [h.compound_id for h in hits] == visible[::-1][:limit]
    hits = structure_search.search(session, similar=MOLECULES[1], threshold=0.3, limit=2, newest_first=True)
    assert [h.compound_id for h in hits] == [i for i, _ in brute_sim(small_set, MOLECULES[1], 0.3)][:2]
    with pytest.raises(InputError) as err:
        structure_search.search(session, substructure="c1ccccc1", limit=0)
    assert err.value.field == "limit"


# --- the registry's first page from the first hits (services/views.py, _first_hits) ---------------------------

READER = Actor(kind="token", name="dashboard-pc", scope="read")  # may not see embargoed structures
MEMBER = Actor(kind="user", name="member1", role="member")


def _page(session, params: dict, actor, *, count: bool):
    result = views.query_view(session, views.parse_view(params), actor=actor, count=count)
    token = result.next_cursor.token if result.next_cursor else None
    return [r.compound.number for r in result.rows], result.has_next, token, result.total


@pytest.fixture
def spied_limits(monkeypatch):
    """The ``limit`` of every structure search the view makes (None: the whole answer)."""
    limits = []
    real = structure_search.search

    def spy(*args, **kwargs):
        limits.append(kwargs.get("limit"))
        return real(*args, **kwargs)

    monkeypatch.setattr(structure_search, "search", spy)
    return limits


def test_a_substructure_first_page_from_the_first_hits_is_the_full_paths_page(client, writer, session, small_set,
                                                                               spied_limits):
    """On both back ends: the page, its order, has_next and the next cursor equal those of the whole answer,
    for both directions, archived and embargoed hits, and callers who may or may not see embargoed structures."""
    benzene = brute_sub(small_set, "c1ccccc1")
    by_id = {c.id: c for c in small_set}
    assert client.post(f"/api/v1/compounds/{by_id[benzene[-1]].code}/archive", headers=writer).status_code == 200
    for i in (benzene[-2], benzene[1]):
        r = client.patch(f"/api/v1/compounds/{by_id[i].code}", json={"embargoed": True}, headers=writer)
        assert r.status_code == 200, r.text
    session.expire_all()
    cases = [{"substructure": "c1ccccc1"}, {"substructure": "c1ccccc1", "dir": "asc"}, {"substructure": "[#34]"},
             {"substructure": "c1ccccc1", "archived": "1"}, {"substructure": "C1=CC=CC=C1", "dir": "asc"},
             {"substructure": "[se]"}, {"substructure": "C#N"}]
    first_hits = 0
    for params in cases:
        for size in (1, 2, 3, 5, 100):
            for actor in (READER, MEMBER):
                asked = {**params, "size": str(size)}
                spied_limits.clear()
                lazy = _page(session, asked, actor, count=False)
                first_hits += spied_limits == [size + 1]
                numbers, has_next, token, total = _page(session, asked, actor, count=True)
                assert spied_limits[-1] is None  # the counted page reads the whole answer
                assert lazy[:3] == (numbers, has_next, token), (params, size, actor)
                assert lazy[3] == (None if has_next else total)
    assert first_hits == len(cases) * 5 * 2  # every lazy page came from the first hits
    # Another filter, another sort or a later page: the whole answer, as before.
    for params in ({"substructure": "c1ccccc1", "sort": "mw"}, {"substructure": "c1ccccc1", "chain_kind": "alkoxy"},
                   {"substructure": "c1ccccc1", "page": "2", "size": "2"}, {"similar": MOLECULES[1]}):
        spied_limits.clear()
        views.query_view(session, views.parse_view(params), actor=MEMBER, count=False)
        assert spied_limits == [None], params


def test_numbers_out_of_id_order_fall_back_to_the_whole_answer(client, writer, session, small_set, spied_limits):
    """Rows loaded with numbers of their own (not allocated at registration): the probe sees a compound beyond
    the first hits that belongs on the page, and the page is then read from the whole answer."""
    benzene = brute_sub(small_set, "c1ccccc1")
    oldest = benzene[0]
    top = session.exec(select(sa.func.max(Compound.number))).one()
    session.execute(sa.update(Compound).where(Compound.id == oldest).values(number=top + 100))
    session.commit()
    for params in ({"substructure": "c1ccccc1", "size": "2"}, {"substructure": "c1ccccc1", "size": "2", "dir": "asc"}):
        spied_limits.clear()
        lazy = _page(session, params, MEMBER, count=False)
        assert spied_limits == [3, None]  # first hits tried, then the whole answer
        assert lazy[:3] == _page(session, params, MEMBER, count=True)[:3]
    assert _page(session, {"substructure": "c1ccccc1", "size": "2"}, MEMBER, count=False)[0][0] == top + 100


def test_registry_page_and_api_list_show_the_first_hits_and_count_lazily(client, writer, session, small_set):
    login_as(client, session, role="member")
    benzene = brute_sub(small_set, "c1ccccc1")
    page = client.get("/compounds", params={"substructure": "c1ccccc1", "size": "2"})
    assert page.status_code == 200
    assert "counting" in page.text and "/compounds/count?" in page.text
    count = client.get("/compounds/count", params={"substructure": "c1ccccc1", "size": "2"})
    assert count.status_code == 200 and f'data-total="{len(benzene)}"' in count.text
    lazy = client.get("/api/v1/compounds", params={"substructure": "c1ccccc1", "limit": 2, "count": "false"},
                      headers=writer).json()
    counted = client.get("/api/v1/compounds", params={"substructure": "c1ccccc1", "limit": 2}, headers=writer).json()
    assert lazy["total"] is None and counted["total"] == len(benzene)
    assert [c["code"] for c in lazy["items"]] == [c["code"] for c in counted["items"]]
    assert lazy["next_after"] == counted["next_after"]
    whole = client.get("/api/v1/compounds", params={"substructure": "[#34]", "limit": 500, "count": "false"},
                       headers=writer).json()
    assert whole["total"] == len(brute_sub(small_set, "[#34]"))  # the last page counts itself
