"""The report pack: a test unpacks the zip and checks each part (SQLite and PostgreSQL)."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import re
import zipfile

import pytest
from bs4 import BeautifulSoup

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.synth.ferro import miller_loop
from tests.api.test_outputs_figures import pdf_pages, svg_texts, upload
from tests.factories import bearer, make_token

CODE = "RVZ-00001"


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write", name="registrar"))


@pytest.fixture
def stocked(client, writer):
    """One invented compound with two loops, a permittivity scan, a DSC trace, an NMR rate table and a CIF."""
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC"}, headers=writer)
    batch = client.post(f"/api/v1/compounds/{CODE}/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    raws = {}
    # Miller et al., J. Appl. Phys. 68, 6463 (1990) analytic loops: Pr 8 and 6 uC/cm2, Ec 50 kV/cm.
    for t_K, pr in ((300, 8.0), (320, 6.0)):
        raw = to_csv_bytes(miller_loop(10, pr, 50, 300), {"temperature": f"{t_K} K", "frequency": "100 Hz"})
        raws[upload(client, batch, "pe_loop", raw, writer, filename=f"loop-{t_K}.csv")] = raw
    for kind in ("dielectric", "dsc", "nmr_rates", "crystal"):
        ex = KINDS[kind].example()
        raws[upload(client, batch, kind, ex.raw, writer, filename=ex.filename)] = ex.raw
    return raws


def unpack(data: bytes) -> dict[str, bytes]:
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        assert z.testzip() is None
        return {name.split("/", 1)[1]: z.read(name) for name in z.namelist()}


def test_report_pack_parts(client, writer, stocked):
    r = client.get(f"/api/v1/compounds/{CODE}/report.zip", headers=writer)
    assert r.status_code == 200 and r.headers["content-type"] == "application/zip"
    files = unpack(r.content)
    manifest = json.loads(files.pop("manifest.json"))
    # every file is listed with its checksum, and nothing else is in the zip
    listed = {f["path"]: f for f in manifest["files"]}
    assert set(listed) == set(files)
    for path, content in files.items():
        assert listed[path]["sha256"] == hashlib.sha256(content).hexdigest(), path
        assert listed[path]["size"] == len(content)
    # raw files byte for byte, their stored checksums and analysis versions in the manifest
    by_id = {m["id"]: m for m in manifest["measurements"]}
    assert set(by_id) == set(stocked)
    for mid, raw in stocked.items():
        [path] = [p for p in files if p.startswith(("raw/", "cif/")) and p.split("/")[1].startswith(f"{mid}-")]
        assert files[path] == raw and by_id[mid]["sha256"] == hashlib.sha256(raw).hexdigest()
        assert by_id[mid]["analysis_version"] == client.get(f"/api/v1/measurements/{mid}",
                                                            headers=writer).json()["analysis_version"]
    assert [p for p in files if p.startswith("cif/")] and all(p.startswith(("raw/", "cif/", "figures/", "tables/",
                                                                            "summary.")) for p in files)
    assert files[next(p for p in files if p.startswith("cif/"))].lstrip().startswith((b"data_", b"#"))
    # figures: SVG parses with its axis labels, PDF has one page; the switching figure of the two loops
    svgs = [p for p in files if p.endswith(".svg")]
    assert "figures/switching.svg" in svgs and len(svgs) == 6 + 1  # loops, dielectric, DSC, Eyring, cell + switching
    assert any(p.endswith("-crystal.svg") for p in svgs)  # the unit cell and packing
    for p in svgs:
        assert svg_texts(files[p])
        assert pdf_pages(files[p.removesuffix(".svg") + ".pdf"]) == 1
    assert "P (µC cm⁻²)" in svg_texts(next(files[p] for p in svgs if "pe_loop" in p))
    # tables: units in the headers, display precision
    rows = list(csv.DictReader(io.StringIO(files["tables/measurements.csv"].decode())))
    assert len(rows) == len(stocked)
    loop = next(r for r in rows if r["kind"] == "pe_loop" and r["T (K)"] == "300")
    assert float(loop["pe_loop Pr (µC/cm²)"]) == pytest.approx(8.0, rel=0.03)
    assert len(loop["pe_loop Pr (µC/cm²)"].replace(".", "").lstrip("0")) <= 4  # no 16-digit floats
    barrier = next(csv.DictReader(io.StringIO(files["tables/barriers.csv"].decode())))
    value, err = barrier["barrier (kcal mol-1)"], barrier["uncertainty (kcal mol-1)"]
    # JCGM 100:2008 7.2.6: the uncertainty with two significant digits, the value to the same decimal
    assert len(err.replace(".", "").lstrip("0")) == 2
    assert len(value.split(".")[-1] if "." in value else "") == len(err.split(".")[-1] if "." in err else "")
    transitions = list(csv.DictReader(io.StringIO(files["tables/transitions.csv"].decode())))
    assert {t["source"] for t in transitions} & {"dielectric peak"}
    # a DSC enthalpy carries its standard uncertainty, the value printed to its last digit (server/precision.py)
    dsc_rows = [t for t in transitions if t["source"].startswith("DSC")]
    assert dsc_rows and all(t["value uncertainty"] for t in dsc_rows)
    for t in dsc_rows:
        assert len(t["value"].partition(".")[2]) == len(t["value uncertainty"].partition(".")[2])
    # the one-page summary
    page = BeautifulSoup(files["summary.html"], "html.parser")
    assert page.h1.get_text().startswith(CODE) and page.find("svg")  # the structure drawing
    assert page.find(id="verdict")["data-code"] == client.get(f"/api/v1/compounds/{CODE}",
                                                              headers=writer).json()["verdict"]
    assert len(page.find(id="merit").find_all("tr")) == 1 + len(stocked)
    # the formula is presentation here: its counts are subscripts (the CSV tables keep plain text)
    formula_cell = next(th.find_next("td") for th in page.find_all("th") if th.get_text() == "Formula")
    assert [sub.get_text() for sub in formula_cell.find_all("sub")] and formula_cell.get_text().isalnum()
    assert pdf_pages(files["summary.pdf"]) == 1
    # a value with a standard error is printed as value ± error, the value to the error's last digit
    # (JCGM 100:2008, 7.2.6): the Eyring fit's ΔG‡(298 K) of the example rate table, in the table and the summary
    nmr = next(r for r in rows if r["kind"] == "nmr_rates")
    dg = nmr["nmr_rates ΔG‡(298 K) (kcal/mol)"]
    value, err = re.fullmatch(r"(\d+\.?\d*) ± (\d+\.?\d*)", dg).groups()
    assert len(err.replace(".", "").lstrip("0")) == 2 and len(value.partition(".")[2]) == len(err.partition(".")[2])
    assert abs(float(value) - 19.19) < 0.3  # dH 78.5 kJ/mol, dS -6 J/(mol K) (Eyring 1935; the kind's example)
    merit_rows = [tr.get_text(" ", strip=True) for tr in page.find(id="merit").find_all("tr")]
    assert any(f"ΔG‡(298 K) {value} ± {err} kcal mol⁻¹" in t for t in merit_rows), merit_rows


def test_report_pack_of_an_embargoed_compound_goes_only_to_members(client, session, writer, stocked):
    assert client.patch(f"/api/v1/compounds/{CODE}", json={"embargoed": True}, headers=writer).status_code == 200
    uploader = bearer(make_token(session, scope="upload", name="instrument-pc"))
    assert client.get(f"/api/v1/compounds/{CODE}/report.zip", headers=uploader).status_code == 403
    assert client.get(f"/api/v1/compounds/{CODE}/figures/switching.svg", headers=uploader).status_code == 404
    assert client.get(f"/api/v1/compounds/{CODE}/report.zip").status_code == 401
    assert client.get(f"/api/v1/compounds/{CODE}/report.zip", headers=writer).status_code == 200
