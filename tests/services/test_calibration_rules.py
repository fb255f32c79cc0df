"""Barrier calibration rules through the registry (issue 16, item 9), SQLite and PostgreSQL.

Generated pairs on known lines (measured = 2.0 + 0.90 computed for CH2-bridged bowls; the S-bridged ones
off that line), plus two computed minima that collapsed to planar. Least squares and the 95 % prediction
interval as in Montgomery, Peck and Vining, *Introduction to Linear Regression Analysis* (Wiley 2012), ch. 2.
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from server.access import Actor
from server.chem.scaffold import PARENT_BOWLS, attach_side_chains, side_chain_smiles
from server.models import BarrierEstimate, Compound
from server.services import barriers
from tests.factories import bearer, login_as, make_token, soup


def _bowl(bridge: str, carbons: int) -> str:
    return attach_side_chains(PARENT_BOWLS[bridge], {i: side_chain_smiles("alkoxy", carbons) for i in range(1, 7)})


@pytest.fixture
def pairs(client, session):
    h = bearer(make_token(session, scope="write"))
    for code, bridge in (("BWL-C", "CH2"), ("BWL-S", "S")):
        assert client.post("/api/v1/scaffolds", json={"code": code, "name": f"{bridge} bowl",
                                                      "smiles": PARENT_BOWLS[bridge]}, headers=h).status_code == 201
    rng = np.random.default_rng(21)
    plan = [("CH2", c, x, False) for c, x in zip((1, 2, 3, 4, 5, 6), (8.0, 9.5, 11.0, 12.5, 14.0, 15.5))]
    plan += [("S", 1, 7.0, False), ("S", 2, 13.0, False), ("S", 3, 0.0, True), ("S", 4, 0.07, False)]
    codes = []
    for bridge, carbons, computed, planar in plan:
        r = client.post("/api/v1/compounds", json={"smiles": _bowl(bridge, carbons),
                                                   "scaffold": "BWL-C" if bridge == "CH2" else "BWL-S"}, headers=h)
        assert r.status_code == 201, r.text
        codes.append(r.json()["code"])
    # the registry's own writes are done: add the barriers (the API stores them from measurements and jobs)
    for code, (bridge, _, computed, planar) in zip(codes, plan):
        cid = session.exec(select(Compound).where(Compound.code == code)).one().id
        measured = (2.0 + 0.90 * computed if bridge == "CH2" else 15.0) + 0.25 * rng.standard_normal()
        session.add(BarrierEstimate(compound_id=cid, method="coalescence", dg_kcal_mol=measured, t_K=300.0))
        session.add(BarrierEstimate(compound_id=cid, method="gfn2-xtb", dg_kcal_mol=computed,
                                    results={"planar": planar}))
    session.commit()
    return codes


MEMBER = Actor("user", "member", role="member")
READER = Actor("token", "reader", scope="read", token_id=9)  # a read token without the embargo grant


def test_calibration_leaves_out_planar_minima_and_fits_the_bridge_with_enough_pairs(client, session, pairs):
    view = barriers.calibration_view(session, actor=MEMBER)
    excluded = [p["code"] for p in view["pairs"] if p["planar"]]
    assert excluded == pairs[-2:]  # the 0 (flagged planar) and 0.07 kcal/mol (collapsed) minima
    assert view["cal"].n == 8 and "planar_excluded" in {f.code for f in view["cal"].flags}
    ch2 = view["by_bridge"]["CH2"]
    assert set(view["by_bridge"]) == {"CH2"} and ch2.n == 6
    assert abs(ch2.b - 0.90) < 3 * ch2.b_err
    pred = {p["code"]: p for p in view["predictions"]}
    assert pred[pairs[2]]["line"] == "bridge CH2" and pred[pairs[2]]["shown"]
    assert pred[pairs[-1]]["shown"] is False and "planar" in pred[pairs[-1]]["reason"]
    # the S bowls sit off the CH2 line: the pooled line's interval is too wide to show a value
    assert pred[pairs[6]]["line"] == "pooled" and pred[pairs[6]]["shown"] is False
    assert "wider than" in pred[pairs[6]]["reason"]

    login_as(client, session)
    page = soup(client.get("/calibration").text)
    text = page.get_text(" ", strip=True)
    assert "no: planar minimum" in text and "Bridge CH2:" in text
    assert "wider than the 3 kcal/mol limit" in text


def _set(session, compound, *, embargoed: bool, archived: bool) -> None:
    compound.embargoed = embargoed
    session.add(compound)
    for b in session.exec(select(BarrierEstimate).where(BarrierEstimate.compound_id == compound.id)).all():
        b.archived = archived
        session.add(b)
    session.commit()


def test_an_embargoed_pair_never_reaches_a_caller_who_may_not_see_it(client, session, pairs):
    # The embargo is a data boundary (server/access.py): a computed barrier comes from the structure, so an
    # embargoed compound's pair must not move the line that calibrates what a reader is shown.
    secret = pairs[1]
    row = session.exec(select(Compound).where(Compound.code == secret)).one()
    _set(session, row, embargoed=True, archived=False)
    for outsider in (READER, None):
        view = barriers.calibration_view(session, actor=outsider)
        assert secret not in {p["code"] for p in view["pairs"]}
        assert secret not in {p["code"] for p in view["predictions"]}
        assert secret not in view["cal"].labels and view["by_bridge"]["CH2"].n == 5
    inside = barriers.calibration_view(session, actor=MEMBER)
    assert secret in {p["code"] for p in inside["pairs"]} and inside["by_bridge"]["CH2"].n == 6
    # The line a reader gets is the one fitted as if the embargoed compound did not exist.
    _set(session, row, embargoed=False, archived=True)
    without = barriers.current_calibration(session, actor=MEMBER).by_bridge["CH2"]
    _set(session, row, embargoed=True, archived=False)
    seen = barriers.current_calibration(session, actor=READER).by_bridge["CH2"]
    assert (seen.a_kcal_mol, seen.b) == pytest.approx((without.a_kcal_mol, without.b), rel=1e-12)
    # the visible compound's calibrated value on its page follows the reader's line too
    visible = pairs[2]
    vrow = session.exec(select(Compound).where(Compound.code == visible)).one()
    est = session.exec(select(BarrierEstimate).where(BarrierEstimate.compound_id == vrow.id,
                                                     BarrierEstimate.method == "gfn2-xtb")).all()
    got = barriers.calibrated_for(session, vrow, est, actor=READER)[est[0].id]
    assert got == barriers.current_calibration(session, actor=READER).predict(est[0].dg_kcal_mol, "CH2", planar=False)
