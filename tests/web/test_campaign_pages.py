"""Explorer, side-chain outcome map, status page (public and embargo) and timeline (SQLite and PostgreSQL)."""

from __future__ import annotations

import json

import pytest

from server.verdict_codes import LABELS
from server.chem.scaffold import PARENT_BOWLS
from server.ingest.table import to_csv_bytes
from server.synth.ferro import miller_loop
from tests.factories import bearer, login_as, make_token, soup


@pytest.fixture
def data(client, session):
    h = bearer(make_token(session, scope="write"))
    client.post("/api/v1/scaffolds", json={"code": "BWL-C", "name": "CH2 bowl", "smiles": PARENT_BOWLS["CH2"]}, headers=h)
    made = {}
    for n, tc in ((2, 260.0), (4, 280.0), (6, 300.0), (8, 320.0)):
        r = client.post("/api/v1/compounds", json={"scaffold": "BWL-C", "side_chain": {"kind": "alkoxy", "carbons": n},
                                                   "label": f"C{n}O bowl", "embargoed": n == 8}, headers=h)
        code = r.json()["code"]
        made[n] = code
        client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=h)
        client.post(f"/api/v1/compounds/{code}/barriers", json={"method": "coalescence", "tc_K": tc, "dnu_Hz": 150},
                    headers=h)
        if n <= 4:  # the short chains switch
            loop = to_csv_bytes(miller_loop(10, 8 - n / 2, 50, 300), {"temperature": "300 K"})
            client.post(f"/api/v1/batches/{code}-B01/measurements", data={"kind": "pe_loop"},
                        files={"file": ("l.csv", loop)}, headers=h)
    return h, made


def test_explorer_points(client, session, data):
    login_as(client, session)
    page = soup(client.get("/explorer?x=carbons&y=barrier_measured&group=verdict&trend=1").text)
    fig = json.loads(page.find("script", id="explorer-figure").string)
    markers = [t for t in fig["data"] if t["mode"] == "markers"]
    xs = sorted(x for t in markers for x in t["x"])
    assert xs == [2, 4, 6, 8]
    assert fig["layout"]["xaxis"]["title"]["text"] == "side-chain carbons"
    assert fig["layout"]["yaxis"]["title"]["text"] == "barrier, measured (kcal/mol)"
    names = {t["name"].split(" (")[0] for t in markers}
    assert names == {LABELS["loop_switching_only"], LABELS["untested"]}
    # Pr at a chosen temperature uses the loops measured within 5 K of it.
    at = soup(client.get("/explorer?x=carbons&y=pr&t=300+K").text)
    fig = json.loads(at.find("script", id="explorer-figure").string)
    assert sorted(x for t in fig["data"] for x in t["x"]) == [2, 4]
    none = soup(client.get("/explorer?x=carbons&y=pr&t=200+K").text)
    assert json.loads(none.find("script", id="explorer-figure").string)["data"] == []
    bad = soup(client.get("/explorer?x=colour&y=pr").text)
    assert "unknown property" in bad.find(role="alert").text


def test_outcome_map_counts_and_links(client, session, data):
    login_as(client, session)
    page = soup(client.get("/outcomes").text)
    rows = page.select("#outcome-map tbody tr")
    assert [r.th.text.strip() for r in rows] == ["C2 alkoxy", "C4 alkoxy", "C6 alkoxy", "C8 alkoxy"]
    c2 = rows[0].find("td")
    assert c2["data-best"] == "loop_switching_only"
    link = c2.find("a")["href"]
    assert "chains=alkoxy%3A2" in link and "scaffold=BWL-C" in link
    table = soup(client.get(link).text)
    assert len(table.select("table.registry tbody tr")) == 1


def test_outcome_map_cells_count_the_verdict_qualifiers(client, session, data):
    # Issue 15: tables, the outcome map and the status page show the qualifiers. The C2 and C4 compounds have
    # saturated loops at 300 K only, so each cell says "1 tested at one temperature only"; the untested C6 cell
    # carries none. A second loop of C4 at 250 K (Pr below the 300 K one, as Landau's law has it below Tc)
    # lifts the qualifier from its cell.
    h, made = data
    login_as(client, session)

    def qualifiers(page):
        return {r.th.text.strip(): [q.text for q in r.select(".qualifier")] for r in page.select("#outcome-map tbody tr")}

    assert qualifiers(soup(client.get("/outcomes").text)) == {
        "C2 alkoxy": ["1 tested at one temperature only"], "C4 alkoxy": ["1 tested at one temperature only"],
        "C6 alkoxy": [], "C8 alkoxy": []}
    loop = to_csv_bytes(miller_loop(10, 7, 60, 300), {"temperature": "250 K"})
    r = client.post(f"/api/v1/batches/{made[4]}-B01/measurements", data={"kind": "pe_loop"},
                    files={"file": ("l250.csv", loop)}, headers=h)
    assert r.status_code == 201, r.text
    after = qualifiers(soup(client.get("/outcomes").text))
    assert after["C2 alkoxy"] == ["1 tested at one temperature only"] and after["C4 alkoxy"] == []


def test_status_public_and_embargo(client, anon, session, data, app):
    h, made = data
    assert anon.get("/status", follow_redirects=False).status_code == 403  # private by default: "this page is private"
    csrf = login_as(client, session, role="admin")
    assert client.post("/status/public", data={"enabled": "on", "confirm": "on", "csrf_token": csrf}).status_code == 200
    page = anon.get("/status")
    assert page.status_code == 200
    html = page.text
    embargoed = made[8]
    smiles = client.get(f"/api/v1/compounds/{embargoed}", headers=h).json()
    for secret in (smiles["smiles"], smiles["inchi"], smiles["inchikey"], smiles["formula"], "C8O bowl"):
        assert secret not in html
    assert embargoed in html  # the code alone is shown
    assert "structure.svg" not in html
    # Nothing about the compound is reachable without a login through the API either.
    assert anon.get(f"/api/v1/compounds/{embargoed}").status_code == 401
    assert anon.get(f"/api/v1/compounds/{embargoed}/structure.svg").status_code == 401
    assert anon.get("/compounds").status_code in (303, 200) and "C8O" not in anon.get("/compounds").text
    tiles = {t["data-tile"]: int(t.find("span").text) for t in soup(html).select(".tile")}
    assert tiles["registered"] == 4 and tiles["switching"] == 2
    # both switching compounds have loops at 300 K only: counted apart (issue 15)
    assert tiles["one_temperature"] == 2


def test_timeline(client, session, data):
    login_as(client, session)
    _, made = data
    page = soup(client.get(f"/compounds/{made[2]}/timeline").text)
    items = page.select("ol.timeline li")
    assert items[-1].find("strong").text.strip() == "compound create"
    whats = {li["data-what"] for li in items}
    assert {"batch", "measurement", "verdict"} <= whats
    assert "barrier create" in [li.find("strong").text.strip() for li in items]


def test_compound_page_lists_criteria_and_qualifier(client, session, data):
    # Issue 15: each criterion shown met / unmet / untested; a loop alone leaves PUND switching untested
    # (Scott 2008), and loops at one temperature carry that qualifier.
    login_as(client, session)
    _, made = data
    page = soup(client.get(f"/compounds/{made[2]}").text)
    rows = {r.find_all("td")[0].text: r.find_all("td")[1].text for r in page.select("table.criteria tbody tr")}
    assert rows["switching shown by PUND"] == "untested"
    assert rows["saturated loop"] == "met"
    assert "Tested at one temperature only." in page.select_one("#verdict").text
