"""Benchmark: structure search, the in-process index against a plain RDKit loop, and the cartridge.

Molecules: the invented bowl library of :mod:`bench.seed` (three bridged bowls, six rim
positions, alkoxy/alkylthio/alkyl chains linear and branched), ids 1..N; the first 10 000
are the compounds of the registry benchmark.

1. In process, 10 000 and 30 000 molecules (100 000 with ``--large``; 2 000 and 5 000 with
   ``--quick``): ``server.chem.search.StructureIndex.substructure`` (RDKit SubstructLibrary:
   pattern-fingerprint screen, then multi-threaded matching of the survivors parsed from
   trusted SMILES) against a Python loop of ``HasSubstructMatch(useChirality=False)`` over
   pre-parsed RDKit molecules, for queries a chemist of the campaign asks (a Se bridge, a
   whole bowl core, a 2-ethylhexyloxy chain, a dodecylthio chain, a nitrile that none has).
   Figure: speed-up loop/index; target (issue 21) >= 2 (the index at most 0.5x the loop) for
   any query, >= 20 for groups that fewer than 1 % of the molecules carry.
   First page: ``substructure(q, limit=50)`` against the whole loop (what a first page cost when
   the whole answer was computed first; target >= 2) and against a loop that stops at 50 hits
   (reported).
   Memory: resident-size growth of a fresh process while it builds an index of 10 000
   molecules, per molecule (target <= 5 KB); build time per 100 000 molecules (target 10 s),
   and the start-up from the index file (``save_entries``/``load_entries``) per 100 000.
   Holders: RDKit's trusted-SMILES, binary-pickle (pickles of sanitised molecules, and of molecules
   parsed as the trusted-SMILES holder parses them) and parsed-molecule holders behind the same
   screen, memory per molecule and matching time of the query set.
   Similarity at Tanimoto >= 0.7 (Morgan radius-2 count vectors, as the index):
   ``StructureIndex.similar`` against a loop of ``DataStructs.TanimotoSimilarity`` over
   pre-computed fingerprints (no agreed target; reported).
2. PostgreSQL with the RDKit cartridge, 10 000 compounds: ``server.services.search.search``
   on a scratch database (cartridge back end) against the same call on the seeded SQLite
   registry (in-process back end), same molecules and ids. Figure: time cartridge /
   in-process (reported; no agreed target). The scratch database is dropped afterwards.

Every pair of answers is checked to be the same hits.
"""

from __future__ import annotations

import os
import secrets
import subprocess
import sys
import time
from typing import Callable

from rdkit import Chem, DataStructs
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url
from sqlalchemy.exc import OperationalError
from sqlmodel import Session

from server.chem.search import PATTERN_FP_SIZE, StructureIndex, fingerprint, read_query
from server.db import make_engine, upgrade
from server.settings import Settings

from . import seed
from .common import Row, Section, fmt_s, paired, repeat

# (label, query text as a chemist types it)
SUBSTRUCTURE_QUERIES: tuple[tuple[str, str], ...] = (
    ("Se bridge [se]", "[se]"),
    ("selenium, any [Se]", "[Se]"),
    ("aliphatic sulfur S", "S"),
    ("S-bridged bowl core", "s1c2ccc3sc4ccc5sc6ccc1c1c2c3c4c5c61"),
    ("2-ethylhexyloxy cOCC(CC)CCCC", "cOCC(CC)CCCC"),
    ("dodecylthio cSCCCCCCCCCCCC", "cSCCCCCCCCCCCC"),
    ("nitrile C#N (absent)", "C#N"),
)
SIMILARITY_THRESHOLD = 0.7
SIMILARITY_QUERY_ID = 123  # a registered compound: "more like this one"
BENCH_BUDGET_S = 600.0  # seconds of matching allowed per search here (the app's default is MATCH_BUDGET_S)
FIRST_PAGE = 50  # the registry's page size
PG_URL = os.environ.get("REMANENCE_BENCH_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")



