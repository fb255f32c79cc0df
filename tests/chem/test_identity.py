"""Structure parsing and identity against published identifiers and masses.

Reference values are independent of this code: PubChem compound records (InChIKey,
computed molecular weight and monoisotopic mass, formula) and the Hill rules
(E. A. Hill, J. Am. Chem. Soc. 22, 478 (1900)).
"""

from __future__ import annotations

import pytest
from rdkit import Chem

from server.chem.identity import hill_formula, identify, parse_structure
from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
from server.errors import ChemistryError

CAFFEINE_PUBCHEM_SMILES = "CN1C=NC2=C1C(=O)N(C(=O)N2C)C"  # PubChem CID 2519, canonical SMILES


def ident(text: str):
    return identify(parse_structure(text))


# ----------------------------------------------------------------------- identifiers


def test_benzene_standard_inchikey():
    # PubChem CID 241 (benzene); also the IUPAC InChI Trust standard InChIKey.
    assert ident("c1ccccc1").inchikey == "UHOVQNZJYSORNB-UHFFFAOYSA-N"
    assert ident("c1ccccc1").inchi == "InChI=1S/C6H6/c1-2-4-6-5-3-1/h1-6H"  # PubChem CID 241


def test_caffeine_standard_inchikey():
    # PubChem CID 2519 (caffeine).
    assert ident(CAFFEINE_PUBCHEM_SMILES).inchikey == "RYYVLZVUVIJVGH-UHFFFAOYSA-N"


@pytest.mark.parametrize(
    "smiles, mw",
    [
        ("c1ccccc1", 78.11),  # benzene, PubChem CID 241 computed molecular weight 78.11 g/mol
        (CAFFEINE_PUBCHEM_SMILES, 194.19),  # caffeine, PubChem CID 2519: 194.19 g/mol
        ("CCO", 46.07),  # ethanol, PubChem CID 702: 46.07 g/mol
    ],
)
def test_average_molar_mass(smiles, mw):
    assert ident(smiles).mw == pytest.approx(mw, abs=0.01)


def test_monoisotopic_mass_of_benzene():
    # PubChem CID 241: monoisotopic mass 78.046950192 Da.
    assert ident("c1ccccc1").exact_mass == pytest.approx(78.04695, abs=1e-5)


def test_monoisotopic_mass_differs_from_average_for_bromine():
    # Bromomethane, PubChem CID 6323: MW 94.94 g/mol, monoisotopic 93.94181 Da (79Br).
    result = ident("CBr")
    assert result.mw == pytest.approx(94.94, abs=0.01)
    assert result.exact_mass == pytest.approx(93.94181, abs=1e-4)


@pytest.mark.parametrize(
    "smiles, formula",
    [
        ("CCO", "C2H6O"),  # ethanol, PubChem CID 702
        (CAFFEINE_PUBCHEM_SMILES, "C8H10N4O2"),  # caffeine, PubChem CID 2519
        ("ClC(Cl)Cl", "CHCl3"),  # chloroform, PubChem CID 6212: C, H, then the rest alphabetically
        ("CBr", "CH3Br"),  # bromomethane, PubChem CID 6323
        ("O", "H2O"),  # no carbon: alphabetical (Hill 1900)
        ("Cl", "ClH"),  # hydrogen chloride: Cl before H without carbon (Hill 1900; PubChem CID 313 "ClH", memory)
        ("OS(=O)(=O)O", "H2O4S"),  # sulfuric acid: PubChem CID 1118 "H2O4S" (memory), alphabetical
        ("N", "H3N"),  # ammonia, PubChem CID 222 "H3N" (memory)
        ("[Na+].[Cl-]", "ClNa"),  # sodium chloride, PubChem CID 5234 "ClNa" (memory)
    ],
)
def test_hill_order(smiles, formula):
    assert ident(smiles).formula == formula


def test_formula_shows_net_charge():
    # Our convention (as RDKit's CalcMolFormula): the net charge follows the formula.
    assert hill_formula(Chem.MolFromSmiles("C[NH3+]")) == "CH6N+"
    assert hill_formula(Chem.MolFromSmiles("[O-]C(=O)C(=O)[O-]")) == "C2O4-2"


def test_counts_heavy_atoms_and_fragments():
    caffeine = ident(CAFFEINE_PUBCHEM_SMILES)
    assert caffeine.heavy_atoms == 14  # C8N4O2
    assert caffeine.fragments == 1
    salt = ident("C[NH3+].[Cl-]")
    assert salt.fragments == 2
    assert salt.formula == "CH6ClN"  # Hill: C, H, then Cl, N alphabetically


def test_to_dict_has_contract_keys():
    assert set(ident("CCO").to_dict()) == {
        "smiles", "inchi", "inchikey", "formula", "mw", "exact_mass", "heavy_atoms", "fragments"
    }


# ----------------------------------------------------------------------- duplicates


def test_aromatic_and_kekule_benzene_are_one_compound():
    a, b = ident("c1ccccc1"), ident("C1=CC=CC=C1")
    assert a.inchikey == b.inchikey
    assert a.smiles == b.smiles == "c1ccccc1"


def test_two_spellings_of_caffeine():
    a, b = ident(CAFFEINE_PUBCHEM_SMILES), ident("Cn1c(=O)c2c(ncn2C)n(C)c1=O")
    assert a.inchikey == b.inchikey
    assert a.smiles == b.smiles


