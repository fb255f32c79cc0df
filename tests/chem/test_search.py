"""In-process structure search against brute force: every molecule matched or compared one by one.

The references are independent of the code under test: substructure hits come from
``Chem.MolFromSmarts``/``MolFromSmiles`` + ``HasSubstructMatch`` on every molecule (no
screen), similarities from RDKit's legacy Morgan count implementation
(``rdMolDescriptors.GetMorganFingerprint``, not the generator the module uses) and the Tanimoto
coefficient on count vectors written out by hand, sum(min) / (sum a + sum b - sum min) (Willett,
Barnard & Downs 1998, DOI 10.1021/ci9800211), pair by pair.
"""

from __future__ import annotations

import pytest
from server.chem.identity import quiet_rdkit
from rdkit import Chem, DataStructs, rdBase
from rdkit.Chem import rdMolDescriptors

from server.chem.scaffold import PARENT_BOWLS, attach_side_chains, build_from_scaffold
import server.chem.search as search_module
from server.chem.search import (
    StructureIndex,
    element_kinds,
    fingerprint,
    load_entries,
    parse_query,
    query_kinds,
    read_query,
    save_entries,
)
from server.errors import ChemistryError

SIMPLE_AROMATICS = [
    "c1ccccc1",  # benzene
    "Cc1ccccc1",  # toluene
    "Oc1ccccc1",  # phenol
    "COc1ccccc1",  # anisole
    "CCCCCCOc1ccc(O)cc1",  # 4-hexyloxyphenol
    "COc1cc(OC)cc(OC)c1",  # 1,3,5-trimethoxybenzene
    "c1ccc2ccccc2c1",  # naphthalene
    "c1ccsc1",  # thiophene
    "c1cc[se]c1",  # selenophene
    "c1ccc2c(c1)sc1ccccc12",  # dibenzothiophene
    "c1ccc2c(c1)c1ccccc1c1ccccc21",  # triphenylene
    "c1ccncc1",  # pyridine
    "c1ccc(-c2ccccc2)cc1",  # biphenyl
    "c1ccc2c(c1)Cc1ccccc12",  # fluorene
    "c1ccc2c(c1)[nH]c1ccccc12",  # carbazole
    "OC(=O)c1ccccc1",  # benzoic acid
    "Nc1ccccc1",  # aniline
    "Clc1ccccc1",  # chlorobenzene
    "O=[N+]([O-])c1ccccc1",  # nitrobenzene
]

CHAINS = [("alkoxy", 1, None), ("alkoxy", 4, None), ("alkoxy", 8, None), ("alkylthio", 2, None),
          ("alkyl", 6, None), ("alkoxy", None, "2-ethylhexyl")]


def bowl_set() -> list[str]:
    """Parent bowls (H at every rim position) and six-fold substituted derivatives: 21 molecules."""
    out = []
    for bridge, scaffold in PARENT_BOWLS.items():
        out.append(attach_side_chains(scaffold, {n: "[*:1][H]" for n in range(1, 7)}))
        out += [build_from_scaffold(scaffold, kind, n, form) for kind, n, form in CHAINS]
    return out


MOLECULES = bowl_set() + SIMPLE_AROMATICS  # 40 structures
IDS = list(range(101, 101 + len(MOLECULES)))  # not 0-based, to catch position/id mix-ups

SMARTS_QUERIES = [
    "c1ccccc1",
    "[OX2][CH2][CH2]",  # alkoxy chains of two carbons or more
    "[#34]",  # selenium
    "c1ccsc1",  # aromatic thiophene ring
    "c-[OX2]-[CH3]",  # aryl methyl ether
    "[CH2;R]",  # ring CH2 (the CH2 bridge, fluorene)
    "[#6;R]~[#16;R]",
    "[$(c[OH])]",  # ring carbon bearing OH
    "CCCCCCCC",  # eight aliphatic carbons in a row
    "[SX2]([#6])[CH2][CH3]",  # ethylthio
    "[N+](=O)[O-]",
    "*~*",  # every molecule with a bond
]


