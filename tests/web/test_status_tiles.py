"""Status tiles (issue 22 item 9): distinct compounds per tile, archived compounds never counted,
checked against a pandas reference computed straight from the stored tables (SQLite and PostgreSQL)."""

from __future__ import annotations

import pandas as pd
from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.models import Batch, Compound, CompoundPlan, Measurement, Sample
from server.models.planning import MADE_BATCH_STATES
from server.synth.ferro import miller_loop
from server.verdict_codes import CODES, CONFLICTING, HITS, SHORT, UNTESTED
from tests.factories import bearer, login_as, make_token, soup

# Invented test ethers, one per role in the scenario.
SMILES = {
    "switches": "COc1ccc(OCC)cc1OC",
    "failed_only": "COc1ccc(OCCC)cc1OC",
    "planned": "COc1ccc(OCCCC)cc1OC",
    "archived": "COc1ccc(OCCCCC)cc1OC",
    "dsc_only": "COc1ccc(OCCCCCC)cc1OC",
    "batch_archived": "COc1ccc(OCCCCCCC)cc1OC",
    "switches_too": "COc1ccc(OCCCCCCCC)cc1OC",
}


def _loop(pr_uC_cm2: float, t_K: float) -> bytes:
    return to_csv_bytes(miller_loop(10, pr_uC_cm2, 50, 300), {"temperature": f"{t_K:g} K"})


def _upload(client, h, batch: str, kind: str, raw: bytes, name: str) -> None:
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind}, files={"file": (name, raw)}, headers=h)
    assert r.status_code == 201, r.text


def _scenario(client, session) -> dict[str, str]:
    h = bearer(make_token(session, scope="write"))
    codes = {}
    for role, smi in SMILES.items():
        body = {"smiles": smi, "label": role}
        if role == "planned":
            body["state"] = "planned"
        r = client.post("/api/v1/compounds", json=body, headers=h)
        assert r.status_code == 201, r.text
        codes[role] = r.json()["code"]

    def batch(role: str, state: str = "made") -> str:
        r = client.post(f"/api/v1/compounds/{codes[role]}/batches", json={"state": state}, headers=h)
        assert r.status_code == 201, r.text
        return r.json()["code"]

    # three batches, two of them measured at two temperatures: one compound on every tile it reaches
    b1, b2, _ = batch("switches"), batch("switches"), batch("switches", "failed")
    for b in (b1, b2):
        for t_K in (300, 320):
            _upload(client, h, b, "pe_loop", _loop(6.0, t_K), f"loop_{t_K}.csv")
    b = batch("switches_too")
    _upload(client, h, b, "pe_loop", _loop(4.0, 300), "loop.csv")
    # a made batch archived and a failed one live: not made
    gone = batch("failed_only")
    batch("failed_only", "failed")
    assert client.post(f"/api/v1/batches/{gone}/archive", headers=h).status_code == 200
    # an archived compound with a made batch and switching loops counts nowhere
    b = batch("archived")
    _upload(client, h, b, "pe_loop", _loop(9.0, 300), "loop.csv")
    assert client.post(f"/api/v1/compounds/{codes['archived']}/archive", headers=h).status_code == 200
    b = batch("dsc_only")
    dsc = KINDS["dsc"].example()
    _upload(client, h, b, "dsc", dsc.raw, dsc.filename)
    # its only made batch archived: not made; its loop is kept but no longer counts (a measurement is live
    # only with its sample, batch and compound: models.live_measurement), so it is neither measured nor switching
    b = batch("batch_archived")
    _upload(client, h, b, "pe_loop", _loop(5.0, 300), "loop.csv")
    batch("batch_archived", "failed")
    assert client.post(f"/api/v1/batches/{b}/archive", headers=h).status_code == 200
    return codes


def _reference(session) -> dict[str, int | str]:
    """The tiles recomputed with pandas from the stored rows, independently of services/status."""
    conn = session.connection()
    compounds = pd.read_sql(select(Compound.id, Compound.archived, Compound.verdict_code, Compound.override_code), conn)
    batches = pd.read_sql(select(Batch.id, Batch.compound_id, Batch.state, Batch.archived), conn)
    ms = pd.read_sql(select(Measurement.batch_id, Measurement.sample_id, Measurement.archived,
                            Measurement.superseded_by_id), conn)
    samples = pd.read_sql(select(Sample.id, Sample.archived), conn)
    plans = pd.read_sql(select(CompoundPlan.compound_id, CompoundPlan.state), conn)
    live = compounds[~compounds["archived"].astype(bool)].copy()
    live_batches = batches[~batches["archived"].astype(bool)]
    made_ids = set(live_batches.loc[live_batches["state"].isin(MADE_BATCH_STATES), "compound_id"])
    abandoned = set(plans.loc[plans["state"] == "abandoned", "compound_id"])
    planned_ids = set(plans.loc[plans["state"].isin(["planned", "in_synthesis"]), "compound_id"]) - made_ids
    # a measurement counts when it, its sample, its batch and its compound are live
    live_ms = ms[~ms["archived"].astype(bool) & ms["superseded_by_id"].isna()]
    live_ms = live_ms[live_ms["sample_id"].isin(samples.loc[~samples["archived"].astype(bool), "id"])]
    live_ms = live_ms.merge(live_batches, left_on="batch_id", right_on="id")
    measured_ids = set(live_ms["compound_id"]) & set(live["id"])
    live["effective"] = live["override_code"].fillna(live["verdict_code"])
    classes = live.loc[~live["effective"].isin([UNTESTED, CONFLICTING]), "effective"]
    strongest = min(classes, key=CODES.index) if len(classes) else None
    ids = set(live["id"])
    return {
        "registered": len(ids),
        "planned": len(ids & (planned_ids - abandoned)),
        "made": len(ids & (made_ids - abandoned)),
        "measured": len(ids & measured_ids),
        "switching": int(live["effective"].isin(HITS).sum()),
        "strongest": int((live["effective"] == strongest).sum()) if strongest else 0,
        "strongest_name": f"strongest class: {SHORT[strongest]}" if strongest else "strongest class: none yet",
    }


def test_status_tiles_count_distinct_live_compounds_like_a_pandas_reference(client, session):
    codes = _scenario(client, session)
    login_as(client, session)
    page = soup(client.get("/status").text)
    tiles = {t["data-tile"]: (int(t.find("span").text), t.find_all("span")[1].text) for t in page.select(".tile")}
    ref = _reference(session)
    got = {key: tiles[key][0] for key in ("registered", "planned", "made", "measured", "switching", "strongest")}
    assert got == {k: v for k, v in ref.items() if k != "strongest_name"}
    assert tiles["strongest"][1] == ref["strongest_name"]
    # and the numbers the scenario was built to give (plain Python, by construction)
    assert got["registered"] == len(SMILES) - 1  # the archived compound is not counted
    assert got["planned"] == 1
    assert got["made"] == 3  # switches, switches_too, dsc_only; the archived compound and batches do not count
    # one compound with four loops on two batches counts once: switches, switches_too, dsc_only
    assert got["measured"] == 3
    assert got["switching"] == 2  # switches and switches_too: batch_archived's loop no longer counts
    assert ref["strongest_name"] != "strongest class: none yet"
    # every tile says what it counts
    assert all(t.get("title") for t in page.select(".tile"))
    assert codes["archived"] not in page.select_one(".tiles").text