def test_reordered_hexa_alkoxy_bowl_gives_same_key():
    built = build_from_scaffold(PARENT_BOWLS["CH2"], "alkoxy", 12)
    mol = Chem.MolFromSmiles(built)
    reordered = Chem.RenumberAtoms(mol, list(reversed(range(mol.GetNumAtoms()))))
    Chem.Kekulize(reordered, clearAromaticFlags=True)
    other_spelling = Chem.MolToSmiles(reordered, canonical=False, kekuleSmiles=True)
    assert other_spelling != built
    a, b = ident(built), ident(other_spelling)
    assert a.inchikey == b.inchikey
    assert a.smiles == b.smiles
    assert a.formula == "C93H156O6"  # C21H6 core + 6 x OC12H25 (counted by hand)


def test_molblock_gives_same_identity_as_smiles():
    mol = Chem.MolFromSmiles(CAFFEINE_PUBCHEM_SMILES)
    assert ident(Chem.MolToMolBlock(mol)).inchikey == "RYYVLZVUVIJVGH-UHFFFAOYSA-N"  # PubChem CID 2519
    assert ident(Chem.MolToV3KMolBlock(mol)).inchikey == "RYYVLZVUVIJVGH-UHFFFAOYSA-N"


def test_molblock_that_lost_its_blank_title_line_is_realigned():
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CCO"))
    assert block.startswith("\n")  # RDKit writes an empty title line
    assert ident(block.lstrip()).inchikey == "LFQSCWFLJHTTHZ-UHFFFAOYSA-N"  # ethanol, PubChem CID 702


def test_stereo_is_kept():
    # (R)- and (S)-alanine differ in InChIKey (PubChem CIDs 71080 and 5950).
    r, s = ident("C[C@@H](N)C(=O)O"), ident("C[C@H](N)C(=O)O")
    assert r.inchikey != s.inchikey
    assert s.inchikey == "QNAYBMKLOCPYGJ-REOHCLBHSA-N"  # L-alanine, PubChem CID 5950


# ----------------------------------------------------------------------- bad input


def raises(text: str) -> ChemistryError:
    with pytest.raises(ChemistryError) as info:
        parse_structure(text)
    return info.value


def test_empty_input():
    err = raises("")
    assert "No structure" in err.message
    assert raises("   \n ").field == "smiles"


def test_unclosed_ring_names_the_label_and_place():
    err = raises("C1CC")
    assert "unclosed ring" in err.message
    assert "'1' opened at character 2" in err.message
    assert err.field == "smiles"


def test_pentavalent_carbon_names_atom_and_valence():
    err = raises("C(C)(C)(C)(C)C")
    assert "Valence" in err.message
    assert "atom 1 (C" in err.message  # 1-based number and element
    assert "5 bonds" in err.message


def test_valence_error_on_nitrogen_gives_its_position():
    err = raises("OCC[N](C)(C)(C)C")
    assert "atom 4 (N, character 4 of the SMILES)" in err.message


def test_garbage_reports_syntax_error_position():
    err = raises("xyz")
    assert "syntax error" in err.message
    assert "character 1" in err.message


def test_unknown_bracket_atom():
    err = raises("C[Xx]C")
    assert "'[Xx]' is not valid" in err.message
    assert "never closed with ']'" in raises("C[CH5").message


def test_open_branch_reports_position():
    err = raises("CC(")
    assert "character 3" in err.message


def test_impossible_aromatic_ring():
    err = raises("c1cccc1")
    assert "Aromaticity" in err.message
    assert "atoms 1, 2, 3, 4, 5" in err.message


def test_attachment_points_are_rejected_as_scaffolds():
    err = raises("c1ccccc1[*:1]")
    assert "scaffold" in err.message


def test_identify_refuses_a_scaffold():
    with pytest.raises(ChemistryError):
        identify(Chem.MolFromSmiles("c1ccccc1[*:1]"))


def test_text_after_smiles_is_rejected():
    err = raises("CCO ethanol")
    assert "space at character 4" in err.message


def test_truncated_molblock_names_the_missing_lines():
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CCO"))
    lines = block.split("\n")
    err = raises("\n".join(lines[:6]))  # header, counts line (3 atoms), two atom lines
    assert err.field == "molblock"
    assert "truncated" in err.message
    assert "3 atoms but only 2" in err.message
    assert err.line == 7


def test_molblock_without_end_line():
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CCO"))
    err = raises(block.replace("M  END", ""))
    assert "M  END" in err.message


def test_molblock_with_bad_counts_line():
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CCO"))
    lines = block.split("\n")
    lines[3] = "  x" + lines[3][3:]
    err = raises("\n".join(lines))
    assert "counts line" in err.message
    assert err.line == 4


def test_molblock_bond_to_missing_atom():
    block = Chem.MolToMolBlock(Chem.MolFromSmiles("CCO"))
    lines = block.split("\n")
    lines[7] = "  1  9  1  0"
    err = raises("\n".join(lines))
    assert "atoms 1 and 9" in err.message


def test_multiline_text_that_is_not_a_molblock():
    err = raises("CCO\nCCN")
    assert err.field == "molblock"
    assert "V2000" in err.message
