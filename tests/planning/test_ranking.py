"""The "what to make next" ranking over the API: fitted on the registry, embargo respected (issue 20 item 4)."""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from server.chem.scaffold import PARENT_BOWLS
from server.models import Compound, CompoundStats
from server.precision import trade_unit
from tests.factories import bearer, login_as, make_token, soup

BOWL_TC_K = {"CH2": 440.0, "S": 385.0}  # the demo's T_bowl (seed_demo/scenario.py), Tc = T_bowl - 9 K x n


@pytest.fixture
def world(client, session):
    w = bearer(make_token(session, scope="write", name="planner"))
    for code, bridge in (("B-C", "CH2"), ("B-S", "S")):
        r = client.post("/api/v1/scaffolds", json={"code": code, "name": f"{bridge} bowl", "smiles": PARENT_BOWLS[bridge]},
                        headers=w)
        assert r.status_code == 201, r.text
    rng = np.random.default_rng(11)
    measured = {}
    for scaffold, bridge in (("B-C", "CH2"), ("B-S", "S")):
        for n in (2, 3, 5, 7, 9, 12):
            r = client.post("/api/v1/compounds", json={"scaffold": scaffold, "side_chain": {"kind": "alkoxy", "carbons": n}},
                            headers=w)
            assert r.status_code == 201, r.text
            switches = n <= 8
            tc = BOWL_TC_K[bridge] - 9.0 * n + rng.uniform(-4, 4) if switches else None
            measured[r.json()["code"]] = (tc, switches)
    # As if measured: the stats row and the verdict a loop/PUND series would give (the plumbing is under test).
    for code, (tc, switches) in measured.items():
        c = session.exec(select(Compound).where(Compound.code == code)).one()
        c.verdict_code = "polar_switching_supported" if switches else "no_switching_seen"
        s = session.get(CompoundStats, c.id)
        s.t_peak_K, s.life_state = tc, "made"
        session.add(c)
        session.add(s)
    session.commit()
    targets = {}
    for scaffold, n in (("B-C", 1), ("B-S", 4), ("B-C", 14)):
        r = client.post("/api/v1/compounds", json={"scaffold": scaffold, "side_chain": {"kind": "alkoxy", "carbons": n},
                                                    "state": "planned", "priority": 2}, headers=w)
        assert r.status_code == 201, r.text
        targets[(scaffold, n)] = r.json()["code"]
    return {"w": w, "targets": targets, "measured": measured}


def test_ranking_orders_targets_by_expected_improvement_times_switching(client, world):
    r = client.get("/api/v1/planning/ranking?goal=tc", headers=world["w"])
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["enough_data"] and body["model"]["n"] == 8 and body["switching_model"]["n"] == 12
    assert "expected improvement" in body["rule"]
    codes = [it["code"] for it in body["items"]]
    t = world["targets"]
    # The CH2 target with the shortest chain is predicted near 440 - 9 = 431 K (inside its interval), above
    # the best measured (CH2 with C2, about 422 K): it ranks first by a wide margin. The C14 target is
    # predicted not to switch; the others cannot beat the best measured value.
    first = body["items"][0]
    assert first["code"] == t[("B-C", 1)] and first["low"] < 431 < first["high"]
    assert first["expected_improvement"] > 1.0 and first["p_switch"] > 0.5
    assert all(it["expected_improvement"] < 0.01 for it in body["items"][1:])
    c14 = next(it for it in body["items"] if it["code"] == t[("B-C", 14)])
    assert c14["p_switch"] < 0.5
    assert sorted(codes) == sorted(t.values()) and [it["rank"] for it in body["items"]] == [1, 2, 3]
    assert "expected improvement" in first["explanation"]
    # The model shows its validation against the scaffold mean.
    assert body["model"]["loo_rmse"] < body["model"]["loo_rmse_scaffold_mean"]


def test_bad_goal_is_422(client, world):
    r = client.get("/api/v1/planning/ranking?goal=cheapest", headers=world["w"])
    assert r.status_code == 422 and r.json()["field"] == "goal"


def test_too_few_data_says_so(client, session):
    w = bearer(make_token(session, scope="write", name="planner"))
    assert client.post("/api/v1/compounds", json={"smiles": "COc1ccc(OC)cc1", "state": "planned"}, headers=w).status_code == 201
    body = client.get("/api/v1/planning/ranking", headers=w).json()
    assert not body["enough_data"] and body["items"] == [] and any("at least" in n for n in body["notes"])


