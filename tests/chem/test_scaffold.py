"""Scaffolds, side-chain fragments and compounds built from them.

Expected formulae are counted by hand from the ring skeletons; molar masses are computed
by hand from the IUPAC 2021 abridged standard atomic weights (C 12.011, H 1.008,
S 32.06, Se 78.971; CIAAW, Pure Appl. Chem. 2022). RDKit's own table is slightly
older (S 32.067, Se 78.96), hence the 0.05 g/mol tolerance.
"""

from __future__ import annotations

import pytest
from rdkit import Chem
from rdkit.Chem import Descriptors

from server.chem.identity import identify, parse_structure
from server.chem.scaffold import (
    BRANCHED_FORMS,
    PARENT_BOWLS,
    attach_side_chains,
    build_from_scaffold,
    side_chain_smiles,
    validate_scaffold,
)
from server.chem.sidechains import perceive_side_chains
from server.errors import ChemistryError


def parent_mol(bridge: str) -> Chem.Mol:
    smiles = PARENT_BOWLS[bridge]
    for n in range(1, 7):
        smiles = smiles.replace(f"[*:{n}]", "[H]")
    return Chem.MolFromSmiles(smiles)


@pytest.mark.parametrize(
    "bridge, formula, mw",
    [
        ("CH2", "C21H12", 21 * 12.011 + 12 * 1.008),  # 264.327 g/mol
        ("S", "C18H6S3", 18 * 12.011 + 6 * 1.008 + 3 * 32.06),  # 318.426 g/mol
        ("Se", "C18H6Se3", 18 * 12.011 + 6 * 1.008 + 3 * 78.971),  # 459.159 g/mol
    ],
)
def test_parent_bowls_formula_and_mass(bridge, formula, mw):
    mol = parent_mol(bridge)
    assert identify(mol).formula == formula
    assert Descriptors.MolWt(mol) == pytest.approx(mw, abs=0.05)
    info = validate_scaffold(PARENT_BOWLS[bridge])
    assert info.parent_formula == formula
    assert info.attachment_points == 6


@pytest.mark.parametrize("bridge", ["CH2", "S", "Se"])
def test_parent_bowl_ring_skeleton(bridge):
    # Central benzene hub + three outer benzo rings + three five-membered bridge rings.
    mol = parent_mol(bridge)
    sizes = sorted(len(r) for r in mol.GetRingInfo().AtomRings())
    assert sizes == [5, 5, 5, 6, 6, 6, 6]
    ring_info = mol.GetRingInfo()
    # Six hub atoms, each shared by the hub, one benzo ring and one bridge ring.
    assert sum(1 for a in mol.GetAtoms() if ring_info.NumAtomRings(a.GetIdx()) == 3) == 6
    # C3 symmetry: the three bridge atoms are one symmetry class.
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    element = {"CH2": 6, "S": 16, "Se": 34}[bridge]
    bridge_atoms = [
        a.GetIdx() for a in mol.GetAtoms()
        if a.GetAtomicNum() == element and ring_info.NumAtomRings(a.GetIdx()) == 1 and a.IsInRingSize(5)
    ]
    assert len(bridge_atoms) == 3
    assert len({ranks[i] for i in bridge_atoms}) == 1


@pytest.mark.parametrize(
    "bridge, label, core",
    [("CH2", "CH2", "C21H6"), ("S", "S", "C18S3"), ("Se", "Se", "C18Se3")],
)
def test_bridge_guess_and_core_formula(bridge, label, core):
    info = validate_scaffold(PARENT_BOWLS[bridge])
    assert info.bridge == label
    assert info.bridges == (label,) * 3
    assert info.core_formula == core  # six open valences where the side chains go


@pytest.mark.parametrize(
    "smiles, label",
    [
        ("O=C1c2ccccc2-c2cc([*:1])ccc21", "C=O"),  # fluorenone-type ketone bridge
        ("c1ccc2c(c1)[nH]c1cc([*:1])ccc12", "NH"),  # carbazole-type NH bridge
    ],
)
def test_other_bridge_labels(smiles, label):
    assert validate_scaffold(smiles).bridge == label


def test_scaffold_canonical_smiles_is_spelling_independent():
    a = validate_scaffold("c1cc([*:1])ccc1[*:2]")
    b = validate_scaffold("[*:2]c1ccc([*:1])cc1")
    assert a.smiles == b.smiles
    assert a.parent_formula == "C6H6"


@pytest.mark.parametrize(
    "smiles, words",
    [
        ("c1ccccc1", "no attachment points"),
        ("[*:1]c1ccc([*:1])cc1", "used more than once"),
        ("*c1ccccc1", "has no number"),
        ("[*:1]c1ccc([*:3])cc1", "without gaps"),
        ("C1CC[*:1]", "unclosed ring"),
        ("", "No structure"),
    ],
)
def test_bad_scaffolds(smiles, words):
    with pytest.raises(ChemistryError) as info:
        validate_scaffold(smiles)
    assert words in info.value.message
    assert info.value.field == "scaffold"