@pytest.fixture(scope="module")
def index() -> StructureIndex:
    idx = StructureIndex()
    for i, smi in zip(IDS, MOLECULES):
        idx.add(i, smi)
    return idx


def brute_substructure(query: Chem.Mol, ids=None) -> list[int]:
    keep = set(IDS if ids is None else ids)
    return [i for i, s in zip(IDS, MOLECULES) if i in keep and Chem.MolFromSmiles(s).HasSubstructMatch(query)]


def legacy_fp(smiles: str) -> dict[int, int]:
    """Morgan radius-2 environment counts from RDKit's legacy (pre-generator) implementation."""
    with quiet_rdkit():  # the legacy call logs a deprecation notice
        return rdMolDescriptors.GetMorganFingerprint(Chem.MolFromSmiles(smiles), 2).GetNonzeroElements()


def count_tanimoto(a: dict[int, int], b: dict[int, int]) -> float:
    """Tanimoto on count vectors: sum min(a_i, b_i) / (sum a_i + sum b_i - sum min) (Willett et al. 1998)."""
    common = sum(min(n, b[k]) for k, n in a.items() if k in b)
    return common / (sum(a.values()) + sum(b.values()) - common)


def brute_similar(query_smiles: str, threshold: float, ids=None) -> dict[int, float]:
    keep = set(IDS if ids is None else ids)
    q = legacy_fp(query_smiles)
    sims = {i: count_tanimoto(q, legacy_fp(s)) for i, s in zip(IDS, MOLECULES) if i in keep}
    return {i: v for i, v in sims.items() if v >= threshold}


def test_set_is_about_forty_distinct_molecules():
    assert len(MOLECULES) == 40
    assert len({Chem.MolToInchiKey(Chem.MolFromSmiles(s)) for s in MOLECULES}) == 40


@pytest.mark.parametrize("smarts", SMARTS_QUERIES)
def test_substructure_equals_brute_force(index, smarts):
    assert read_query(smarts).language == "smarts"
    expected = brute_substructure(Chem.MolFromSmarts(smarts))
    assert index.substructure(parse_query(smarts)) == expected


def test_selenium_query_finds_exactly_the_se_bowls_and_selenophene(index):
    # By construction: 7 Se-bridged bowls (parent + 6 derivatives) and selenophene.
    expected = {i for i, s in zip(IDS, MOLECULES) if "se" in s.lower()}
    hits = index.substructure(parse_query("[#34]"))
    assert len(hits) == 8
    assert set(hits) == expected


def test_kekule_smiles_is_read_as_smiles_and_finds_aromatic_rings(index):
    query = read_query("C1=CC=CC=C1")
    assert query.language == "smiles"
    hits = index.substructure(query.mol)
    # Every molecule of the set has a benzene ring except thiophene, selenophene and pyridine.
    no_benzene = {"c1ccsc1", "c1cc[se]c1", "c1ccncc1"}
    assert set(hits) == {i for i, s in zip(IDS, MOLECULES) if s not in no_benzene}
    assert hits == brute_substructure(Chem.MolFromSmiles("C1=CC=CC=C1"))


def test_candidates_restrict_the_substructure_search(index):
    subset = IDS[::3]
    query = parse_query("c1ccccc1")
    assert index.substructure(query, candidates=subset) == brute_substructure(query, subset)
    assert index.substructure(query, candidates=[]) == []
    assert index.substructure(query, candidates=[999_999]) == []


@pytest.mark.parametrize("query_smiles", [MOLECULES[1], MOLECULES[9], "COc1ccccc1", "CCCCCCOc1ccc(O)cc1"])
@pytest.mark.parametrize("threshold", [0.2, 0.5, 0.8])
def test_similarity_equals_brute_force(index, query_smiles, threshold):
    expected = brute_similar(query_smiles, threshold)
    got = index.similar(parse_query(query_smiles, kind="similarity"), threshold)
    assert {i for i, _ in got} == set(expected)
    for i, sim in got:
        assert sim == pytest.approx(expected[i], abs=1e-12)
    # Highest similarity first, ties by id.
    assert got == sorted(got, key=lambda h: (-h[1], h[0]))


