"""Paper freeze pages (issue 23, item 4): freeze from the form, the compound page says per freeze
whether current results differ and by how much, the publication form."""

from __future__ import annotations

from server.services.measurements import reanalyse
from tests.api.test_freezes import _changed_analysis
from tests.factories import bearer, login_as, make_token, soup
from tests.trust.conftest import loop_bytes


def test_freeze_from_the_form_and_see_what_moved(client, session, monkeypatch):
    w = bearer(make_token(session, scope="write", name="registrar"))
    code = client.post("/api/v1/compounds", json={"smiles": "c1ccc2ccccc2c1"}, headers=w).json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=w).json()["code"]
    mid = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                      files={"file": ("m.csv", loop_bytes(3), "text/csv")}, headers=w).json()["id"]
    csrf = login_as(client, session, role="member", name="mia")
    assert soup(client.get(f"/compounds/{code}").text).select_one("#freezes") is None  # nothing frozen yet
    bad = client.post("/freezes", data={"name": "ms", "compounds": "NOPE-1", "csrf_token": csrf})
    assert bad.status_code == 422 and soup(bad.text).select_one("p.error[role=alert]")
    r = client.post("/freezes", data={"name": "bowl-chains manuscript", "compounds": f"{code}\n", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303, r.text
    url = r.headers["location"]
    row = soup(client.get(f"/compounds/{code}").text).select_one("#freezes tr[data-freeze]")
    assert row["data-differs"] == "no" and "unchanged" in row.get_text()

    _changed_analysis(monkeypatch, 1.05)
    reanalyse(session=session, kind="pe_loop")
    row = soup(client.get(f"/compounds/{code}").text).select_one("#freezes tr[data-freeze]")
    assert row["data-differs"] == "yes" and "results by up to 5 %" in " ".join(row.get_text().split()), row.get_text()
    page = soup(client.get(url).text)
    cells = [td.get_text(strip=True) for td in page.select(f"table.freeze-diff tr[data-measurement='{mid}'] td")]
    assert any(c.startswith("Pr") for c in cells) and "5 %" in cells, cells

    r = client.post(url + "/publication", data={"dataset_doi": "10.5281/zenodo.1234567",
                                                "depositions": f"CCDC 2345678, {mid}\n", "csrf_token": csrf})
    assert r.status_code == 200  # followed the 303 back to the page
    facts = soup(client.get(url).text).select_one("dl.facts").get_text()
    assert "10.5281/zenodo.1234567" in facts and "CCDC 2345678" in facts
    r = client.post(url + "/publication", data={"dataset_doi": "nonsense", "csrf_token": csrf})
    assert r.status_code == 422 and "not a DOI" in soup(r.text).select_one("p.error").get_text()