def _screen_fp(query: Chem.Mol):
    """The query's pattern fingerprint as the index's screen makes it (valences of a SMARTS query filled in)."""
    q = Chem.Mol(query)
    q.UpdatePropertyCache(strict=False)
    return Chem.PatternFingerprint(q, fpSize=PATTERN_FP_SIZE)


def _loop_substructure(ids: list[int], mols: list[Chem.Mol], query: Chem.Mol) -> Callable[[], list[int]]:
    def loop() -> list[int]:
        return [i for i, m in zip(ids, mols) if m.HasSubstructMatch(query, useChirality=False)]

    return loop


def _loop_first(ids: list[int], mols: list[Chem.Mol], query: Chem.Mol, limit: int) -> Callable[[], list[int]]:
    def loop() -> list[int]:
        hits = []
        for i, m in zip(ids, mols):
            if m.HasSubstructMatch(query, useChirality=False):
                hits.append(i)
                if len(hits) == limit:
                    break
        return hits

    return loop


def _loop_similarity(ids: list[int], fps: list, query: Chem.Mol, threshold: float) -> Callable[[], list]:
    def loop() -> list[tuple[int, float]]:
        q = fingerprint(query)
        hits = []
        for i, fp in zip(ids, fps):
            s = DataStructs.TanimotoSimilarity(q, fp)
            if s >= threshold:
                hits.append((i, s))
        hits.sort(key=lambda h: (-h[1], h[0]))
        return hits

    return loop


