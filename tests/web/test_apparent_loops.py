"""Leaky and lossy loops' numbers are apparent, never figures of merit (issue 22, item 2): one rule
(server/merit.py) read by the registry's largest Pr, the compound's Pr(T) figure, its key-results column
and the measurement page (SQLite and PostgreSQL).

One pellet of one batch: saturated Miller-Dungan loops at 280 and 300 K (Pr 5 and 6 uC/cm2, 1 % noise), a loop of the
same shape with a larger Pr at 320 K where PUND on the same pellet switches nothing (a loop of leakage),
and at 340 K a leaky capacitor's ellipse whose apparent Pr, sigma E0 / omega, is about 12 uC/cm2
(J. F. Scott, J. Phys.: Condens. Matter 20, 021001 (2008); server/synth/ferro.py).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from sqlmodel import select

from server import merit
from server.ingest.table import to_csv_bytes
from server.models import Compound, CompoundStats
from server.services import compound_page
from server.web.format import number
from server.synth.ferro import leaky_capacitor, miller_loop, pund_train
from tests.factories import bearer, login_as, make_token, soup

BOWL = "C1c2c(OC)c(OC)c3c4c2c2c1c(OC)c(OC)c1c2c2c(c(OC)c(OC)c(c42)C3)C1"
GEOMETRY = {"area": "0.785 mm^2", "thickness": "100 um"}


def _loop(pr, emax, t_K, seed):
    frame = miller_loop(1.25 * pr, pr, emax / 6, emax, noise_uC_cm2=0.01 * pr, rng=np.random.default_rng(seed))
    return to_csv_bytes(frame, {"temperature": f"{t_K} K", **GEOMETRY, "frequency": "10 Hz"})


@pytest.fixture
def pellet(client, session):
    h = bearer(make_token(session, scope="write"))
    code = client.post("/api/v1/compounds", json={"smiles": BOWL}, headers=h).json()["code"]
    assert client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=h).status_code == 201
    sample = client.post(f"/api/v1/batches/{code}-B01/samples", json={"form": "pellet", "thickness": "100 um",
                                                                    "electrode_area": "0.785 mm^2"}, headers=h).json()["code"]

    def up(kind, raw):
        r = client.post(f"/api/v1/samples/{sample}/measurements", data={"kind": kind},
                        files={"file": (f"{kind}.csv", raw)}, headers=h)
        assert r.status_code == 201, r.text
        return r.json()

    up("pe_loop", _loop(5.0, 330.0, 280, 7))
    good = up("pe_loop", _loop(6.0, 300.0, 300, 1))
    leaky = up("pe_loop", _loop(9.0, 360.0, 320, 2))
    assert good["verdict"] == leaky["verdict"] == "switching"  # by its own shape the second loop switches
    pund = up("pund", _no_switching_pund(321, 5))
    assert pund["verdict"] == "no_switching"
    ellipse = leaky_capacitor(6.0, 4.0, 300.0, frequency_Hz=100.0, sigma_S_m=2.5e-6, noise_uC_cm2=0.05,
                              rng=np.random.default_rng(3)).drop(columns=["t (s)"])
    lossy = up("pe_loop", to_csv_bytes(ellipse, {"temperature": "340 K", **GEOMETRY, "frequency": "100 Hz"}))
    assert lossy["verdict"] != "switching" and lossy["results"]["pr_uC_cm2"] > 9.0
    return code, good, leaky, pund, lossy


def test_apparent_loops_raise_no_best_value_and_no_plot_point(client, session, pellet):
    code, good, leaky, pund, lossy = pellet
    compound = session.exec(select(Compound).where(Compound.code == code)).one()
    stats = session.get(CompoundStats, compound.id)
    assert stats.pr_max_measurement_id == good["id"]
    assert stats.pr_max_uC_cm2 == pytest.approx(good["results"]["pr_uC_cm2"]) and stats.pr_max_t_K == 300
    page = compound_page.compound_page(session, compound, actor=None)
    assert page["apparent_loops"] == 2
    drawn = {t for trace in json.loads(page["summary_figure"])["data"] for t in trace.get("text") or ()}
    assert f"#{good['id']}" in drawn and not drawn & {f"#{leaky['id']}", f"#{lossy['id']}"}
    pr_drawn = [y for trace in json.loads(page["summary_figure"])["data"] if trace.get("yaxis", "y") == "y"
                for y in trace["y"]]
    assert max(pr_drawn) == pytest.approx(good["results"]["pr_uC_cm2"])
    # the explorer's loop at a temperature follows the same rule: none at 320 K, the good one at 300 K
    from server.services import explore

    assert explore._loops_at(session, [compound.id], 320.0) == {}
    assert explore._loops_at(session, [compound.id], 300.0)[compound.id]["pr_uC_cm2"] == good["results"]["pr_uC_cm2"]


def test_apparent_loops_are_greyed_and_labelled_on_the_pages(client, session, pellet):
    code, good, leaky, pund, lossy = pellet
    login_as(client, session, role="viewer")
    doc = soup(client.get(f"/compounds/{code}").text)
    cells = {int(tr.find("a").text): tr.find_all("td")[4] for tr in doc.select("#measurements tbody tr")}
    for m in (leaky, lossy):
        assert cells[m["id"]].get("data-apparent") == "true" and "apparent" in cells[m["id"]]["class"]
        assert cells[m["id"]].get_text().startswith("apparent Pr")
    assert cells[good["id"]].get("data-apparent") is None and cells[good["id"]].get_text().startswith("Pr ")
    assert f"measurement {pund['id']}" in cells[leaky["id"]]["title"]
    assert doc.find(attrs={"data-field": "apparent-loops"}) is not None
    # the loop page says why and greys each apparent value
    page = soup(client.get(f"/measurements/{leaky['id']}").text)
    assert f"measurement {pund['id']}" in page.find(attrs={"data-field": "apparent-reason"}).text
    rows = {tr.th.text: tr for tr in page.select("table.results tr") if tr.th}
    assert rows["apparent Pr"].get("data-apparent") == "true" and "Pr" not in rows
    good_page = soup(client.get(f"/measurements/{good['id']}").text)
    assert good_page.find(attrs={"data-field": "apparent-reason"}) is None and "Pr" in {
        tr.th.text for tr in good_page.select("table.results tr") if tr.th}
    # the registry's Pr column shows the loop at 300 K, not the larger apparent values
    registry_page = soup(client.get("/compounds").text)
    cells = [td.get_text(" ", strip=True) for tr in registry_page.select("tbody tr")
             if tr.get("data-code") == code for td in tr.find_all("td")]  # rows show the short code
    assert f"{number(good['results']['pr_uC_cm2'], 3)} at 300 K" in cells


def _m(i, kind, verdict, t, sample="S1", **results):
    return {"id": i, "kind": kind, "verdict": verdict, "temperature_K": t, "sample": sample, "results": results}


def test_the_rule_itself():
    loop = _m(1, "pe_loop", "switching", 300.0, pr_uC_cm2=1.0)
    assert merit.is_figure_of_merit(loop)
    assert not merit.is_figure_of_merit(_m(2, "pe_loop", "lossy_dielectric", 300.0, apparent=["pr_uC_cm2"]))
    assert not merit.is_figure_of_merit(_m(3, "pund", "switching", 300.0))  # PUND has no loop figures
    none_here = _m(4, "pund", "no_switching", 304.0)
    assert merit.apparent_reason(loop, [none_here]).startswith("PUND of the same sample (measurement 4) at 304 K")
    # another sample's PUND, or one 6 K away (beyond SAME_TEMPERATURE_K = 5 K), says nothing of this loop
    assert merit.is_figure_of_merit(loop, [_m(5, "pund", "no_switching", 300.0, sample="S2"),
                                           _m(6, "pund", "no_switching", 306.0)])
    assert merit.apparent_reasons([loop, none_here]) == {1: merit.apparent_reason(loop, [none_here])}
    assert "pr_uC_cm2" in merit.apparent_keys(loop, "any reason") and not merit.apparent_keys(loop, None)


def _no_switching_pund(t_K, seed):
    train = pund_train(1.0, 2.0, 1.0, 360.0, switching=False, eps_r_background=6.0, leak_sigma_S_m=3e-8,
                       noise_uC_cm2=2e-4, points=3000, rng=np.random.default_rng(seed), area_cm2=0.00785,
                       thickness_um=100.0)
    return to_csv_bytes(train, {"temperature": f"{t_K} K", **GEOMETRY})


def test_the_comparison_table_marks_a_loop_pund_contradicts(client, session, pellet):
    code, good, leaky, pund, lossy = pellet
    from server.services import compare

    h = bearer(make_token(session, scope="write"))
    # a second compound whose one loop switches by its shape, at 300 K, where PUND of the batch's
    # default sample switches nothing
    other = client.post("/api/v1/compounds", json={"smiles": BOWL.replace("OC", "OCC")}, headers=h).json()["code"]
    assert client.post(f"/api/v1/compounds/{other}/batches", json={}, headers=h).status_code == 201
    for kind, raw in (("pe_loop", _loop(9.5, 360.0, 300, 9)), ("pund", _no_switching_pund(300, 11))):
        r = client.post(f"/api/v1/batches/{other}-B01/measurements", data={"kind": kind},
                        files={"file": (f"{kind}.csv", raw)}, headers=h)
        assert r.status_code == 201, r.text
    rows = {row["code"]: row for row in compare.comparison(session, [code, other], "pe_loop", actor=None)["rows"]}
    assert all(v.endswith("(apparent)") for v in rows[other]["values"])
    shown = rows[code]["measurement"]  # whichever loop the comparison shows of the first compound
    assert any(v.endswith("(apparent)") for v in rows[code]["values"]) == (shown in (leaky["id"], lossy["id"]))
