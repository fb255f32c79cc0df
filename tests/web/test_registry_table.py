"""The registry table (issue 22 item 6): the shared campaign prefix stated once in the caption, the short
code in each row with the full code in its link, title and accessible name; headers carry units."""

from __future__ import annotations

from server.precision import trade_unit
from server.web.format import shared_code_prefix, short_code
from tests.factories import bearer, login_as, make_token, soup


def test_shared_prefix_and_short_code():
    assert shared_code_prefix(["RVZ-00001", "RVZ-00012"]) == "RVZ-"
    assert shared_code_prefix(["RVZ-00001", "RMN-0004"]) == ""  # codes of an earlier prefix: no shared one
    assert shared_code_prefix([]) == ""
    assert short_code("RVZ-00012", "RVZ-") == "00012"
    assert short_code("RMN-0004", "RVZ-") == "RMN-0004" and short_code("RVZ-", "RVZ-") == "RVZ-"


def test_registry_rows_show_the_short_code_and_keep_the_full_one(client, session):
    h = bearer(make_token(session, scope="write"))
    codes = [client.post("/api/v1/compounds", json={"smiles": smi}, headers=h).json()["code"]
             for smi in ("COc1ccc(OCC)cc1OC", "COc1ccc(OCCC)cc1OC")]  # invented test ethers
    prefix = codes[0].split("-")[0] + "-"
    login_as(client, session)
    page = soup(client.get("/compounds").text)
    table = page.select_one("table.registry")
    assert prefix in table.caption.text
    for row in table.select("tbody tr"):
        link = row.find("td").find("a")
        full = row["data-code"]
        assert link.text == full.removeprefix(prefix) and full.startswith(prefix)
        assert link["href"] == f"/compounds/{full}" and link["title"] == full and link["aria-label"] == full
    assert sorted(r["data-code"] for r in table.select("tbody tr")) == sorted(codes)
    heads = [th.get_text(" ", strip=True) for th in table.select("thead th")]
    # Units as the trade prints them (server/precision.py: µC cm⁻², kcal mol⁻¹)
    # the largest Pr is a maximum over temperature: its header says each value comes with its own T
    assert f"Pr, largest ({trade_unit('µC/cm²')}) at T (K)" in heads
    pr_link = table.select_one("thead a#sort-pr")
    assert pr_link.get_text(" ", strip=True) == f"Pr, largest ({trade_unit('µC/cm²')}) at T (K)"
    assert "sort=pr" in pr_link["href"]
    assert any(h.startswith("ε′ peak T") and "(K)" in h for h in heads)
    assert any(h.startswith("Barrier") and f"({trade_unit('kcal/mol')})" in h for h in heads)
