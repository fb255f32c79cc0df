"""The comparison page and its vector figure without a browser (SQLite and PostgreSQL)."""

from __future__ import annotations

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.synth.ferro import miller_loop
from tests.api.test_outputs_figures import pdf_pages, svg_texts
from tests.factories import bearer, login_as, make_token, soup


def _stock(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    codes = []
    for i, smiles in enumerate(("COc1ccc(OC)cc1", "COc1ccc(OC)c(C)c1")):  # invented test ethers
        code = client.post("/api/v1/compounds", json={"smiles": smiles}, headers=writer).json()["code"]
        batch = client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=writer).json()["code"]
        # Miller et al., J. Appl. Phys. 68, 6463 (1990) analytic loops
        raw = to_csv_bytes(miller_loop(10, 8 - 2 * i, 50, 300), {"temperature": "300 K", "frequency": "100 Hz"})
        client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                    files={"file": ("loop.csv", raw, "text/csv")}, headers=writer)
        ex = KINDS["dielectric"].example()
        if i == 0:
            client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "dielectric"},
                        files={"file": (ex.filename, ex.raw, "text/csv")}, headers=writer)
        codes.append(code)
    return codes


def test_compare_page_table_and_figures(client, session):
    codes = _stock(client, session)
    login_as(client, session)
    q = f"codes={','.join(codes)}&kind=pe_loop"
    page = soup(client.get(f"/compare?{q}").text)
    assert [a.get_text() for a in page.select("#compare-table tbody tr td:first-child a")] == codes
    assert page.find(id="compare-figure") is not None
    texts = svg_texts(client.get(f"/compare.svg?{q}").content)
    assert "E (kV cm⁻¹)" in texts and all(c in texts for c in codes)  # one legend entry per compound
    assert pdf_pages(client.get(f"/compare.pdf?{q}").content) == 1
    # the second compound has no permittivity scan: said so
    dielectric = soup(client.get(f"/compare?codes={','.join(codes)}&kind=dielectric").text)
    assert len(dielectric.select("#compare-table tbody tr")) == 1 and codes[1] in dielectric.get_text()
    # on T/Tc: Tc from the compound's own permittivity peak (the example scan peaks near 430 K)
    reduced = soup(client.get(f"/compare?codes={','.join(codes)}&kind=dielectric&reduced=true").text)
    tc = float(reduced.select("#compare-table tbody tr td")[3].get_text())
    assert 380 < tc < 480
    assert "T/Tc" in svg_texts(client.get(f"/compare.svg?codes={','.join(codes)}&kind=dielectric&reduced=true").content)
    assert client.get(f"/compare?codes={codes[0]}&kind=pe_loop").status_code == 422  # one code is not a comparison
    assert client.get(f"/compare?codes={','.join(codes)}&kind=nothing").status_code == 422
    assert client.get(f"/compare?{q}&reduced=true").status_code == 422  # loops have no temperature axis


def test_compare_takes_each_compounds_latest_loop(client, session):
    """Several specimens of one batch, loops stored on different days: the row and the overlaid curve are
    the most recently stored loop's, not the first one listed (issue 22 item 2 follow-up)."""
    from datetime import datetime, timezone

    from server.models import Measurement

    writer = bearer(make_token(session, scope="write", name="registrar"))
    codes, newest = [], {}
    for i, smiles in enumerate(("COc1ccc(OC)cc1", "COc1ccc(OC)c(C)c1")):  # invented test ethers
        code = client.post("/api/v1/compounds", json={"smiles": smiles}, headers=writer).json()["code"]
        batch = client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=writer).json()["code"]
        specimens = [client.post(f"/api/v1/batches/{batch}/samples", json={"form": "pellet"}, headers=writer)
                     .json()["code"] for _ in range(2)]
        ids = []
        for day, (specimen, t_K) in enumerate(zip(specimens + specimens, (280, 290, 300, 310))):
            # Miller et al., J. Appl. Phys. 68, 6463 (1990) analytic loops, one per day and temperature
            raw = to_csv_bytes(miller_loop(10, 8 - 2 * i, 50, 300), {"temperature": f"{t_K} K", "frequency": "100 Hz"})
            r = client.post(f"/api/v1/samples/{specimen}/measurements", data={"kind": "pe_loop"},
                            files={"file": (f"loop-{t_K}.csv", raw, "text/csv")}, headers=writer)
            assert r.status_code == 201, r.text
            m = session.get(Measurement, r.json()["id"])
            m.created_at = datetime(2026, 11, 2 + day, 9, 30, tzinfo=timezone.utc)
            session.add(m)
            session.commit()  # release the SQLite write lock before the next upload
            ids.append(m.id)
        codes.append(code)
        newest[code] = (ids[-1], "310")
    login_as(client, session)
    page = soup(client.get(f"/compare?codes={','.join(codes)}&kind=pe_loop").text)
    rows = [[td.get_text(strip=True) for td in tr.select("td")[:3]] for tr in page.select("#compare-table tbody tr")]
    assert rows == [[c, f"#{newest[c][0]}", newest[c][1]] for c in codes]