def test_similarity_with_candidates_and_self_match(index):
    query = MOLECULES[4]
    subset = IDS[:10]
    got = index.similar(parse_query(query, kind="similarity"), 0.3, candidates=subset)
    assert {i for i, _ in got} == set(brute_similar(query, 0.3, subset))
    # A molecule compared with itself: Tanimoto 1 (definition of the coefficient).
    assert got[0] == (IDS[4], 1.0)


def test_fingerprint_matches_the_legacy_implementation_element_for_element():
    for smi in MOLECULES:
        assert fingerprint(Chem.MolFromSmiles(smi)).GetNonzeroElements() == legacy_fp(smi)


def test_benzene_has_one_identifier_per_radius_six_times():
    # Morgan/ECFP (Rogers & Hahn 2010): all six benzene atoms are equivalent, so iterations 0, 1
    # and 2 give one distinct identifier each, each seen at six atoms (reasoned from the algorithm).
    assert sorted(fingerprint(Chem.MolFromSmiles("c1ccccc1")).GetNonzeroElements().values()) == [6, 6, 6]
    # Cyclohexane's atoms carry two hydrogens and single bonds: no identifier in common -> Tanimoto 0.
    a = fingerprint(Chem.MolFromSmiles("c1ccccc1"))
    b = fingerprint(Chem.MolFromSmiles("C1CCCCC1"))
    assert DataStructs.TanimotoSimilarity(a, b) == 0.0


def test_homologues_rank_by_chain_length():
    # Issue 22: bit vectors give Tanimoto 1.0 between C6, C8, C10 and C12 homologues (a longer chain
    # only repeats CH2 environments); count vectors must rank the nearest chain length first.
    series = {n: build_from_scaffold(PARENT_BOWLS["CH2"], "alkoxy", n, None) for n in (4, 6, 8, 10, 12)}
    bits = [rdMolDescriptors.GetMorganFingerprintAsBitVect(Chem.MolFromSmiles(s), 2, nBits=512)
            for s in series.values()]
    assert all(DataStructs.TanimotoSimilarity(bits[1], b) == 1.0 for b in bits[1:])  # the blindness fixed here
    idx = StructureIndex()
    for n, smi in series.items():
        idx.add(n, smi)
    ranked = [n for n, _ in idx.similar(Chem.MolFromSmiles(series[6]), 0.1)]
    assert ranked[0] == 6 and set(ranked[1:3]) == {4, 8} and ranked[3:] == [10, 12]
    got = dict(idx.similar(Chem.MolFromSmiles(series[8]), 0.1))
    assert got[6] > got[4] and got[10] > got[12] and got[8] == 1.0
    for n, sim in got.items():
        assert sim == pytest.approx(count_tanimoto(legacy_fp(series[8]), legacy_fp(series[n])), abs=1e-12)


def test_remove_and_replace():
    idx = StructureIndex()
    idx.add(1, "c1ccccc1")
    idx.add(2, "CCO")
    idx.add(3, "Oc1ccccc1")
    benzene = parse_query("c1ccccc1")
    assert idx.substructure(benzene) == [1, 3]
    idx.remove(1)
    assert idx.substructure(benzene) == [3]
    assert len(idx) == 2 and 1 not in idx
    idx.remove(1)  # absent: nothing happens
    idx.add(2, "c1ccccc1C")  # replaces the structure of id 2
    assert idx.substructure(benzene) == [2, 3]
    assert len(idx) == 2


