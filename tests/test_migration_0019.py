"""Migration 0019 renames the per-loop verdict of stored P-E loops, and its downgrade puts it back.

A loop shows switching, never "ferroelectric" (issue 15: only the compound verdict can speak of a polar
phase that switches; IEEE Std 180-1986, Scott 2008). Checked on both back ends with measurements stored
through the API: a saturated loop, a lossy ellipse, and a PUND whose own verdict is also ``switching``
(it must not be touched by the downgrade).
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import command
from alembic.script import ScriptDirectory

from server.db import alembic_config
from server.ingest.table import to_csv_bytes
from server.synth.ferro import leaky_capacitor, miller_loop, pund_train
from tests.factories import bearer, make_token

measurement = sa.table("measurement", sa.column("id", sa.Integer), sa.column("kind", sa.String),
                       sa.column("verdict", sa.String), sa.column("results", sa.JSON))


def _rows(url: str) -> dict[int, tuple[str, str, str | None]]:
    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            return {r.id: (r.kind, r.verdict, (r.results or {}).get("verdict"))
                    for r in conn.execute(sa.select(measurement)).all()}
    finally:
        engine.dispose()


def test_0019_rewrites_loop_verdicts_and_downgrade_restores_them(client, session, db_url):
    h = bearer(make_token(session, scope="write"))
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC"}, headers=h)
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=h)
    files = [("pe_loop", to_csv_bytes(miller_loop(10, 6, 50, 300), {"temperature": "300 K"}), {}),
             ("pe_loop", to_csv_bytes(leaky_capacitor(10, 1, 100, frequency_Hz=100), {"temperature": "300 K"}), {}),
             ("pund", to_csv_bytes(pund_train(8, 10, 50, 200, area_cm2=0.01, thickness_um=100),
                                   {"temperature": "300 K"}), {"area": "1 mm^2", "thickness": "100 um"})]
    ids = []
    for kind, raw, geometry in files:
        r = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": kind, **geometry},
                        files={"file": ("m.csv", raw)}, headers=h)
        assert r.status_code == 201, r.text
        ids.append(r.json()["id"])
    session.close()
    now = _rows(db_url)
    saturated, lossy, pund = (now[i] for i in ids)
    assert saturated == ("pe_loop", "switching", "switching")
    assert lossy[1] not in ("switching", "ferroelectric")
    assert pund[:2] == ("pund", "switching")

    cfg = alembic_config(db_url)
    parent = ScriptDirectory.from_config(cfg).get_revision("0019").down_revision
    command.downgrade(cfg, parent)
    old = _rows(db_url)
    assert old[ids[0]] == ("pe_loop", "ferroelectric", "ferroelectric")
    assert old[ids[1]] == lossy and old[ids[2]] == pund  # other verdicts and other kinds untouched
    command.upgrade(cfg, "head")
    assert _rows(db_url) == now
