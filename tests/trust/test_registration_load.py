"""Registration under concurrency (issue 12, item 17), against a real server on 127.0.0.1.

Eight clients, each with its own write token and httpx.Client, register 500 compounds apiece
at once on a server process (SQLite file and PostgreSQL). Among the registrations, every 25th
request of each client is one that must fail after its structure was parsed (a duplicate
written with another SMILES -> 409, an unknown scaffold -> 422): those must not consume a
number. Afterwards:

* no request was answered 5xx or dropped;
* every 201 carries its own code, and the stored numbers are exactly 1..N (N = the 201s):
  no duplicates and no gap that a failed request left behind;
* batch codes of one compound, added concurrently, are B01..Bk without gaps.

The molecules are distinct by construction: 4-(alkylthio)phenyl alkyl ethers with an optional
ring substituent, (alkoxy carbons, thio carbons, substituent) all different per request.
Bounded: every request has a timeout and the whole run a wall limit.
"""

from __future__ import annotations

import itertools
import re
import threading
import time
from collections import Counter

import httpx
import pytest
import sqlalchemy as sa

from tests.factories import bearer

from .conftest import new_token, seed_batch

CLIENTS = 8
PER_CLIENT = 500
FAIL_EVERY = 25  # request i of a client with i % 25 == 24 is one that must fail
REQUEST_TIMEOUT_S = 60.0
WALL_LIMIT_S = 900.0
SUBSTITUENTS = ("", "F", "Cl", "Br", "C", "C#N", "N", "O", "I", "C(F)(F)F")


def distinct_smiles(k: int) -> str:
    """The k-th molecule of a family of 20 x 20 x 10 = 4000 different ones."""
    n, m, x = k // 200 % 20 + 1, k // 10 % 20 + 1, SUBSTITUENTS[k % 10]
    return f"{'C' * n}Oc1ccc(S{'C' * m})cc1{x}"


def test_the_family_is_distinct():
    from rdkit import Chem

    keys = {Chem.MolToInchiKey(Chem.MolFromSmiles(distinct_smiles(k))) for k in range(4000)}
    assert len(keys) == 4000


@pytest.mark.slow
def test_concurrent_registration_has_no_500s_gaps_or_duplicates(db_url, server_process, engine_for):
    engine = engine_for(db_url)
    url = server_process.start(timeout_s=120)
    tokens = [new_token(engine, "write", f"chemist-pc-{i}") for i in range(CLIENTS)]
    ok: list[str] = []
    failures: list[str] = []
    expected_fail = Counter()
    lock = threading.Lock()
    barrier = threading.Barrier(CLIENTS)
    deadline = time.monotonic() + WALL_LIMIT_S

    def client(c: int) -> None:
        with httpx.Client(base_url=url, timeout=REQUEST_TIMEOUT_S, headers=bearer(tokens[c])) as http:
            barrier.wait(timeout=30)
            for i in range(PER_CLIENT):
                if time.monotonic() > deadline:
                    with lock:
                        failures.append(f"client {c}: wall limit reached at request {i}")
                    return
                k = c * PER_CLIENT + i
                if i % FAIL_EVERY == FAIL_EVERY - 1:
                    # Re-register this client's previous molecule, or name a scaffold nobody made.
                    body = ({"smiles": distinct_smiles(k - 1)} if i % 2 else
                            {"smiles": distinct_smiles(k), "scaffold": "NO-SUCH-CORE"})
                    want = 409 if i % 2 else 422
                else:
                    body, want = {"smiles": distinct_smiles(k), "label": f"load {c}-{i}"}, 201
                try:
                    r = http.post("/api/v1/compounds", json=body)
                except httpx.HTTPError as exc:
                    with lock:
                        failures.append(f"client {c} request {i}: {type(exc).__name__}: {exc}")
                    continue
                with lock:
                    if r.status_code != want:
                        failures.append(f"client {c} request {i}: {r.status_code} {r.text[:200]}")
                    elif want == 201:
                        ok.append(r.json()["code"])
                    else:
                        expected_fail[want] += 1

    threads = [threading.Thread(target=client, args=(c,), daemon=True) for c in range(CLIENTS)]
    t0 = time.perf_counter()
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=max(0.1, deadline - time.monotonic()))
    wall = time.perf_counter() - t0
    assert not any(t.is_alive() for t in threads), f"registrations still running after {WALL_LIMIT_S} s"
    print(f"\n{len(ok)} registrations, {sum(expected_fail.values())} refused as intended, {wall:.1f} s")
    assert not failures, f"{len(failures)} unexpected answers, e.g. {failures[:5]}\n{server_process.output()}"

    assert len(ok) == len(set(ok)) == CLIENTS * (PER_CLIENT - PER_CLIENT // FAIL_EVERY)
    with engine.connect() as conn:
        numbers = sorted(conn.execute(sa.text("SELECT number FROM compound")).scalars().all())
    assert numbers == list(range(1, len(ok) + 1))  # no gaps, no duplicates
    assert sorted(int(re.search(r"(\d+)$", code).group(1)) for code in ok) == numbers


@pytest.mark.slow
def test_concurrent_batches_of_one_compound_are_numbered_without_gaps(db_url, server_process, engine_for, settings):
    engine = engine_for(db_url)
    code, _ = seed_batch(engine, settings)
    url = server_process.start(timeout_s=120)
    token = new_token(engine, "write", "bench-pc")
    per, threads_n = 15, 6
    got: list[str] = []
    failures: list[str] = []
    barrier = threading.Barrier(threads_n)
    lock = threading.Lock()
    n = itertools.count()

    def one() -> None:
        with httpx.Client(base_url=url, timeout=REQUEST_TIMEOUT_S, headers=bearer(token)) as http:
            barrier.wait(timeout=30)
            for _ in range(per):
                # Every 5th asks for a state that does not exist: refused, and it takes no number.
                bad = next(n) % 5 == 4
                r = http.post(f"/api/v1/compounds/{code}/batches",
                              json={"chemist": "lab", "state": "molten" if bad else "made"})
                with lock:
                    if r.status_code != (422 if bad else 201):
                        failures.append(f"{r.status_code} {r.text[:200]}")
                    elif not bad:
                        got.append(r.json()["code"])

    threads = [threading.Thread(target=one, daemon=True) for _ in range(threads_n)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert not any(t.is_alive() for t in threads)
    assert not failures, failures[:5]
    # B01 came from seed_batch; the concurrent ones follow it without gaps or repeats.
    assert sorted(got) == [f"{code}-B{i:02d}" for i in range(2, len(got) + 2)]