def test_index_grows_past_its_first_block():
    idx = StructureIndex()
    for i in range(150):
        idx.add(i, "C" * (1 + i % 20) + "O")
    hits = idx.substructure(parse_query("CCCCCCCCCCCCCCCCCCCCO"))  # only the 20-carbon alcohols
    assert hits == [i for i in range(150) if i % 20 == 19]


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("c1ccc(", "neither a valid SMARTS"),
        ("[C", "neither a valid SMARTS"),
        ("", "no substructure"),
        ("c1ccccc1 benzene", "without spaces"),
    ],
)
def test_invalid_substructure_gives_clear_error(text, fragment):
    with pytest.raises(ChemistryError) as err:
        parse_query(text)
    assert err.value.field == "substructure"
    assert fragment.lower() in err.value.message.lower()


def test_invalid_similarity_query_names_the_field():
    with pytest.raises(ChemistryError) as err:
        parse_query("C1CC", kind="similarity")
    assert err.value.field == "similar"
    assert "ring" in err.value.message.lower()
    with pytest.raises(ChemistryError) as err:
        parse_query("[C[C]", kind="similarity")
    assert err.value.field == "similar"


def test_unknown_kind_is_a_programming_error():
    with pytest.raises(ValueError):
        parse_query("c1ccccc1", kind="exact")


# --- bounded work (issue 12 item 9) -----------------------------------------------------------

RING_QUERIES = ["[R2]", "[r5]", "[x3]", "[R3]", "[r6;R2]", "[a;r5]", "*@*@*"]


@pytest.mark.parametrize("smarts", RING_QUERIES)
def test_ring_queries_on_trusted_smiles_equal_brute_force(index, smarts):
    # The index parses trusted SMILES without sanitising; ring membership and ring sizes must still be
    # those of the fully sanitised molecule (brute force: MolFromSmiles + HasSubstructMatch).
    query = Chem.MolFromSmarts(smarts)
    assert index.substructure(query) == brute_substructure(query)


def test_generic_atom_chain_is_refused_naming_the_limit():
    from server.chem.search import QUERY_LIMITS, QueryTooGeneral

    n = QUERY_LIMITS["generic_atoms"] + 1
    with pytest.raises(QueryTooGeneral) as err:
        read_query("~".join(["*"] * n))
    assert err.value.field == "substructure"
    assert "query too general" in err.value.message and "generic_atoms" in err.value.message
    read_query("~".join(["*"] * (n - 1)))  # at the limit: accepted
    read_query("c1ccc2c(c1)sc1ccccc12")  # element atoms do not count as generic


def test_recursive_environments_are_bounded():
    from server.chem.search import QueryTooGeneral

    with pytest.raises(QueryTooGeneral, match="recursion_depth"):
        read_query("[$([#6]-[$([#8]-[$([#6])])])]")
    with pytest.raises(QueryTooGeneral, match="'recursive'"):
        read_query("[$(cO)][$(cS)][$(cN)][$(cC)][$(c[Se])]")
    read_query("[$(c[OH])]")


def test_matching_stops_at_the_time_budget():
    from server.chem.search import QueryTooGeneral

    bowls = bowl_set()
    idx = StructureIndex(threads=1)
    idx.add_many((i, bowls[i % len(bowls)]) for i in range(3 * len(bowls)))
    idx.chunk = 2
    # A 35-atom chain of wildcards (refused by read_query; built directly here) costs several ms per bowl
    # molecule: 63 molecules take well over 0.05 s, so the budget must cut the search short.
    slow = Chem.MolFromSmarts("~".join(["*"] * 35))
    with pytest.raises(QueryTooGeneral, match="time budget"):
        idx.substructure(slow, budget_s=0.05)
    fast = parse_query("[#34]")
    expected = [i for i in range(63) if Chem.MolFromSmiles(bowls[i % len(bowls)]).HasSubstructMatch(fast)]
    assert expected and idx.substructure(fast, budget_s=5.0) == expected


