"""SVG depictions: well-formed, inline-ready, self-contained, deterministic.

Checked structurally with the standard-library XML parser (the SVG 1.1 namespace is
http://www.w3.org/2000/svg, W3C SVG 1.1 Recommendation).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import pytest

from server.chem.draw import depict_svg, thumbnail_svg
from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.errors import ChemistryError

SVG = "{http://www.w3.org/2000/svg}"


def parse(svg: str) -> ET.Element:
    return ET.fromstring(svg)


def test_svg_is_inline_ready_and_sized():
    svg = depict_svg("c1ccccc1OC")
    assert svg.startswith("<svg")
    assert "<?xml" not in svg
    root = parse(svg)
    assert root.tag == f"{SVG}svg"
    assert root.get("width") == "300px" and root.get("height") == "220px"


@pytest.mark.parametrize("smiles", ["c1ccccc1OC", PARENT_BOWLS["Se"]])
def test_no_external_references(smiles):
    svg = depict_svg(smiles, legend="RMX-0001")
    root = parse(svg)
    for element in root.iter():
        assert element.tag not in (f"{SVG}image", f"{SVG}script", f"{SVG}use", f"{SVG}style")
        for name in element.attrib:
            assert not name.endswith("href")
    assert "url(" not in svg and "@import" not in svg


def test_same_input_same_svg():
    smiles = build_from_scaffold(PARENT_BOWLS["CH2"], "alkoxy", 6)
    assert depict_svg(smiles, legend="RMX-0002") == depict_svg(smiles, legend="RMX-0002")
    assert thumbnail_svg(smiles) == thumbnail_svg(smiles)


def test_legend_is_escaped_into_the_title():
    legend = 'RMX-0003 <b>"bowl" & co</b>'
    root = parse(depict_svg("CCO", legend=legend))
    titles = root.findall(f"{SVG}title")
    assert [t.text for t in titles] == [legend]
    assert root.findall(f".//{SVG}b") == []  # the markup did not become elements


def test_scaffold_draws_attachment_point_labels():
    svg = depict_svg(PARENT_BOWLS["S"])
    root = parse(svg)
    # Atoms 1..6 of the scaffold's 27 are drawn; the R labels are glyph paths classed by atom.
    labelled = {
        el.get("class") for el in root.iter(f"{SVG}path")
        if el.get("class") and " " not in el.get("class")
    }
    dummy_atoms = {f"atom-{i}" for i in _dummy_indices(PARENT_BOWLS["S"])}
    assert dummy_atoms <= labelled


def _dummy_indices(smiles: str) -> list[int]:
    from rdkit import Chem

    return [a.GetIdx() for a in Chem.MolFromSmiles(smiles).GetAtoms() if a.GetAtomicNum() == 0]


def test_thumbnail_is_small_with_thinner_bonds():
    big, small = depict_svg("c1ccccc1O"), thumbnail_svg("c1ccccc1O")
    root = parse(small)
    assert root.get("width") == "120px" and root.get("height") == "90px"

    def widths(svg: str) -> set[float]:
        return {float(w) for w in re.findall(r"stroke-width:([\d.]+)px", svg)}

    assert max(widths(small)) < min(widths(big))


def test_backgrounds():
    white = parse(depict_svg("CCO"))
    assert any("fill:#FFFFFF" in (r.get("style") or "") for r in white.iter(f"{SVG}rect"))
    clear = parse(depict_svg("CCO", background="transparent"))
    assert list(clear.iter(f"{SVG}rect")) == []
    with pytest.raises(ValueError):
        depict_svg("CCO", background="pink")


def test_accepts_a_molecule_and_leaves_it_alone():
    from rdkit import Chem

    mol = Chem.MolFromSmiles("c1ccccc1O")
    assert mol.GetNumConformers() == 0
    assert depict_svg(mol) == depict_svg("c1ccccc1O")
    assert mol.GetNumConformers() == 0


def test_bad_smiles_is_a_chemistry_error():
    with pytest.raises(ChemistryError):
        depict_svg("C1CC")
