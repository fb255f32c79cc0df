"""Planning pages: targets and ranking, the claim, routes with hazards and lineage, reagents (both back ends)."""

from __future__ import annotations

import pytest

from server import hazards
from server.chem.scaffold import PARENT_BOWLS
from tests.factories import bearer, login_as, make_token, soup


@pytest.fixture
def data(client, session):
    h = bearer(make_token(session, scope="write", name="planner"))
    client.post("/api/v1/scaffolds", json={"code": "BWL-S", "name": "S bowl", "smiles": PARENT_BOWLS["S"]}, headers=h)
    made = client.post("/api/v1/compounds", json={"scaffold": "BWL-S", "side_chain": {"kind": "alkoxy", "carbons": 2}},
                       headers=h).json()["code"]
    batch = client.post(f"/api/v1/compounds/{made}/batches", json={}, headers=h).json()["code"]
    target = client.post("/api/v1/compounds", json={"scaffold": "BWL-S", "side_chain": {"kind": "alkoxy", "carbons": 3},
                                                     "state": "planned", "priority": 1, "rationale": "fill the gap"},
                         headers=h).json()["code"]
    return {"h": h, "made": made, "batch": batch, "target": target}


def test_planning_page_lists_targets_and_says_when_data_are_too_few(client, session, data):
    csrf = login_as(client, session)
    page = soup(client.get("/planning").text)
    row = page.select_one(f"#targets tr[data-code='{data['target']}']")
    assert row is not None and "fill the gap" in row.get_text() and "planned" in row.get_text()
    assert "a prediction needs at least" in page.select_one("#ranking").get_text()
    assert [d.get_text(" ", strip=True).split(".")[0] for d in page.select(".cautions .caution")] == [
        c.title for c in hazards.CAMPAIGN_CAUTIONS]
    # Claim it: assigned to the member, in synthesis.
    r = client.post(f"/planning/{data['target']}/claim", data={"csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303
    body = client.get(f"/api/v1/compounds/{data['target']}", headers=data["h"]).json()
    assert (body["state"], body["assignee"]) == ("in_synthesis", "member1")
    assert client.post(f"/planning/{data['made']}/claim", data={"csrf_token": csrf}).status_code == 422


def test_registering_a_target_from_the_form(client, session, data):
    csrf = login_as(client, session)
    r = client.post("/compounds/new", data={"csrf_token": csrf, "smiles": "COc1ccc(OC)cc1", "planned": "on",
                                            "rationale": "cheap test", "priority": "2"}, follow_redirects=False)
    assert r.status_code == 303, r.text
    code = r.headers["location"].rsplit("/", 1)[1]
    page = soup(client.get(f"/compounds/{code}").text)
    assert "planned" in page.select_one("#planning h2").get_text()
    assert "cheap test" in page.select_one("#planning").get_text()


def test_route_page_steps_hazards_lineage_and_heating_caution(client, session, data):
    csrf = login_as(client, session)
    inter = client.post("/api/v1/compounds", json={"smiles": "Brc1ccc(Br)cc1"}, headers=data["h"]).json()["code"]
    ib = client.post(f"/api/v1/compounds/{inter}/batches", json={}, headers=data["h"]).json()["code"]
    url = f"/planning/routes/{data['batch']}"
    r = client.post(f"{url}/steps", data={"csrf_token": csrf, "description": "couple", "temperature": "80 degC",
                                          "time": "12 h", "reagents": "sodium hydride; 2 mmol; 2\nDMF; 5 mL"},
                    follow_redirects=False)
    assert r.status_code == 303, r.text
    assert client.post(f"{url}/precursors", data={"csrf_token": csrf, "precursor": ib}, follow_redirects=False).status_code == 303
    bad = client.post(f"{url}/steps", data={"csrf_token": csrf, "reagents": "DMF; 5 kV"})
    assert bad.status_code == 422 and "not an amount" in soup(bad.text).select_one(".error").get_text()
    cycle = client.post(f"/planning/routes/{ib}/precursors", data={"csrf_token": csrf, "precursor": data["batch"]})
    assert cycle.status_code == 422
    page = soup(client.get(url).text)
    assert [n.get_text() for n in page.select("#steps .no-hazard-data")] == [hazards.NO_DATA] * 2
    assert ib in page.select_one("#made-from").get_text()
    # The S-bridged product: the heating caution, on the route page and on the compound page.
    assert "TGA" in page.select_one("#heating-caution").get_text()
    assert "TGA" in soup(client.get(f"/compounds/{data['made']}").text).select_one("#heating-caution").get_text()
    # The intermediate's page lists the product downstream.
    assert data["batch"] in soup(client.get(f"/planning/routes/{ib}").text).select_one("#made-into").get_text()
    # Entered hazard data replace the notice.
    r = client.post("/planning/reagents", data={"csrf_token": csrf, "name": "Sodium hydride", "hazard_codes": "H260",
                                                "pictograms": ["GHS02"], "sds_source": "supplier, rev. 2026"},
                    follow_redirects=False)
    assert r.status_code == 303, r.text
    page = soup(client.get(url).text)
    assert len(page.select("#steps .no-hazard-data")) == 1 and "GHS02" in page.select_one("#steps").get_text()
    bad = client.post("/planning/reagents", data={"csrf_token": csrf, "name": "x", "hazard_codes": "H9"})
    assert bad.status_code == 422


def test_dsc_of_a_sulfur_compound_shows_the_heating_caution_with_the_highest_temperature(client, session, data):
    from server.ingest.table import to_csv_bytes
    from server.synth.dsc import dsc_trace

    login_as(client, session)
    # A heating run to 450 K (invented melting peak at 400 K): the batch has been taken to 450 K.
    trace = dsc_trace([{"kind": "melting", "t_K": 400.0, "dh_J_g": 80.0, "width_K": 1.5}], t_start_K=330,
                      t_end_K=450, rate_K_min=10.0, mass_mg=5.0)
    r = client.post(f"/api/v1/batches/{data['batch']}/measurements", data={"kind": "dsc", "mass": "5 mg"},
                    files={"file": ("dsc.csv", to_csv_bytes(trace), "text/csv")}, headers=data["h"])
    assert r.status_code == 201, r.text
    text = soup(client.get(f"/measurements/{r.json()['id']}").text).select_one("#heating-caution").get_text()
    assert "TGA" in text and "450" in text
    # The batch's route page says the same.
    assert "450" in soup(client.get(f"/planning/routes/{data['batch']}").text).select_one("#heating-caution").get_text()