def in_process(section: Section, sizes: list[int], rounds: int, index: StructureIndex, held: int,
               budget_s: float) -> None:
    """Index against plain loop at each size; ``index`` already holds library molecules 1..``held``."""
    library = seed.molecule_library(max(sizes))
    queries = [(label, read_query(q, kind="substructure").mol) for label, q in SUBSTRUCTURE_QUERIES]
    sim_query = Chem.MolFromSmiles(library[SIMILARITY_QUERY_ID - 1][1])
    if len(index) != held or index.ids() != set(range(1, held + 1)):
        raise RuntimeError(f"the registry's structure index should hold compounds 1..{held}, holds {len(index)}")
    ids: list[int] = []
    mols: list[Chem.Mol] = []
    fps: list = []
    by_size: dict[int, dict[str, tuple[float, float]]] = {}
    for size in sizes:
        start = len(ids)
        if size > held:
            new = [(i, smi) for i, (_, smi) in enumerate(library[held:size], start=held + 1)]
            t0 = time.perf_counter()
            index.add_many(new)
            section.details.append(f"Index grown {held} -> {size} molecules: "
                                   f"{fmt_s((time.perf_counter() - t0) / len(new))}/molecule (SMILES parse, Morgan "
                                   "and pattern fingerprints, pickle).")
            held = size
        t0 = time.perf_counter()
        for i, (_, smi) in enumerate(library[start:size], start=start + 1):
            mol = Chem.MolFromSmiles(smi)
            ids.append(i)
            mols.append(mol)
            fps.append(fingerprint(mol))
        section.details.append(f"{size} molecules for the plain loops: parse + Morgan "
                               f"{fmt_s((time.perf_counter() - t0) / (size - start))}/molecule.")
        by_size[size] = {}
        for label, q in queries:
            fast, slow = (lambda q=q: index.substructure(q)), _loop_substructure(ids, mols, q)
            hits = fast()
            if hits != slow():
                raise RuntimeError(f"index and plain loop disagree on {label} at {size} molecules")
            t_fast, t_slow = paired(fast, slow, rounds=rounds, budget_s=budget_s)
            by_size[size][label] = (t_fast.median_s, t_slow.median_s)
            rare = len(hits) < 0.01 * size
            section.rows.append(Row(
                benchmark=f"substructure {label}, {size // 1000}k mols, {len(hits)} hits (loop / index)",
                measured=fmt_s(t_fast.median_s), baseline=fmt_s(t_slow.median_s),
                ratio=t_slow.median_s / t_fast.median_s, target=(">=", 20.0 if rare else 2.0)))
        for label, q in queries:
            first = lambda q=q: index.substructure(q, limit=FIRST_PAGE)  # noqa: E731
            whole = _loop_substructure(ids, mols, q)
            early = _loop_first(ids, mols, q, FIRST_PAGE)
            page = first()
            if page != early() or page != whole()[:FIRST_PAGE]:
                raise RuntimeError(f"index and plain loop disagree on the first page of {label} at {size} molecules")
            t_first, t_whole = paired(first, whole, rounds=rounds, budget_s=budget_s)
            _, t_early = paired(first, early, rounds=rounds, budget_s=budget_s)
            section.rows.append(Row(
                benchmark=f"first page (limit={FIRST_PAGE}) {label}, {size // 1000}k mols (whole loop / index)",
                measured=fmt_s(t_first.median_s), baseline=fmt_s(t_whole.median_s),
                ratio=t_whole.median_s / t_first.median_s, target=(">=", 2.0)))
            section.rows.append(Row(
                benchmark=f"first page (limit={FIRST_PAGE}) {label}, {size // 1000}k mols (loop stopping at "
                          f"{FIRST_PAGE} hits / index)",
                measured=fmt_s(t_first.median_s), baseline=fmt_s(t_early.median_s),
                ratio=t_early.median_s / t_first.median_s, target=None))
        fast = lambda: index.similar(sim_query, SIMILARITY_THRESHOLD)  # noqa: E731
        slow = _loop_similarity(ids, fps, sim_query, SIMILARITY_THRESHOLD)
        hits = fast()
        if [h[0] for h in hits] != [h[0] for h in slow()]:
            raise RuntimeError(f"index and plain loop disagree on similarity at {size} molecules")
        t_fast, t_slow = paired(fast, slow, rounds=rounds, budget_s=budget_s)
        by_size[size]["similarity"] = (t_fast.median_s, t_slow.median_s)
        section.rows.append(Row(
            benchmark=f"similarity Tanimoto >= {SIMILARITY_THRESHOLD}, {size // 1000}k mols, {len(hits)} hits "
                      "(loop / index)",
            measured=fmt_s(t_fast.median_s), baseline=fmt_s(t_slow.median_s),
            ratio=t_slow.median_s / t_fast.median_s, target=None))
    _screen_report(section, mols[:2000], queries, by_size[sizes[0]], sizes[0])
    if len(sizes) > 1:
        lo, hi = sizes[0], sizes[-1]
        parts = [f"{label}: index x{by_size[hi][label][0] / by_size[lo][label][0]:.2f}, "
                 f"loop x{by_size[hi][label][1] / by_size[lo][label][1]:.2f}" for label in by_size[lo]]
        section.details.append(f"Scaling {lo} -> {hi} molecules (x{hi / lo:g} molecules; time grows by): "
                               + "; ".join(parts) + ".")


def _screen_report(section: Section, sample: list[Chem.Mol], queries, times: dict[str, tuple[float, float]],
                   size: int) -> None:
    """What dominates the index's time: how many molecules pass its screen, and what each survivor costs."""
    patterns = [Chem.PatternFingerprint(m, fpSize=PATTERN_FP_SIZE) for m in sample]
    trusted = [Chem.MolToSmiles(m) for m in sample]

    def parse_trusted():
        out = []
        for smi in trusted:
            m = Chem.MolFromSmiles(smi, sanitize=False)
            m.UpdatePropertyCache(strict=False)
            Chem.FastFindRings(m)
            out.append(m)
        return out

    t_unpickle = repeat(parse_trusted, times=3, warmup=0).median_s / len(trusted)
    notes = []
    for label, q in queries:
        qfp = _screen_fp(q)
        passed = sum(DataStructs.AllProbeBitsMatch(qfp, fp) for fp in patterns)
        notes.append(f"{label}: {100 * passed / len(sample):.0f}% pass the screen, loop "
                     f"{fmt_s(times[label][1] / size)}/molecule")
    section.details.append(
        f"Where the index's time goes: every molecule that passes the {PATTERN_FP_SIZE}-bit pattern-fingerprint "
        f"screen is parsed from its trusted SMILES (about {fmt_s(t_unpickle)} each, without sanitising) before "
        f"matching; on a "
        f"{len(sample)}-molecule sample: " + "; ".join(notes) + ".")


