"""Mixed-chain molecules on the side-chain outcome map and in the explorer (issue 22, item 1).

A bowl with three C2 and three C12 alkoxy chains must not be counted under "C12 alkoxy": it gets a row
of its own, and every cell opens exactly the compounds it counts. The map's counts are checked against
an independent pandas reference built from the registry API's own answers (side chains as perceived
from each registered structure, verdicts as served), not from the map's code.
"""

from __future__ import annotations

import json
from urllib.parse import parse_qs, urlsplit

import pandas as pd
import pytest

from server.chem.scaffold import PARENT_BOWLS, attach_side_chains, side_chain_smiles
from server.errors import InputError
from server.ingest.table import to_csv_bytes
from server.services.views import ChainSet, ChainType, parse_view
from server.synth.ferro import miller_loop
from tests.factories import bearer, login_as, make_token, soup


def _bowl(bridge: str, pattern: list[tuple[int, bool]]) -> str:
    """The bowl with alkoxy chains of the given carbons at positions 1..6 (branched: a 2-ethylhexyl)."""
    frags = {i + 1: side_chain_smiles("alkoxy", None, "2-ethylhexyl") if br else side_chain_smiles("alkoxy", c)
             for i, (c, br) in enumerate(pattern)}
    return attach_side_chains(PARENT_BOWLS[bridge], frags)


PURE12 = [(12, False)] * 6
PURE2 = [(2, False)] * 6
MIX_2_12 = [(2, False), (12, False)] * 3  # three C2 and three C12
MIX_2_12_B = [(2, False), (2, False), (12, False), (12, False), (12, False), (12, False)]  # same set, 2:4
MIX_BRANCHED = [(8, True), (8, False)] * 3


@pytest.fixture
def campaign(client, session):
    h = bearer(make_token(session, scope="write"))
    for code, bridge in (("BWL-C", "CH2"), ("BWL-S", "S")):
        assert client.post("/api/v1/scaffolds", json={"code": code, "name": f"{bridge} bowl",
                                                      "smiles": PARENT_BOWLS[bridge]}, headers=h).status_code == 201
    plan = [("CH2", PURE12, True), ("S", PURE12, False), ("CH2", PURE2, True), ("CH2", MIX_2_12, True),
            ("CH2", MIX_2_12_B, False), ("S", MIX_2_12, True), ("S", MIX_BRANCHED, False), ("S", PURE2, False)]
    codes = []
    for bridge, pattern, switches in plan:
        r = client.post("/api/v1/compounds", json={"smiles": _bowl(bridge, pattern),
                                                   "scaffold": "BWL-C" if bridge == "CH2" else "BWL-S"}, headers=h)
        assert r.status_code == 201, r.text
        code = r.json()["code"]
        codes.append(code)
        client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=h)
        if switches:
            loop = to_csv_bytes(miller_loop(10, 6, 50, 300), {"temperature": "300 K"})
            assert client.post(f"/api/v1/batches/{code}-B01/measurements", data={"kind": "pe_loop"},
                               files={"file": ("l.csv", loop)}, headers=h).status_code == 201
    return h, codes


def _reference(client, h, codes) -> pd.DataFrame:
    """Counts per (set of distinct chains, scaffold, verdict) from the API's compound records."""
    rows = []
    for code in codes:
        c = client.get(f"/api/v1/compounds/{code}", headers=h).json()
        distinct = sorted({(s["kind"], s["carbons"], s["branched"]) for s in c["side_chains"]})
        chains = ",".join(f"{k}:{n}{'b' if b else ''}" for k, n, b in distinct)
        rows.append({"chains": chains, "scaffold": c["scaffold"], "verdict": c["verdict"]})
    return pd.DataFrame(rows).groupby(["chains", "scaffold", "verdict"]).size()