def test_search_does_not_wait_for_a_writer():
    # Copy-on-write: searches read a snapshot and never take the writers' lock.
    import threading

    idx = StructureIndex()
    idx.add_many([(1, "c1ccccc1"), (2, "CCO")])
    out: list = []
    with idx._write:  # a writer holds its lock (e.g. loading 10^5 structures)
        t = threading.Thread(target=lambda: out.append(idx.substructure(parse_query("c1ccccc1"))))
        t.start()
        t.join(timeout=10)
        assert out == [[1]]


def test_segments_copy_on_write_keep_every_entry():
    from server.chem import search as chem_search

    idx = StructureIndex()
    n = chem_search.SEGMENT_SIZE + 7
    idx.add_many((i, "C" * (1 + i % 20) + "O") for i in range(n))
    idx.add(n, "CCCCCCCCCCCCCCCCCCCCO")
    idx.remove(19)
    hits = idx.substructure(parse_query("CCCCCCCCCCCCCCCCCCCCO"))
    assert hits == [i for i in range(n) if i % 20 == 19 and i != 19] + [n]
    assert len(idx) == n


def test_searches_during_registrations_see_whole_snapshots():
    # Readers never lock; every answer must be a prefix of the registrations (ids registered in order),
    # never a torn state, while a writer keeps adding.
    import threading

    idx = StructureIndex(threads=1)
    benzene = parse_query("c1ccccc1")
    stop = threading.Event()
    seen: list[list[int]] = []

    def reader():
        while not stop.is_set():
            seen.append(idx.substructure(benzene))

    t = threading.Thread(target=reader)
    t.start()
    try:
        for i in range(1, 301):
            idx.add(i, "Cc1ccccc1" if i % 2 else "CCO")
    finally:
        stop.set()
        t.join(timeout=30)
    assert seen
    for hits in seen:
        assert hits == list(range(1, 2 * len(hits), 2))
    assert idx.substructure(benzene) == list(range(1, 301, 2))


# --- first hits (limit) and the index's entries on disk ------------------------------------------

@pytest.mark.parametrize("smarts", ["c1ccccc1", "[#34]", "[OX2][CH2][CH2]", "c1ccsc1", "[N+](=O)[O-]"])
def test_first_hits_are_the_head_of_the_whole_answer(monkeypatch, smarts):
    """limit= gives the first ids of the full answer, both ways, with candidates, and across segments that a
    replacement left out of id order (brute force: HasSubstructMatch on every molecule)."""
    monkeypatch.setattr(search_module, "SEGMENT_SIZE", 7)
    idx = StructureIndex(threads=1)
    idx.chunk = 3
    idx.add_many(zip(IDS, MOLECULES))
    idx.add(IDS[2], MOLECULES[2])  # re-added: now in the last segment, whose ids are no longer ascending
    q = parse_query(smarts)
    full = brute_substructure(q)
    odd = [i for i in IDS if i % 2]
    for limit in (1, 2, 5, 50):
        assert idx.substructure(q, limit=limit) == full[:limit]
        assert idx.substructure(q, limit=limit, newest_first=True) == full[::-1][:limit]
        assert idx.substructure(q, odd, limit=limit) == brute_substructure(q, odd)[:limit]
    assert idx.substructure(q, newest_first=True) == full[::-1]


def test_first_hits_stop_matching_early():
    """A first page of a group every molecule carries matches one chunk, not the whole index."""
    idx = StructureIndex(threads=1)
    idx.chunk = 16
    idx.add_many((i, "c1ccccc1" + "C" * (i % 5)) for i in range(1, 3001))
    calls = []
    for seg in idx._snap[0]:
        original = seg.lib

        class Counting:
            def GetMatches(self, *args, _lib=original, **kw):
                calls.append(1)
                return _lib.GetMatches(*args, **kw)

        object.__setattr__(seg, "lib", Counting())
    assert idx.substructure(parse_query("c1ccccc1"), limit=10) == list(range(1, 11))
    assert len(calls) == 1
    calls.clear()
    assert idx.substructure(parse_query("c1ccccc1"), limit=10, newest_first=True) == list(range(3000, 2990, -1))
    assert len(calls) == 2  # the last segment holds 3000 - 2 * 1024 = 952 ids: its last chunk only 952 % 16 = 8