_MEMORY_PROBE = """
import gc, sys, time
from bench import seed
from server.chem.search import StructureIndex
def rss():
    with open('/proc/self/statm') as f:
        return int(f.read().split()[1]) * 4096
n = int(sys.argv[1])
rows = [(i + 1, smi) for i, (_, smi) in enumerate(seed.molecule_library(n))]
gc.collect(); before = rss(); t0 = time.perf_counter()
index = StructureIndex(); index.add_many(rows)
elapsed = time.perf_counter() - t0; gc.collect()
grown = rss() - before
import tempfile, pathlib
from server.chem.search import load_entries, save_entries
path = pathlib.Path(tempfile.mkdtemp()) / "index.bin"
entries = index.entries()
t0 = time.perf_counter(); save_entries(path, ((smi, entries[i]) for i, smi in rows)); saved = time.perf_counter() - t0
del entries, index; gc.collect()
t0 = time.perf_counter(); again = StructureIndex(); computed = again.add_many(rows, known=load_entries(path))
loaded = time.perf_counter() - t0
assert computed == 0 and len(again) == n
print(grown, elapsed, n, saved, loaded, path.stat().st_size)
path.unlink()
"""

_HOLDER_PROBE = """
import gc, sys, time
from rdkit import Chem
from rdkit.Chem import rdSubstructLibrary as SL
from bench import seed
from bench.bench_search import SUBSTRUCTURE_QUERIES
from server.chem.search import PATTERN_FP_SIZE, read_query
def rss():
    with open('/proc/self/statm') as f:
        return int(f.read().split()[1]) * 4096
kind, n, threads = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
smiles = [Chem.MolToSmiles(Chem.MolFromSmiles(smi)) for _, smi in seed.molecule_library(n)]
patterns = [SL.PatternHolder(PATTERN_FP_SIZE).MakeFingerprint(Chem.MolFromSmiles(s)) for s in smiles]
queries = [read_query(q).mol for _, q in SUBSTRUCTURE_QUERIES]
for q in queries:
    q.UpdatePropertyCache(strict=False)
gc.collect(); before = rss()
if kind == "trusted":
    holder = SL.CachedTrustedSmilesMolHolder()
    for s in smiles:
        holder.AddSmiles(s)
elif kind == "binary":
    holder = SL.CachedMolHolder()
    for s in smiles:
        holder.AddBinary(Chem.MolFromSmiles(s).ToBinary(Chem.PropertyPickleOptions.NoProps))
elif kind == "binary-trusted":
    holder = SL.CachedMolHolder()
    for s in smiles:
        m = Chem.MolFromSmiles(s, sanitize=False); m.UpdatePropertyCache(strict=False); Chem.FastFindRings(m)
        holder.AddBinary(m.ToBinary(Chem.PropertyPickleOptions.NoProps))
else:
    holder = SL.MolHolder()
    for s in smiles:
        holder.AddMol(Chem.MolFromSmiles(s))
gc.collect(); grown = rss() - before
screen = SL.PatternHolder(PATTERN_FP_SIZE)
for fp in patterns:
    screen.AddFingerprint(fp)
lib = SL.SubstructLibrary(holder, screen)
params = Chem.SubstructMatchParameters(); params.useChirality = False
best = []
for q in queries:
    times = []
    for _ in range(3):
        t0 = time.perf_counter(); lib.GetMatches(q, params, numThreads=threads, maxResults=-1)
        times.append(time.perf_counter() - t0)
    best.append(sorted(times)[1])
print(grown, sum(best))
"""


