"""The phase map on the compound page (SQLite and PostgreSQL): a CIF, a matching powder pattern and an SHG run
give one identified phase with its criteria; the figure is a plotly document."""

from __future__ import annotations

import json

import numpy as np

from server.ingest.table import to_csv_bytes
from server.kinds.base import EXAMPLE_SMILES
from server.kinds.pxrd import example_structure
from server.synth.pxrd import powder_pattern
from server.synth.shg import shg_run
from tests.factories import bearer, login_as, make_token, soup


def _post(client, batch, kind, raw, headers, filename="data.csv"):
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind},
                    files={"file": (filename, raw, "text/csv")}, headers=headers)
    assert r.status_code == 201, r.text
    return r.json()


def test_phase_map_names_the_crystal_phase_and_its_criteria(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    code = client.post("/api/v1/compounds", json={"smiles": EXAMPLE_SMILES}, headers=writer).json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    login_as(client, session)
    assert soup(client.get(f"/compounds/{code}").text).select_one("section.phase-map") is None
    cif = _post(client, batch, "crystal", example_structure(), writer, "form1.cif")
    pattern = powder_pattern([(example_structure(), 1.0)], rng=np.random.default_rng(1), zero_shift_deg=0.04)
    _post(client, batch, "pxrd", to_csv_bytes(pattern, {"temperature": "160 K", "wavelength": "Cu Ka1"}), writer)
    run = shg_run(np.arange(150.0, 201.0, 10.0), tc_K=400.0, ratio_at_first=0.5, rng=np.random.default_rng(2))
    _post(client, batch, "shg", to_csv_bytes(run, {"reference": "alpha-quartz powder", "detection limit": "0.01"}),
          writer)
    page = soup(client.get(f"/compounds/{code}").text)
    section = page.select_one("section.phase-map")
    assert section is not None and "not polarity" in section.select_one("p.note").text
    fig = json.loads(section.select_one("#phase-map-figure").string)
    names = {t.get("name") for t in fig["data"]}
    assert {"CIF", "powder pattern", "SHG"} <= names
    rows = section.select("table.phases-identified tbody tr")
    assert len(rows) == 1
    cells = rows[0].find_all("td")
    assert cells[2].text.strip() == f"crystal, P21 (CIF #{cif['id']})"
    texts = [li.text for li in cells[3].select("li")]
    assert any("matches CIF #" in t for t in texts) and any("consistent with a polar phase" in t for t in texts)
    assert cells[4].text.strip() == "none"