def test_entries_round_trip_through_the_file(tmp_path):
    idx = StructureIndex()
    idx.add_many(zip(IDS, MOLECULES))
    entries = idx.entries()
    path = tmp_path / "index.bin"
    assert save_entries(path, ((MOLECULES[IDS.index(i)], e) for i, e in entries.items())) == len(MOLECULES)
    known = load_entries(path)
    assert set(known) == set(MOLECULES)
    again = StructureIndex()
    assert again.add_many(zip(IDS, MOLECULES), known=known) == 0  # nothing parsed again
    for smarts in SMARTS_QUERIES:
        q = parse_query(smarts)
        assert again.substructure(q) == idx.substructure(q)
    for smi, e in zip(MOLECULES, (entries[i] for i in IDS)):
        smiles, pattern, morgan, kinds = known[smi]
        assert smiles == e[0] and pattern == e[1] and morgan == e[2] and kinds == e[3]
        assert kinds == element_kinds(Chem.MolFromSmiles(smi))
    probe = Chem.MolFromSmiles(MOLECULES[3])
    assert again.similar(probe, 0.3) == idx.similar(probe, 0.3)
    assert again.add_many([(999, "CCO")], known=known) == 1  # not in the file: computed
    assert 999 in again.substructure(parse_query("[CH3][CH2][OH]"))