def memory(section: Section, n: int) -> None:
    """Resident-size growth of a fresh process while it builds an index of ``n`` molecules."""
    proc = subprocess.run([sys.executable, "-c", _MEMORY_PROBE, str(n)], capture_output=True, text=True,
                          cwd=os.path.dirname(os.path.dirname(os.path.abspath(__file__))), check=True)
    grown_b, build_s, held, save_s, load_s, file_b = proc.stdout.split()
    per_mol = int(grown_b) / int(held)
    section.rows.append(Row(
        benchmark=f"in-process index memory: resident-size growth per molecule, {int(held)} molecules (/ 5 KB)",
        measured=f"{per_mol / 1024:.2f} KB", baseline="5 KB", ratio=per_mol / 5120, target=("<=", 1.0)))
    per_100k = float(build_s) / int(held) * 100_000
    section.rows.append(Row(
        benchmark="in-process index build, extrapolated to 100 000 molecules (/ 10 s)",
        measured=f"{per_100k:.0f} s", baseline="10 s", ratio=per_100k / 10.0, target=("<=", 1.0)))
    load_100k = float(load_s) / int(held) * 100_000
    section.rows.append(Row(
        benchmark="in-process index start-up from its file in the data directory, extrapolated to 100 000 "
                  "molecules (/ 10 s)",
        measured=f"{load_100k:.1f} s", baseline="10 s", ratio=load_100k / 10.0, target=("<=", 1.0)))
    section.details.append(
        f"Index file: {int(file_b) / int(held):.0f} bytes/molecule, written in {float(save_s):.2f} s and read back "
        f"into a fresh index in {float(load_s):.2f} s for {held} molecules (nothing parsed or fingerprinted).")
    section.details.append(
        f"Index build: {fmt_s(float(build_s) / int(held))}/molecule, almost all of it RDKit work per molecule "
        "(SMILES parse and sanitisation, canonical SMILES, the 2048-bit pattern fingerprint, Morgan); the segments "
        "themselves cost microseconds per molecule.")


def holders(section: Section, n: int, threads: int) -> None:
    """RDKit's molecule holders for a SubstructLibrary: memory per molecule and matching time, same screen."""
    measured = {}
    for kind in ("trusted", "binary", "binary-trusted", "parsed"):
        proc = subprocess.run([sys.executable, "-c", _HOLDER_PROBE, kind, str(n), str(threads)], capture_output=True,
                              text=True, cwd=os.path.dirname(os.path.dirname(os.path.abspath(__file__))), check=True)
        grown_b, match_s = proc.stdout.split()
        measured[kind] = (int(grown_b) / n, float(match_s))
    names = {"trusted": "CachedTrustedSmilesMolHolder (canonical SMILES, parsed without sanitising)",
             "binary": "CachedMolHolder (binary pickles of sanitised molecules, SSSR rings)",
             "binary-trusted": "CachedMolHolder (binary pickles of trusted-parsed molecules, fast rings)",
             "parsed": "MolHolder (parsed molecules)"}
    for kind, (per_mol, match_s) in measured.items():
        section.rows.append(Row(
            benchmark=f"holder {names[kind]}, {n // 1000}k mols: memory per molecule (/ 5 KB)",
            measured=f"{per_mol / 1024:.2f} KB", baseline="5 KB", ratio=per_mol / 5120, target=("<=", 1.0)))
        section.rows.append(Row(
            benchmark=f"holder {names[kind]}, {n // 1000}k mols: the {len(SUBSTRUCTURE_QUERIES)} queries "
                      "(trusted-SMILES holder / this)",
            measured=fmt_s(match_s), baseline=fmt_s(measured["trusted"][1]),
            ratio=measured["trusted"][1] / match_s, target=None))
    section.details.append(
        f"Holders: the same {PATTERN_FP_SIZE}-bit pattern screen, GetMatches on {threads} threads, each query the "
        "median of 3; memory is the resident-size growth while the holder alone is filled. A pickle of a sanitised "
        "molecule carries its SSSR ring information, which is slow to read back; a pickle of a molecule parsed "
        "as the trusted-SMILES holder parses it (no sanitising, fast ring finding) reads back faster, but matching "
        "through it was at best about 1.2x faster than through the SMILES (paired, in one process) and it adds "
        "about 1 KB per molecule. The index uses the trusted-SMILES holder (bench/RESULTS.md, 2026-12-04 "
        "holders).")