def test_linear_fragments():
    assert side_chain_smiles("alkoxy", 6) == "[*:1]OCCCCCC"
    assert side_chain_smiles("alkylthio", 1) == "[*:1]SC"
    assert side_chain_smiles("alkyl", 30) == "[*:1]" + "C" * 30
    assert side_chain_smiles("alkoxy", 4, "linear") == "[*:1]OCCCC"


@pytest.mark.parametrize(
    "name, carbons",
    # Carbon counts read from the IUPAC names (IUPAC 2013, P-29).
    [("isopropyl", 3), ("isobutyl", 4), ("sec-butyl", 4), ("tert-butyl", 4),
     ("2-ethylhexyl", 8), ("3,7-dimethyloctyl", 10), ("2-butyloctyl", 12)],
)
def test_branched_forms_have_the_carbons_their_names_say(name, carbons):
    fragment = Chem.MolFromSmiles(side_chain_smiles("alkyl", None, name))
    assert sum(1 for a in fragment.GetAtoms() if a.GetAtomicNum() == 6) == carbons
    assert side_chain_smiles("alkyl", carbons, name) == side_chain_smiles("alkyl", None, name)
    assert name in BRANCHED_FORMS


@pytest.mark.parametrize(
    "name, hand_written",
    [
        # Hand-written aryl ethers of each named group, written from the IUPAC name.
        ("2-ethylhexyl", "CCCCC(CC)COc1ccccc1"),
        ("3,7-dimethyloctyl", "CC(C)CCCC(C)CCOc1ccccc1"),
        ("2-butyloctyl", "CCCCCCC(CCCC)COc1ccccc1"),
        ("sec-butyl", "CCC(C)Oc1ccccc1"),
        ("isobutyl", "CC(C)COc1ccccc1"),
    ],
)
def test_branched_forms_are_the_named_groups(name, hand_written):
    built = build_from_scaffold("[*:1]c1ccccc1", "alkoxy", None, name)
    assert identify(parse_structure(built)).inchikey == identify(parse_structure(hand_written)).inchikey


@pytest.mark.parametrize(
    "args, words",
    [
        (("alkenyl", 6), "Unknown side-chain kind"),
        (("alkoxy", 0), "1 to 30"),
        (("alkoxy", 31), "1 to 30"),
        (("alkoxy", None), "number of carbons"),
        (("alkoxy", 6, "2-ethylhexyl"), "has 8 carbons, not 6"),
        (("alkoxy", None, "neopentyl"), "Unknown branched form"),
        (("alkoxy", 2.5), "whole number"),
    ],
)
def test_bad_side_chains(args, words):
    with pytest.raises(ChemistryError) as info:
        side_chain_smiles(*args)
    assert words in info.value.message
    assert info.value.field == "side_chain"


def test_hexamethoxy_sulfur_bowl_formula():
    # C18H6S3 with six H replaced by OCH3: C24H18O6S3 (counted by hand).
    built = build_from_scaffold(PARENT_BOWLS["S"], "alkoxy", 1)
    assert identify(parse_structure(built)).formula == "C24H18O6S3"
    hand_written = "COc1c(OC)c2sc3c(OC)c(OC)c4sc5c(OC)c(OC)c6sc1c1c2c3c4c5c61"
    assert built == Chem.MolToSmiles(Chem.MolFromSmiles(hand_written))


@pytest.mark.parametrize("bridge", ["CH2", "S", "Se"])
@pytest.mark.parametrize(
    "kind, carbons, form",
    [("alkoxy", 10, None), ("alkylthio", 6, None), ("alkyl", None, "2-ethylhexyl")],
)
def test_built_compounds_perceive_back(bridge, kind, carbons, form):
    built = build_from_scaffold(PARENT_BOWLS[bridge], kind, carbons, form)
    found = perceive_side_chains(parse_structure(built))
    expected_carbons = carbons if carbons is not None else BRANCHED_FORMS[form][1]
    assert [(c.kind, c.carbons, c.branched, c.count) for c in found] == [
        (kind, expected_carbons, form is not None, 6)
    ]


def test_attach_leaves_a_position_as_hydrogen():
    built = attach_side_chains("[*:1]c1ccc([*:2])cc1", {1: "[*:1]OC", 2: "[*:1][H]"})
    assert built == Chem.MolToSmiles(Chem.MolFromSmiles("COc1ccccc1"))


def test_attach_needs_every_position():
    with pytest.raises(ChemistryError) as info:
        attach_side_chains("[*:1]c1ccc([*:2])cc1", {1: "[*:1]OC"})
    assert "attachment point(s) 2" in info.value.message
    with pytest.raises(ChemistryError) as info:
        attach_side_chains("[*:1]c1ccccc1", {1: "OC"})
    assert "exactly one attachment point" in info.value.message


def test_parent_bowl_keys_are_the_bridges():
    # Contract with the registry pages: keys name the bridge, nothing else.
    assert set(PARENT_BOWLS) == {"CH2", "S", "Se"}
