"""Vector figures through the API: each endpoint answers a file that parses, with the axis labels
as the trade writes them (SQLite and PostgreSQL)."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import pytest

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.synth.ferro import miller_loop
from tests.factories import bearer, make_token

SVG_NS = "{http://www.w3.org/2000/svg}"


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write", name="registrar"))


@pytest.fixture
def batch(client, writer):
    # An invented hexa-methoxy benzene test compound.
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC"}, headers=writer)
    return client.post("/api/v1/compounds/RVZ-00001/batches", json={"chemist": "lab"}, headers=writer).json()["code"]


def upload(client, batch, kind, raw, headers, filename="data.csv"):
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": kind},
                    files={"file": (filename, raw, "text/csv")}, headers=headers)
    assert r.status_code == 201, r.text
    return r.json()["id"]


def svg_texts(data: bytes) -> str:
    """Every text of an SVG (it must parse as XML, with the SVG namespace at its root)."""
    root = ET.fromstring(data)
    assert root.tag == f"{SVG_NS}svg"
    return " ".join("".join(el.itertext()) for el in root.iter(f"{SVG_NS}text"))


def pdf_pages(data: bytes) -> int:
    """Page count of a PDF written by matplotlib (its page tree is not compressed)."""
    assert data.startswith(b"%PDF-1.") and data.rstrip().endswith(b"%%EOF")
    return len(re.findall(rb"/Type\s*/Page\b", data))


# Units as printed (SI Brochure, 9th ed., BIPM 2019, 5.4.6: negative exponents), per kind.
EXPECTED_LABELS = {
    "pe_loop": ("E (kV cm⁻¹)", "P (µC cm⁻²)"),
    "pund": ("t (s)",),
    "dielectric": ("T (K)", "ε′", "tan δ"),
    "dsc": ("T (K)", "W g⁻¹"),
    "crystal": ("(Å)", "unit cell"),
    "nmr_rates": ("1000/T (K⁻¹)", "ln(k/T)"),
}


@pytest.mark.parametrize("kind", sorted(EXPECTED_LABELS))
def test_measurement_figure_svg_and_pdf(client, batch, writer, kind):
    example = KINDS[kind].example()
    mid = upload(client, batch, kind, example.raw, writer, filename=example.filename)
    svg = client.get(f"/api/v1/measurements/{mid}/figure.svg", headers=writer)
    assert svg.status_code == 200 and svg.headers["content-type"].startswith("image/svg+xml")
    texts = svg_texts(svg.content)
    for label in EXPECTED_LABELS[kind]:
        assert label in texts, (label, texts[:400])
    assert "uC" not in texts  # never the ASCII stand-in for µ
    # 8.5 cm single-column width, give or take the tight bounding box (about 0.3 cm)
    width_pt = float(ET.fromstring(svg.content).get("width").removesuffix("pt"))
    assert 7.5 <= width_pt / 72 * 2.54 <= 9.5
    pdf = client.get(f"/api/v1/measurements/{mid}/figure.pdf", headers=writer)
    assert pdf.status_code == 200 and pdf.headers["content-type"] == "application/pdf"
    assert pdf_pages(pdf.content) == 1


def test_figure_needs_a_reader_and_an_existing_figure(client, batch, writer):
    example = KINDS["elemental"].example()
    mid = upload(client, batch, "elemental", example.raw, writer, filename=example.filename)
    assert client.get(f"/api/v1/measurements/{mid}/figure.svg").status_code == 401
    assert client.get(f"/api/v1/measurements/{mid}/figure.svg", headers=writer).status_code == 404  # no figure
    assert client.get("/api/v1/measurements/999/figure.pdf", headers=writer).status_code == 404


def test_no_figure_of_an_embargoed_compound_for_a_caller_who_may_not_see_it(client, session, writer):
    """A crystal's figure draws its atoms: like its raw file, it is withheld under embargo (server/access.py)."""
    r = client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OCC", "embargoed": True},
                    headers=writer)  # an invented test compound
    code = r.json()["code"]
    b = client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=writer).json()["code"]
    example = KINDS["crystal"].example()
    mid = upload(client, b, "crystal", example.raw, writer, filename=example.filename)
    assert client.get(f"/api/v1/measurements/{mid}/figure.svg", headers=writer).status_code == 200
    for scope in ("upload", "read"):
        other = bearer(make_token(session, scope=scope, name=f"pc-{scope}"))
        for fmt in ("svg", "pdf"):
            assert client.get(f"/api/v1/measurements/{mid}/figure.{fmt}", headers=other).status_code == 404


def test_compound_switching_figure(client, batch, writer):
    code = "RVZ-00001"
    assert client.get(f"/api/v1/compounds/{code}/figures/switching.svg", headers=writer).status_code == 404
    # Miller et al., J. Appl. Phys. 68, 6463 (1990) analytic loops at two temperatures, Pr falling on heating.
    for t_K, pr in ((300, 8.0), (320, 6.0)):
        raw = to_csv_bytes(miller_loop(10, pr, 50, 300), {"temperature": f"{t_K} K", "frequency": "100 Hz"})
        upload(client, batch, "pe_loop", raw, writer, filename=f"loop-{t_K}.csv")
    svg = client.get(f"/api/v1/compounds/{code}/figures/switching.svg", headers=writer)
    assert svg.status_code == 200
    texts = svg_texts(svg.content)
    assert "T (K)" in texts and "Pr (µC cm⁻²)" in texts and "Ec (kV cm⁻¹)" in texts
    pdf = client.get(f"/api/v1/compounds/{code}/figures/switching.pdf", headers=writer)
    assert pdf_pages(pdf.content) == 1
    assert client.get(f"/api/v1/compounds/{code}/figures/nothing.svg", headers=writer).status_code == 404
