"""The pages take what they say about a kind from its module: upload hints, result labels, summaries."""

from __future__ import annotations

import re

from server.ingest.conditions import CONDITION_EXAMPLES
from server.kinds import KINDS, needed_by
from server.kinds.base import EXAMPLE_SMILES
from tests.factories import login_as, soup


def test_upload_page_hints_come_from_the_kind_modules(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": EXAMPLE_SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    page = soup(client.get("/batches/RVZ-00001-B01/upload").text)
    for field, kinds in needed_by().items():
        control = page.find(attrs={"name": field})
        assert control is not None, field
        hint = control.find_parent("label").find("small", class_="hint").text
        assert hint == ", ".join(kinds), field
        if field in CONDITION_EXAMPLES and control.name == "input":
            assert control["placeholder"] == CONDITION_EXAMPLES[field]
    assert needed_by()["mass"] == ("dsc",) and "pe_loop" in needed_by()["area"]
    rows = {tr.find("code").text: [td.text for td in tr.find_all("td")[1:]] for tr in page.select("section table tbody tr")}
    assert rows == {k.name: [k.columns, k.needs_text] for k in KINDS.values()}


def test_measurement_and_compound_pages_use_the_kinds_labels(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": EXAMPLE_SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    ids = {}
    for name in ("pe_loop", "nmr_rates", "dielectric_spectrum"):
        ex = KINDS[name].example()
        r = client.post("/batches/RVZ-00001-B01/upload", data={"kind": name, "csrf_token": csrf},
                        files={"file": (ex.filename, ex.raw)}, follow_redirects=False)
        assert r.status_code == 303, r.text
        ids[name] = r.headers["location"]
    page = soup(client.get(ids["nmr_rates"]).text)
    rows = {tr.th.text: [td.text for td in tr.find_all("td")] for tr in page.select("table.results tr")}
    label = KINDS["nmr_rates"].result_key("dg298_kcal_mol")
    # the kind declares kcal/mol; the page prints it as the trade does, with a narrow no-break space
    assert (label.unit, rows[label.label][1]) == ("kcal/mol", "kcal\u202fmol⁻¹")
    # dH = 78.5 kJ/mol, dS = -6 J/(mol K): dG(298.15 K) = (78.5 + 1.789) / 4.184 = 19.19 kcal/mol (Eyring 1935)
    value, err = rows[label.label][0].split("±")  # digits follow the standard error (JCGM 100:2008, 7.2.6)
    assert abs(float(value) - 19.19) < 0.3 and float(err) > 0
    assert "ΔG‡(298 K) error" not in rows  # folded into the value's row
    compound = soup(client.get("/compounds/RVZ-00001").text)
    cells = [tr.find_all("td")[4].text for tr in compound.select("#measurements tbody tr")]
    assert any(c.startswith("Pr ") and "µC\u202fcm⁻²" in c and ", Ec " in c for c in cells), cells
    assert any(c.startswith("ΔG‡(298 K) ") and c.endswith("kcal\u202fmol⁻¹") for c in cells), cells
    # The solid-state Ea beside the solution dH++: the examples' models give Ea 40 kJ/mol = 9.56 kcal/mol
    # (Arrhenius relaxation) and dH++ 78.5 kJ/mol = 18.76 kcal/mol (Eyring rates), 1 cal = 4.184 J.
    sv = compound.find(id="solid-vs-solution")
    assert sv is not None and sv.find("a")["href"] == ids["dielectric_spectrum"].rstrip("/")
    numbers = [float(x) for x in re.findall(r"(?<![\w#])−?-?\d+\.\d+", sv.text.replace("−", "-"))]
    assert abs(numbers[0] - 9.56) < 0.1 and abs(numbers[2] - 18.76) < 0.5
    assert abs(numbers[4] - (numbers[0] - numbers[2])) < 0.02