def _scratch_database(admin_url: str) -> tuple[str, Callable[[], None]]:
    """Create an empty database next to ``admin_url``'s; returns its URL and a function that drops it."""
    name = f"remanence_bench_{os.getpid()}_{secrets.token_hex(3)}"
    admin = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    url = make_url(admin_url).set(database=name).render_as_string(hide_password=False)

    def drop() -> None:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()

    return url, drop


def cartridge(section: Section, lite, records: list[dict], tables: dict, n: int, rounds: int,
              budget_s: float) -> None:
    """Service-level search: cartridge on a scratch PostgreSQL database against in-process on the SQLite registry."""
    from server.services import search as search_service

    label = f"PostgreSQL cartridge vs in-process, {n // 1000}k compounds"
    try:
        probe = create_engine(PG_URL)
        with probe.connect() as conn:
            has_rdkit = conn.execute(text("SELECT 1 FROM pg_available_extensions WHERE name = 'rdkit'")).first()
        probe.dispose()
    except OperationalError as exc:  # no server to measure: said in the report, not hidden
        section.rows.append(Row(label, "—", "—", None, verdict_override="not available"))
        section.details.append(f"PostgreSQL at {make_url(PG_URL).render_as_string()} not reachable: "
                               f"{type(exc).__name__}: {str(exc).strip().splitlines()[0]}")
        return
    if has_rdkit is None:
        section.rows.append(Row(label, "—", "—", None, verdict_override="not available"))
        section.details.append("PostgreSQL has no rdkit extension (Debian package postgresql-15-rdkit).")
        return
    url, drop = _scratch_database(PG_URL)
    pg = None
    try:
        upgrade(url)
        pg = make_engine(url)
        seed.insert_tables(pg, tables, only=("scaffold", "compound"))
        t0 = time.perf_counter()
        with pg.begin() as conn:
            # As migrations 0004 and 0021 backfill: the molecule and its Morgan count fingerprint.
            conn.execute(text(
                "INSERT INTO compound_structure (compound_id, m, mcfp) SELECT s.id, s.m, morgan_fp(s.m, 2) "
                "FROM (SELECT id, mol_from_smiles(smiles::cstring) AS m FROM compound) AS s"))
        t_fill = time.perf_counter() - t0
        with pg.connect() as conn:
            conn.execute(text("ANALYZE"))
            conn.commit()
        with Session(pg) as s_pg:
            if search_service.backend(s_pg) != search_service.CARTRIDGE:
                raise RuntimeError("the scratch PostgreSQL database did not get the cartridge back end")
        section.details.append(f"Cartridge: {n} structures loaded with mol_from_smiles + morgan_fp and "
                               f"GiST-indexed in {t_fill:.1f} s.")

        def via(engine, **kw):
            def call():
                with Session(engine) as session:
                    # The per-request time budget is lifted: this measures what a search costs.
                    return [(h.code, None if h.similarity is None else round(h.similarity, 12))
                            for h in search_service.search(session, budget_s=BENCH_BUDGET_S, **kw)]
            return call

        cases = [(lbl, {"substructure": q}) for lbl, q in SUBSTRUCTURE_QUERIES]
        cases.append((f"similarity >= {SIMILARITY_THRESHOLD}",
                      {"similar": records[SIMILARITY_QUERY_ID - 1]["smiles"], "threshold": SIMILARITY_THRESHOLD}))
        for lbl, kw in cases:
            cart, inproc = via(pg, **kw), via(lite, **kw)
            hits = cart()
            if hits != inproc():
                raise RuntimeError(f"cartridge and in-process search disagree on {lbl}")
            t_cart, t_in = paired(cart, inproc, rounds=rounds, budget_s=budget_s)
            section.rows.append(Row(
                benchmark=f"search service {lbl}, {n // 1000}k compounds, {len(hits)} hits (cartridge / in-process)",
                measured=fmt_s(t_cart.median_s), baseline=fmt_s(t_in.median_s),
                ratio=t_cart.median_s / t_in.median_s, target=None))
    finally:
        if pg is not None:
            pg.dispose()
        drop()
    section.details.append("Cartridge rows time server.services.search.search end to end (query parse, SQL with "
                           "the compound join; or index + code lookup); ratio > 1: the cartridge is slower.")