def test_outcome_map_counts_mixtures_in_their_own_rows(client, session, campaign):
    h, codes = campaign
    login_as(client, session)
    page = soup(client.get("/outcomes").text)
    heads = [th.text for th in page.select("#outcome-map thead th")][1:]
    seen = {}
    for tr in page.select("#outcome-map tbody tr"):
        for col, td in zip(heads, tr.find_all("td")):
            a = td.find("a")
            if a is None:
                continue
            chains = parse_qs(urlsplit(a["href"]).query)["chains"][0]
            for line in a.select(".count-line"):
                n, short = line.text.split(" ", 1)
                seen[(chains, col, line["title"])] = int(n)
    labels = {tr.th.text for tr in page.select("#outcome-map tbody tr")}
    assert {"C12 alkoxy", "C2 alkoxy", "C2 / C12 alkoxy, mixed", "C8 / C8 branched alkoxy, mixed"} <= labels
    ref = _reference(client, h, codes)
    from server.verdict_codes import LABELS

    expected = {(chains, scaffold, LABELS[verdict]): int(n) for (chains, scaffold, verdict), n in ref.items()}
    assert seen == expected, (sorted(seen.items()), sorted(expected.items()))
    # The pure C12 row counts only the two pure C12 compounds, one switching, one not.
    c12 = {k: v for k, v in seen.items() if k[0] == "alkoxy:12"}
    assert sum(c12.values()) == 2


def test_each_cell_opens_exactly_what_it_counts(client, session, campaign):
    login_as(client, session)
    page = soup(client.get("/outcomes").text)
    for a in page.select("#outcome-map tbody td a"):
        counted = sum(int(line.text.split(" ", 1)[0]) for line in a.select(".count-line"))
        table = soup(client.get(a["href"]).text)
        assert len(table.select("table.registry tbody tr")) == counted, a["href"]
    by_bridge = soup(client.get("/outcomes?by=bridge").text)
    for a in by_bridge.select("#outcome-map tbody td a"):
        counted = sum(int(line.text.split(" ", 1)[0]) for line in a.select(".count-line"))
        assert len(soup(client.get(a["href"]).text).select("table.registry tbody tr")) == counted


def test_compound_without_scaffold_has_its_own_linked_column(client, session, campaign):
    h, _ = campaign
    r = client.post("/api/v1/compounds", json={"smiles": _bowl("Se", PURE12)}, headers=h)
    assert r.status_code == 201 and r.json()["scaffold"] is None
    login_as(client, session)
    page = soup(client.get("/outcomes").text)
    heads = [th.text for th in page.select("#outcome-map thead th")]
    assert "no scaffold" in heads
    col = heads.index("no scaffold") - 1
    row = next(tr for tr in page.select("#outcome-map tbody tr") if tr.th.text == "C12 alkoxy")
    link = row.find_all("td")[col].find("a")["href"]
    table = soup(client.get(link).text)
    assert len(table.select("table.registry tbody tr")) == 1


def test_explorer_leaves_mixtures_off_the_chain_length_axis(client, session, campaign):
    login_as(client, session)
    page = soup(client.get("/explorer?x=carbons&y=mw&group=chains").text)
    fig = json.loads(page.find("script", id="explorer-figure").string)
    names = {t["name"].rsplit(" (", 1)[0] for t in fig["data"] if t["mode"] == "markers"}
    assert not any("mixed" in n for n in names)  # carbons is undefined for a mixture
    assert "4 mixed-chain compounds left out" in page.select_one(".mixed-out").text
    # On axes defined for every molecule, mixtures are drawn, open, and say which chains they carry.
    page = soup(client.get("/explorer?x=mw&y=mw&group=chain_kind").text)
    fig = json.loads(page.find("script", id="explorer-figure").string)
    mixed = next(t for t in fig["data"] if t["mode"] == "markers" and t["name"].startswith("mixed"))
    assert all(s.endswith("-open") for s in mixed["marker"]["symbol"])
    assert {c[2] for c in mixed["customdata"]} == {"C2 / C12 alkoxy, mixed", "C8 / C8 branched alkoxy, mixed"}
    assert page.select_one(".mixed-out") is None


def test_chain_set_filter_parses_and_refuses_with_the_field():
    q = parse_view({"chains": "alkoxy:12, alkoxy:2"})
    assert q.values["chains"] == ChainSet((ChainType("alkoxy", 2, False), ChainType("alkoxy", 12, False)))
    assert q.link() == "chains=alkoxy%3A2%2Calkoxy%3A12"
    for bad in ("alkoxy", "ether:3", "alkoxy:x", ",".join(["alkoxy:1"] * 13)):
        with pytest.raises(InputError) as err:
            parse_view({"chains": bad})
        assert err.value.field == "chains"