def test_a_damaged_or_foreign_file_is_ignored(tmp_path, monkeypatch):
    idx = StructureIndex()
    idx.add_many(zip(IDS[:5], MOLECULES[:5]))
    path = tmp_path / "index.bin"
    save_entries(path, ((MOLECULES[IDS.index(i)], e) for i, e in idx.entries().items()))
    data = bytearray(path.read_bytes())
    assert len(load_entries(path)) == 5
    data[len(data) // 2] ^= 0xFF  # one flipped byte
    (tmp_path / "bad.bin").write_bytes(bytes(data))
    assert load_entries(tmp_path / "bad.bin") == {}
    (tmp_path / "short.bin").write_bytes(b"x")
    assert load_entries(tmp_path / "short.bin") == {}
    assert load_entries(tmp_path / "absent.bin") == {}
    monkeypatch.setattr(search_module, "PATTERN_FP_SIZE", 1024)  # other fingerprint settings: not this file's
    assert load_entries(path) == {}


# --- the element screen (atom kinds before the pattern fingerprint) ----------------------------------

# Beside the test set: an isotope, charges, aliphatic Se and S, a salt, aromatic O and N-H, a dummy-free P.
KIND_EXTRAS = ["[2H]c1ccccc1", "C[Se]C", "CCSCC", "[O-]C(=O)c1ccccc1.[Na+]", "c1ccoc1", "c1cc[nH]c1",
               "CP(C)C", "C[Se][Se]C", "BrCCCl"]
KIND_QUERIES = ["[se]", "[Se]", "S", "s", "[#34]", "[S,Se]", "[se,s]", "[!S]", "[SH]", "[S&!s]", "[#8;R]",
                "[O-]", "[N+]", "[nH]", "Cl", "[Cl,Br]", "C", "c", "o", "[Se;R]", "[#15]", "[2H]", "[#1]", "*",
                "[Na+]", "CC(C)C", "[se]c", "C[Se]", "[Se][Se]", "[#16]~[#6]", "[n,o]", "O", "C1=CC=CC=C1",
                "[$([Se]C)]"]


@pytest.fixture(scope="module")
def kinds_index() -> StructureIndex:
    idx = StructureIndex()
    idx.add_many(zip(range(1, 1 + len(MOLECULES) + len(KIND_EXTRAS)), MOLECULES + KIND_EXTRAS))
    return idx


@pytest.mark.parametrize("text", KIND_QUERIES)
def test_element_screen_keeps_the_brute_force_answer(kinds_index, text):
    # Reference: every molecule parsed from its SMILES and matched, no screen (and no rule of the screen).
    q = read_query(text).mol
    q.UpdatePropertyCache(strict=False)
    everything = MOLECULES + KIND_EXTRAS
    expected = [k for k, smi in enumerate(everything, start=1)
                if Chem.MolFromSmiles(smi).HasSubstructMatch(q, useChirality=False)]
    assert kinds_index.substructure(read_query(text).mol) == expected
    assert kinds_index.substructure(read_query(text).mol, limit=3, newest_first=True) == expected[::-1][:3]
    some = set(range(1, len(everything) + 1, 3))
    assert kinds_index.substructure(read_query(text).mol, some) == [i for i in expected if i in some]


@pytest.mark.parametrize("text, decided, kinds", [
    ("[se]", True, {(34, True)}),
    ("[Se]", True, {(34, False), (34, True)}),  # RDKit reads [Se] in SMARTS as atomic number 34
    ("S", True, {(16, False)}),
    ("[S,Se]", True, {(16, False), (34, False), (34, True)}),
    ("[SH]", False, {(16, False)}),  # the hydrogen count needs the matcher
    ("[S&!s]", False, {(16, False)}),
    ("[!S]", False, None),  # a negation allows every kind
    ("*", False, None),
    ("[$([Se]C)]", False, None),  # recursion: not read
    ("[Se;R]", False, {(34, False), (34, True)}),
    ("C[Se]", False, {(34, False), (34, True)}),  # two atoms need the matcher; per atom the kinds still screen
])
def test_query_kinds_decide_only_one_atom_queries_on_the_kind_of_atom(text, decided, kinds):
    allowed, exact = query_kinds(read_query(text).mol)
    assert exact is decided
    everything = (1 << 256) - 1
    first = allowed[-1]
    if kinds is None:
        assert first == everything
    else:
        assert first == sum(1 << (2 * z + aromatic) for z, aromatic in kinds)


def test_a_decided_query_is_not_matched_atom_by_atom_and_the_screen_narrows_the_rest(kinds_index, monkeypatch):
    calls = []

    class Counting:
        def __init__(self, lib):
            self.lib = lib

        def GetMatches(self, q, start, end, *args, **kwargs):
            calls.append((start, end))
            return self.lib.GetMatches(q, start, end, *args, **kwargs)

    orders = []
    real_searching = search_module._Segment.searching

    def searching(seg, order):
        orders.append(list(order))
        return Counting(real_searching(seg, order))

    monkeypatch.setattr(search_module._Segment, "searching", searching)
    for seg in kinds_index._snap[0]:
        object.__setattr__(seg, "lib", Counting(seg.lib))
    try:
        mols = [Chem.MolFromSmiles(smi) for smi in MOLECULES + KIND_EXTRAS]
        selenium = [k for k, m in enumerate(mols) if any(a.GetAtomicNum() == 34 for a in m.GetAtoms())]
        aromatic_se = [k + 1 for k, m in enumerate(mols) if m.HasSubstructMatch(Chem.MolFromSmarts("[se]"))]
        assert len(aromatic_se) >= 4 and len(selenium) > len(aromatic_se)  # Se bowls, selenophene; C[Se]C not
        assert kinds_index.substructure(parse_query("[se]")) == aromatic_se
        assert calls == [] and orders == []  # answered by the screen alone
        kinds_index.substructure(parse_query("C[Se]"))
        # Only molecules holding Se and an aliphatic carbon are matched (the parent Se bowl and selenophene have none).
        both = [k for k in selenium if any(a.GetAtomicNum() == 6 and not a.GetIsAromatic() for a in mols[k].GetAtoms())]
        assert 0 < len(both) < len(selenium)
        assert orders == [both] and len(calls) == 1
    finally:
        for seg in kinds_index._snap[0]:
            object.__setattr__(seg, "lib", seg.lib.lib)
