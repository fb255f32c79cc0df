"""Registry filters and sorting checked against a pandas reference computed from the same rows;
exports round-trip (SQLite and PostgreSQL)."""

from __future__ import annotations

import io
import itertools

import pandas as pd
import pytest

from server.chem.scaffold import PARENT_BOWLS
from tests.factories import bearer, login_as, make_token

CHAINS = [("alkoxy", 1), ("alkoxy", 4), ("alkoxy", 6), ("alkoxy", 8), ("alkoxy", 12), ("alkoxy", 16),
          ("alkylthio", 4), ("alkylthio", 8), ("alkyl", 6)]
STATES = ["made", "impure", "failed"]


@pytest.fixture
def campaign(client, session):
    h = bearer(make_token(session, scope="write"))
    for code, bridge in (("BWL-C", "CH2"), ("BWL-S", "S")):
        assert client.post("/api/v1/scaffolds", json={"code": code, "name": f"{bridge} bowl",
                                                      "smiles": PARENT_BOWLS[bridge]}, headers=h).status_code == 201
    rows = []
    for i, ((kind, n), scaffold) in enumerate(itertools.product(CHAINS, ("BWL-C", "BWL-S"))):
        body = {"scaffold": scaffold, "side_chain": {"kind": kind, "carbons": n}, "label": f"test {i}"}
        if i % 5 == 0:
            body["side_chain"] = {"kind": "alkoxy", "branched_form": "2-ethylhexyl"}
        r = client.post("/api/v1/compounds", json=body, headers=h)
        if r.status_code == 409:
            continue
        assert r.status_code == 201, r.text
        code = r.json()["code"]
        state = STATES[i % 3]
        client.post(f"/api/v1/compounds/{code}/batches", json={"state": state}, headers=h)
        if i % 2 == 0:
            # Coalescence points spread over 230-330 K give measured barriers of about 11-16 kcal/mol.
            r2 = client.post(f"/api/v1/compounds/{code}/barriers",
                             json={"method": "coalescence", "tc_K": 230.0 + 6 * i, "dnu_Hz": 120.0}, headers=h)
            assert r2.status_code == 201, r2.text
        chain = r.json()["side_chains"][0]
        rows.append({"code": code, "scaffold": scaffold, "kind": chain["kind"], "carbons": chain["carbons"],
                     "branched": chain["branched"], "state": state, "number": int(code.split("-")[1]),
                     "label": f"test {i}"})
    return h, pd.DataFrame(rows)


def codes(client, h, query: str) -> list[str]:
    r = client.get(f"/api/v1/compounds?limit=500&{query}", headers=h)
    assert r.status_code == 200, r.text
    return [i["code"] for i in r.json()["items"]]


def test_filters_match_pandas_reference(client, campaign):
    h, ref = campaign
    newest_first = ref.sort_values("number", ascending=False)
    cases = {
        "scaffold=BWL-S": newest_first.scaffold == "BWL-S",
        "chain_kind=alkylthio": newest_first.kind == "alkylthio",
        "chain_kind=alkoxy&c_min=6&c_max=12": (newest_first.kind == "alkoxy") & newest_first.carbons.between(6, 12),
        "branched=yes": newest_first.branched,
        "branched=no&scaffold=BWL-C&c_max=6": (~newest_first.branched) & (newest_first.scaffold == "BWL-C")
        & (newest_first.carbons <= 6),
        "batch_state=failed": newest_first.state == "failed",
        "batch_state=impure&chain_kind=alkoxy": (newest_first.state == "impure") & (newest_first.kind == "alkoxy"),
        "q=test+1": newest_first.label.str.contains("test 1", regex=False),
    }
    for query, mask in cases.items():
        assert codes(client, h, query) == list(newest_first[mask].code), query


def test_barrier_range_and_sort(client, campaign):
    h, ref = campaign
    items = client.get("/api/v1/compounds?limit=500&barrier_min=12&barrier_max=16&sort=barrier&dir=asc",
                       headers=h).json()["items"]
    got = [i["code"] for i in items]
    listed = {b["compound"]: b["dg_kcal_mol"] for code in ref.code
              for b in client.get(f"/api/v1/compounds/{code}/barriers", headers=h).json()["items"]}
    expected = sorted((c for c, dg in listed.items() if 12 <= dg <= 16), key=lambda c: listed[c])
    assert got == expected and got