def run(quick: bool = False, large: bool = False, service: bool = True, sizes: list[int] | None = None) -> Section:
    """The search benchmarks; ``service=False`` leaves out the seeded registry and the cartridge comparison.

    ``sizes`` (ascending) replaces the in-process sizes of ``quick``/``large`` (e.g. 5 000 and 10 000 on a
    shared machine)."""
    from server.services import search as search_service

    section = Section("search")
    if sizes is None:
        sizes = [2_000, 5_000] if quick else [10_000, 30_000]
        if large and not quick:
            sizes.append(100_000)
    rounds, budget_s = (5, 3.0) if quick else (7, 5.0)
    n, m = (2_000, 10_000) if quick else (10_000, 50_000)
    if not service:
        index = StructureIndex()
        in_process(section, sizes, rounds, index, 0, budget_s)
        memory(section, 2_000 if quick else 10_000)
        holders(section, 2_000 if quick else 10_000, index.threads)
        section.details.append("Run without the seeded registry (service=False): no service or cartridge rows.")
        return section
    sqlite = seed.seeded_sqlite(n, m)
    records = seed.compound_records(n)
    lite = make_engine(sqlite.url)
    try:
        with Session(lite) as session:
            if search_service.backend(session) != search_service.IN_PROCESS:
                raise RuntimeError("the SQLite registry did not get the in-process back end")
            t0 = time.perf_counter()
            index = search_service.structure_index(session)
            t_build = time.perf_counter() - t0
        section.details.append(f"The registry's in-process index ({n} compounds, built on first search by "
                               f"server.services.search): {t_build:.1f} s, {fmt_s(t_build / n)}/molecule.")
        service_rows = Section("search")
        cartridge(service_rows, lite, records, seed.registry_rows(records, m, Settings()), n, rounds, budget_s)
        # Growing the index past the registry (ids no compound has) must wait until the service
        # comparison is done; its rows still come after the in-process ones in the table.
        in_process(section, sizes, rounds, index, n, budget_s)
        memory(section, 2_000 if quick else 10_000)
        holders(section, 2_000 if quick else 10_000, index.threads)
        section.rows.extend(service_rows.rows)
        section.details.extend(service_rows.details)
    finally:
        lite.dispose()
    return section


if __name__ == "__main__":  # python -m bench.bench_search [--quick] [--large] [--no-service]
    import argparse

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--large", action="store_true")
    parser.add_argument("--no-service", action="store_true", help="in-process rows only (no seeded registry)")
    parser.add_argument("--sizes", help="in-process sizes, comma-separated (e.g. 5000,10000)")
    args = parser.parse_args()
    chosen = None if not args.sizes else sorted(int(x) for x in args.sizes.split(","))
    result = run(quick=args.quick, large=args.large, service=not args.no_service, sizes=chosen)
    print("| benchmark | measured | baseline | ratio | target |")
    print("|---|---|---|---|---|")
    for row in result.rows:
        ratio = "—" if row.ratio is None else f"{row.ratio:.3g}"
        target = "—" if row.target is None else f"{row.target[0]} {row.target[1]:g}"
        print(f"| {row.benchmark} | {row.measured} | {row.baseline} | {ratio} | {target} |")
    for line in result.details:
        print(f"- {line}")