def test_embargoed_compounds_do_not_move_the_ranking_for_those_who_may_not_see_them(client, session, world):
    up = bearer(make_token(session, scope="upload", name="pc"))
    before_up = client.get("/api/v1/planning/ranking", headers=up).json()
    before_w = client.get("/api/v1/planning/ranking", headers=world["w"]).json()
    # An embargoed, measured compound with an extreme Tc, and an embargoed target.
    r = client.post("/api/v1/compounds", json={"scaffold": "B-S", "side_chain": {"kind": "alkylthio", "carbons": 2},
                                                "embargoed": True}, headers=world["w"])
    c = session.exec(select(Compound).where(Compound.code == r.json()["code"])).one()
    c.verdict_code = "polar_switching_supported"
    s = session.get(CompoundStats, c.id)
    s.t_peak_K, s.life_state = 520.0, "made"
    session.add_all([c, s])
    session.commit()
    hidden = client.post("/api/v1/compounds", json={"scaffold": "B-C", "side_chain": {"kind": "alkylthio", "carbons": 3},
                                                     "embargoed": True, "state": "planned"}, headers=world["w"]).json()["code"]
    after_up = client.get("/api/v1/planning/ranking", headers=up).json()
    after_w = client.get("/api/v1/planning/ranking", headers=world["w"]).json()
    assert after_up == before_up
    assert after_w != before_w and hidden in [it["code"] for it in after_w["items"]]
    assert after_w["model"]["best_measured"] == 520.0


def _loop(client, headers, code, t_K, pr_uC_cm2):
    """A P-E loop of a batch of ``code`` at ``t_K`` (Miller et al. 1990 analytic loop, server/synth/ferro.py)."""
    from server.synth.ferro import miller_loop
    from server.ingest.table import to_csv_bytes

    batch = f"{code}-B01"
    if client.get(f"/api/v1/batches/{batch}", headers=headers).status_code == 404:
        assert client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=headers).status_code == 201
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop", "temperature": f"{t_K:g} K"},
                    files={"file": ("l.csv", to_csv_bytes(miller_loop(pr_uC_cm2 / 0.8, pr_uC_cm2, 50, 300)))},
                    headers=headers)
    assert r.status_code == 201, r.text
    return r.json()


def test_pr_goal_is_at_the_reference_temperature_and_names_what_it_leaves_out(client, session, world):
    w = world["w"]
    switching = sorted(code for code, (_, s) in world["measured"].items() if s)
    # Six compounds measured at 300 K or either side of it; two only at 250 K (no Pr at 300 K there).
    pr = {code: 6.0 - 0.4 * i for i, code in enumerate(switching)}
    for code in switching[:3]:
        _loop(client, w, code, 300, pr[code])
    for code in switching[3:6]:
        _loop(client, w, code, 280, pr[code] + 0.5)
        _loop(client, w, code, 320, pr[code] - 0.5)
    for code in switching[6:]:
        _loop(client, w, code, 250, pr[code])
    body = client.get("/api/v1/planning/ranking", params={"goal": "pr"}, headers=w).json()
    assert body["reference_t_K"] == 300.0 and body["model"]["n"] == 6
    note = next(n for n in body["notes"] if n.startswith("Pr at 300 K"))
    assert "2 compounds" in note and all(code in note for code in switching[6:])
    assert body["enough_data"] and all("at 300 K" in it["explanation"] for it in body["items"])
    # Measured-within-5-K values enter as measured, interpolated ones at the midpoint (pr, the line's centre).
    assert body["model"]["best_measured"] == pytest.approx(pr[switching[0]], rel=0.03)
    # At 250 K only two compounds give a Pr: too few to predict, and the page says why.
    cold = client.get("/api/v1/planning/ranking", params={"goal": "pr", "t_ref_K": 250}, headers=w).json()
    assert cold["reference_t_K"] == 250.0 and not cold["enough_data"] and cold["items"] == []
    assert cold["model"]["n"] == 2
    bad = client.get("/api/v1/planning/ranking", params={"goal": "pr", "t_ref_K": 0}, headers=w)
    assert bad.status_code == 422 and bad.json()["field"] == "t_ref_K"
    # the page's ranking table says in its header at which temperature the predicted Pr is, and its unit
    login_as(client, session)
    heads = [th.get_text(" ", strip=True) for th in soup(client.get("/planning?goal=pr").text).select("table.ranking th")]
    assert f"Predicted Pr at 300 K ({trade_unit('µC/cm²')})" in heads