def test_paging_and_bad_filters(client, campaign):
    h, ref = campaign
    a = client.get("/api/v1/compounds?limit=5&offset=0", headers=h).json()
    b = client.get("/api/v1/compounds?limit=5&offset=5", headers=h).json()
    assert a["total"] == b["total"] == len(ref)
    assert not set(i["code"] for i in a["items"]) & set(i["code"] for i in b["items"])
    for bad, field in (("c_min=many", "c_min"), ("sort=colour", "sort"), ("verdict=great", "verdict"),
                       ("barrier_min=nan", "barrier_min"), ("made_from=yesterday", "made_from")):
        r = client.get(f"/api/v1/compounds?{bad}", headers=h)
        assert r.status_code == 422 and r.json()["field"] == field, bad


def test_export_round_trip(client, session, campaign):
    _, ref = campaign
    login_as(client, session)
    csv = client.get("/compounds/export.csv?chain_kind=alkoxy&c_min=8")
    assert csv.status_code == 200 and csv.headers["content-type"].startswith("text/csv")
    frame = pd.read_csv(io.StringIO(csv.text))
    expected = ref[(ref.kind == "alkoxy") & (ref.carbons >= 8)].sort_values("number", ascending=False)
    assert list(frame["code"]) == list(expected.code)
    assert "molar mass (g/mol)" in frame.columns and "barrier measured (kcal/mol)" in frame.columns
    xlsx = client.get("/compounds/export.xlsx?chain_kind=alkoxy&c_min=8")
    back = pd.read_excel(io.BytesIO(xlsx.content))
    pd.testing.assert_frame_equal(back[["code", "molar mass (g/mol)"]], frame[["code", "molar mass (g/mol)"]])


def test_table_page_filters_in_place(client, session, campaign):
    from tests.factories import soup

    login_as(client, session)
    full = soup(client.get("/compounds?chain_kind=alkylthio").text)
    assert full.select_one("#filters select[name=chain_kind] option[selected]").text == "alkylthio"
    frag = client.get("/compounds?chain_kind=alkylthio&sort=code&dir=asc", headers={"HX-Request": "true"})
    doc = soup(frag.text)
    assert doc.find("form") is None
    shown = [tr["data-code"] for tr in doc.select("tbody tr")]
    _, ref = campaign
    assert shown == list(ref[ref.kind == "alkylthio"].sort_values("number").code)
    bad = soup(client.get("/compounds?c_min=lots&chain_kind=alkylthio").text)
    alert = bad.find(role="alert")
    assert alert["data-field"] == "c_min" and alert.text.startswith("Carbons from:")
    # the rest of the view is kept, and no (other) list is shown under the error
    assert bad.select_one("#filters select[name=chain_kind] option[selected]").text == "alkylthio"
    assert bad.select("table.registry") == []


def test_an_invalid_smarts_stays_in_its_box_with_a_plain_error_and_no_list(client, session, campaign):
    """Issue 22 item 7: the error names the box, says what is wrong in plain words (RDKit's own
    messages folded away), the SMARTS stays as typed, and no unfiltered list is shown under it."""
    from tests.factories import soup

    login_as(client, session)
    url = "/compounds?substructure=c1ccc(&chain_kind=alkoxy&sort=label&dir=asc"
    page = client.get(url)
    assert page.status_code == 422
    doc = soup(page.text)
    alert = doc.find(role="alert")
    assert alert["data-field"] == "substructure"
    assert alert.text.startswith("Substructure (SMARTS): 'c1ccc(' is neither a valid SMARTS")
    assert "RDKit" not in alert.text
    assert "SMARTS Parse Error" in doc.select_one(".view-error details").text
    assert doc.select_one("#filters input[name=substructure]")["value"] == "c1ccc("
    assert doc.select_one("#filters select[name=chain_kind] option[selected]").text == "alkoxy"
    assert doc.select_one("#filters input[name=sort]")["value"] == "label"
    assert doc.select_one("#filters input[name=dir]")["value"] == "asc"
    assert doc.select("table.registry") == [] and doc.select(".count") == []
    # the htmx fragment: the same error, no table, and no form (the form on the page keeps the text)
    frag = client.get(url, headers={"HX-Request": "true"})
    assert frag.status_code == 422
    part = soup(frag.text)
    assert part.find("form") is None and part.select("table.registry") == []
    assert part.find(role="alert")["data-field"] == "substructure"
    # the API keeps RDKit's words in its one message
    api = client.get("/api/v1/compounds?substructure=c1ccc(", headers=bearer(make_token(session, scope="read")))
    assert api.status_code == 422 and "RDKit says" in api.json()["detail"]
