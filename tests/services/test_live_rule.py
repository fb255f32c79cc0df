"""One rule for what counts (models.live_measurement): a measurement is live only when it, its sample, its
batch and its compound are live. Archiving a batch withdraws its evidence from the tiles, the measurement
lists, the verdict and the CompoundStats row; restoring brings it back; nothing is deleted.

Several batches per compound, heating runs at two temperatures; the tiles are checked against a pandas
computation straight from the stored tables (SQLite and PostgreSQL)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.models import (AuditEvent, BarrierEstimate, Batch, Compound, CompoundStats, Measurement, Sample,
                           is_live, live_measurement)
from server.synth.ferro import miller_loop
from server.verdict_codes import HITS, UNTESTED
from tests.factories import bearer, login_as, make_token, soup

# Invented test ethers.
SMILES = {"two_batches": "COc1ccc(OCCCCCCCCC)cc1OC", "one_batch": "COc1ccc(OCCCCCCCCCC)cc1OC"}


def _loop(pr_uC_cm2: float, t_K: float, seed: int) -> bytes:
    # a saturated switching loop (synth/ferro.miller_loop: Ps 10, Pr, Ec 50 kV/cm, Emax 300 kV/cm), 2 % noise of Ps
    loop = miller_loop(10, pr_uC_cm2, 50, 300, noise_uC_cm2=0.2, rng=np.random.default_rng(seed))
    return to_csv_bytes(loop, {"temperature": f"{t_K:g} K"})


def _upload(client, h, batch: str, kind: str, raw: bytes, name: str) -> int:
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind}, files={"file": (name, raw)}, headers=h)
    assert r.status_code == 201, r.text
    return r.json()["id"]


def _tiles(client) -> dict[str, int]:
    page = soup(client.get("/status").text)
    return {t["data-tile"]: int(t.find("span").text) for t in page.select(".tile")}


def _reference(session) -> dict[str, int]:
    """measured and switching recomputed with pandas from the stored rows (not through services)."""
    conn = session.connection()
    compounds = pd.read_sql(select(Compound.id, Compound.archived, Compound.verdict_code, Compound.override_code), conn)
    batches = pd.read_sql(select(Batch.id, Batch.compound_id, Batch.archived), conn)
    samples = pd.read_sql(select(Sample.id, Sample.archived), conn)
    ms = pd.read_sql(select(Measurement.batch_id, Measurement.sample_id, Measurement.archived,
                            Measurement.superseded_by_id), conn)
    live_c = compounds[~compounds["archived"].astype(bool)].copy()
    live_b = batches[~batches["archived"].astype(bool) & batches["compound_id"].isin(live_c["id"])]
    live_s = samples.loc[~samples["archived"].astype(bool), "id"]
    live_ms = ms[~ms["archived"].astype(bool) & ms["superseded_by_id"].isna() & ms["sample_id"].isin(live_s)]
    measured = set(live_ms.merge(live_b, left_on="batch_id", right_on="id")["compound_id"])
    live_c["effective"] = live_c["override_code"].fillna(live_c["verdict_code"])
    return {"measured": len(measured), "switching": int(live_c["effective"].isin(HITS).sum())}


def test_archiving_a_batch_withdraws_its_evidence_everywhere_and_restoring_brings_it_back(client, session):
    h = bearer(make_token(session, scope="write"))
    codes = {role: client.post("/api/v1/compounds", json={"smiles": smi, "label": role}, headers=h).json()["code"]
             for role, smi in SMILES.items()}

    def batch(role: str) -> str:
        r = client.post(f"/api/v1/compounds/{codes[role]}/batches", json={"state": "made"}, headers=h)
        assert r.status_code == 201, r.text
        return r.json()["code"]

    b1, b2 = batch("two_batches"), batch("two_batches")
    kept = [_upload(client, h, b1, "pe_loop", _loop(6.0, t, seed=i), f"b1_{t}.csv") for i, t in enumerate((300, 320))]
    withdrawn = [_upload(client, h, b2, "pe_loop", _loop(9.0, t, seed=10 + i), f"b2_{t}.csv")
                 for i, t in enumerate((300, 320))]
    rates = KINDS["nmr_rates"].example()
    withdrawn.append(_upload(client, h, b2, "nmr_rates", rates.raw, rates.filename))
    only = batch("one_batch")
    _upload(client, h, only, "pe_loop", _loop(5.0, 300, seed=20), "only.csv")
    _upload(client, h, only, "pe_loop", _loop(5.0, 320, seed=21), "only_320.csv")
    login_as(client, session)

    def state(role: str):
        session.expire_all()
        c = session.exec(select(Compound).where(Compound.code == codes[role])).one()
        return c, session.get(CompoundStats, c.id)

    two, stats = state("two_batches")
    assert stats.n_measurements == 5 and stats.pr_max_uC_cm2 > 8  # B02's loops (Pr about 9) are the largest
    assert stats.barrier_measured_kcal_mol is not None
    before_tiles = _tiles(client)
    assert {k: before_tiles[k] for k in ("measured", "switching")} == _reference(session) == {"measured": 2, "switching": 2}
    one_verdict = state("one_batch")[0].verdict_code
    assert one_verdict in HITS

    # archive one batch of the first compound and the only batch of the second
    for b in (b2, only):
        assert client.post(f"/api/v1/batches/{b}/archive", headers=h).status_code == 200
    two, stats = state("two_batches")
    assert stats.n_measurements == 2 and stats.pr_max_uC_cm2 < 7  # only B01's loops (Pr about 6) count now
    assert stats.barrier_measured_kcal_mol is None  # the rate table's barrier row follows its batch
    assert session.exec(select(BarrierEstimate).where(BarrierEstimate.measurement_id == withdrawn[-1])).one().archived
    used = {u["measurement_id"] for u in two.verdict["used"]}
    assert used and used <= set(kept)  # the verdict reads B01's evidence only
    one, one_stats = state("one_batch")
    assert one.verdict_code == UNTESTED and one_stats.n_measurements == 0 and one_stats.pr_max_uC_cm2 is None
    tiles = _tiles(client)
    assert {k: tiles[k] for k in ("measured", "switching")} == _reference(session) == {"measured": 1, "switching": 1}
    # the verdict change is in the history, and nothing was deleted: the measurements stay readable
    changes = session.exec(select(AuditEvent).where(AuditEvent.action == "verdict.change",
                                                    AuditEvent.entity_code == codes["one_batch"])).all()
    assert changes[-1].after["code"] == UNTESTED and changes[-1].before["code"] == one_verdict
    for mid in withdrawn:
        assert client.get(f"/api/v1/measurements/{mid}", headers=h).status_code == 200
        m = session.get(Measurement, mid)
        assert not m.archived and not is_live(session, m)
    listed = client.get(f"/api/v1/measurements?compound={codes['two_batches']}", headers=h).json()
    assert sorted(m["id"] for m in listed["items"]) == sorted(kept)
    counted = session.exec(select(Measurement.id).where(live_measurement(), Measurement.id.in_(kept + withdrawn))).all()
    assert sorted(counted) == sorted(kept)

    # restore: everything counts again, as before
    for b in (b2, only):
        assert client.post(f"/api/v1/batches/{b}/restore", headers=h).status_code == 200
    two, stats = state("two_batches")
    assert stats.n_measurements == 5 and stats.pr_max_uC_cm2 > 8 and stats.barrier_measured_kcal_mol is not None
    one, _ = state("one_batch")
    assert one.verdict_code == one_verdict
    assert _tiles(client) == before_tiles


def test_archiving_a_compound_withdraws_its_measurements_and_restoring_brings_them_back(client, session):
    h = bearer(make_token(session, scope="write"))
    code = client.post("/api/v1/compounds", json={"smiles": "COc1ccc(OCCCCCCCCCCC)cc1OC"}, headers=h).json()["code"]
    b = client.post(f"/api/v1/compounds/{code}/batches", json={"state": "made"}, headers=h).json()["code"]
    ids = [_upload(client, h, b, "pe_loop", _loop(6.0, t, seed=30 + i), f"l{t}.csv") for i, t in enumerate((300, 320))]
    c = session.exec(select(Compound).where(Compound.code == code)).one()
    verdict = c.verdict_code
    assert verdict in HITS
    assert client.post(f"/api/v1/compounds/{code}/archive", headers=h).status_code == 200
    session.expire_all()
    assert c.verdict_code == UNTESTED and session.get(CompoundStats, c.id).n_measurements == 0
    assert not any(is_live(session, session.get(Measurement, i)) for i in ids)
    assert client.post(f"/api/v1/compounds/{code}/restore", headers=h).status_code == 200
    session.expire_all()
    assert c.verdict_code == verdict and session.get(CompoundStats, c.id).n_measurements == 2
