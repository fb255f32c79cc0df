"""Matching structures against scaffolds (pure RDKit; no database)."""

from __future__ import annotations

from rdkit import Chem

from seed_demo import scenario
from seed_demo.planning import hexol_smiles
from server.chem.identity import parse_structure
from server.chem.scaffold import (PARENT_BOWLS, attach_side_chains, build_from_scaffold, describe_match,
                                  match_scaffold, match_scaffolds)

SCAFFOLDS = {bowl.code: bowl.smiles for bowl in scenario.BOWLS.values()}


def test_every_demo_structure_is_built_on_its_own_scaffold_and_no_other():
    plan = scenario.build()
    for c in plan.compounds:
        found = match_scaffolds(parse_structure(c.smiles), SCAFFOLDS)
        assert [m.code for m in found] == [c.bowl.code], c.smiles
        # six substituted attachment points, each one of the compound's own two chains
        chains = {Chem.MolToSmiles(Chem.MolFromSmiles(ch.smiles.replace("[*:1]", "*"))) for ch in c.chains}
        assert {s for _, s in found[0].substituents} <= chains
        assert found[0].substituted() == 6
    for key, bowl in scenario.BOWLS.items():  # the planning targets (hexols) too
        assert [m.code for m in match_scaffolds(parse_structure(hexol_smiles(key)), SCAFFOLDS)] == [bowl.code]


def test_a_pasted_se_bowl_without_any_scaffold_named_is_found():
    # The case of the issue: a Se-bridged bowl pasted as a plain, non-canonical SMILES.
    smiles = build_from_scaffold(PARENT_BOWLS["Se"], "alkoxy", 8)
    pasted = Chem.MolToSmiles(Chem.MolFromSmiles(smiles), canonical=False, doRandom=True)
    found = match_scaffolds(parse_structure(pasted), SCAFFOLDS)
    assert [m.code for m in found] == ["TB-SE"]
    assert dict(found[0].substituents) == {n: "*OCCCCCCCC" for n in range(1, 7)}


def test_unsubstituted_points_are_hydrogen_and_the_parent_matches():
    parent = attach_side_chains(PARENT_BOWLS["S"], {n: "[*:1][H]" for n in range(1, 7)})
    m = match_scaffold(parse_structure(parent), "TB-S", PARENT_BOWLS["S"])
    assert m is not None and m.substituted() == 0 and m.core_atoms == 21  # C18S3 counted by hand


def test_a_substituent_off_the_attachment_points_is_no_match():
    # A methyl on one CH2 bridge: the core is there, but something hangs where the scaffold has no [*:n].
    methylated = PARENT_BOWLS["CH2"].replace("C1c2", "CC1c2", 1)
    mol = parse_structure(attach_side_chains(methylated, {n: "[*:1]OC" for n in range(1, 7)}))
    assert match_scaffold(mol, "TB-CH2", PARENT_BOWLS["CH2"]) is None


def test_the_largest_of_several_matching_scaffolds_is_chosen_and_said():
    # A second scaffold that is the S bowl with an oxygen at every attachment point (an "alkoxy bowl"):
    # a hexa-ethoxy S bowl is built on both; the larger core (27 heavy atoms, not 21) is chosen.
    oxy = PARENT_BOWLS["S"]
    for n in range(1, 7):
        oxy = oxy.replace(f"[*:{n}]", f"O[*:{n}]")
    table = {"TB-S": PARENT_BOWLS["S"], "TB-S-O": oxy}
    found = match_scaffolds(parse_structure(build_from_scaffold(PARENT_BOWLS["S"], "alkoxy", 2)), table)
    assert [m.code for m in found] == ["TB-S-O", "TB-S"]
    assert found[0].core_atoms == 27 and found[1].core_atoms == 21  # C18S3 + 6 O, counted by hand
    assert dict(found[0].substituents)[1] == "*CC" and dict(found[1].substituents)[1] == "*OCC"
    words = describe_match(found)
    assert "TB-S-O" in words and "also matches TB-S (21)" in words and "largest" in words
    assert describe_match([]) == "built on no registered scaffold"
