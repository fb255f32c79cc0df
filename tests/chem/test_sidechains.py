"""Side-chain perception on hand-written structures (our own examples; the expected
classes follow from the IUPAC substituent names, counted by hand)."""

from __future__ import annotations

import pytest

from server.chem.identity import parse_structure
from server.chem.scaffold import PARENT_BOWLS, attach_side_chains, build_from_scaffold, side_chain_smiles
from server.chem.sidechains import SideChain, describe_side_chains, perceive_side_chains


def chains(smiles: str) -> list[SideChain]:
    return perceive_side_chains(parse_structure(smiles))


def summary(smiles: str) -> list[tuple[str, int, bool, int]]:
    return [(c.kind, c.carbons, c.branched, c.count) for c in chains(smiles)]


@pytest.mark.parametrize("bridge", ["CH2", "S", "Se"])
def test_hexa_dodecyloxy_bowl_is_one_entry_of_six(bridge):
    found = chains(build_from_scaffold(PARENT_BOWLS[bridge], "alkoxy", 12))
    assert [(c.kind, c.carbons, c.branched, c.count) for c in found] == [("alkoxy", 12, False, 6)]
    assert found[0].fragments == ("*OCCCCCCCCCCCC",)
    assert describe_side_chains(found) == "6 x C12 alkoxy (linear)"


def test_hand_written_hexamethoxy_sulfur_bowl():
    # Written out by hand (not built by the scaffold code): S-bridged bowl with six OCH3 on the rim.
    smiles = "COc1c(OC)c2sc3c(OC)c(OC)c4sc5c(OC)c(OC)c6sc1c1c2c3c4c5c61"
    assert summary(smiles) == [("alkoxy", 1, False, 6)]


@pytest.mark.parametrize("bridge", ["CH2", "S", "Se"])
def test_parent_bowls_have_no_side_chains(bridge):
    # Bridge atoms are in the core's five-membered rings: not substituents.
    parent = PARENT_BOWLS[bridge]
    for n in range(1, 7):
        parent = parent.replace(f"[*:{n}]", "[H]")
    assert chains(parent) == []


def test_mixed_octyloxy_and_hexylthio():
    o8, s6 = side_chain_smiles("alkoxy", 8), side_chain_smiles("alkylthio", 6)
    mixed = attach_side_chains(PARENT_BOWLS["CH2"], {1: o8, 2: s6, 3: o8, 4: s6, 5: o8, 6: s6})
    assert summary(mixed) == [("alkoxy", 8, False, 3), ("alkylthio", 6, False, 3)]
    assert describe_side_chains(chains(mixed)) == "3 x C8 alkoxy (linear), 3 x C6 alkylthio (linear)"


def test_branched_and_linear_mixture_description():
    o8 = side_chain_smiles("alkoxy", None, "2-ethylhexyl")
    s6 = side_chain_smiles("alkylthio", 6)
    mixed = attach_side_chains(PARENT_BOWLS["Se"], {1: o8, 2: s6, 3: o8, 4: s6, 5: o8, 6: s6})
    assert describe_side_chains(chains(mixed)) == "3 x C8 alkoxy (branched), 3 x C6 alkylthio (linear)"


def test_two_ethylhexyloxy_is_branched_alkoxy_c8():
    # 2-ethylhexyl: CH2 attached, CH(C2H5) at position 2, then C4: eight carbons.
    assert summary("CCCCC(CC)COc1ccccc1") == [("alkoxy", 8, True, 1)]


def test_methoxy_is_alkoxy_c1():
    assert summary("COc1ccccc1") == [("alkoxy", 1, False, 1)]


def test_ester_is_other():
    # Methoxycarbonyl: -C(=O)OCH3, two carbons, not an alkoxy.
    found = chains("COC(=O)c1ccccc1")
    assert [(c.kind, c.carbons, c.count) for c in found] == [("other", 2, 1)]
    assert found[0].fragments == ("*C(=O)OC",)


def test_acyloxy_is_other():
    # Acetoxy -OC(=O)CH3: the O is followed by a carbonyl carbon, not a saturated chain.
    assert summary("CC(=O)Oc1ccccc1") == [("other", 2, False, 1)]


def test_non_terminal_attachment_is_branched():
    # Isopropoxy (propan-2-yloxy): the O sits on the middle carbon.
    assert summary("CC(C)Oc1ccccc1") == [("alkoxy", 3, True, 1)]
    # Butan-2-yl on the ring.
    assert summary("CCC(C)c1ccccc1") == [("alkyl", 4, True, 1)]


def test_alkyl_and_alkylthio():
    assert summary("CCCCCCc1ccccc1") == [("alkyl", 6, False, 1)]
    assert summary("CC(C)(C)c1ccccc1") == [("alkyl", 4, True, 1)]  # tert-butyl
    assert summary("CCCCSc1ccccc1") == [("alkylthio", 4, False, 1)]


@pytest.mark.parametrize(
    "smiles, carbons",
    [
        ("COCCOc1ccccc1", 3),  # 2-methoxyethoxy: oxygen inside the chain
        ("C=CCOc1ccccc1", 3),  # allyloxy: unsaturated
        ("c1ccccc1-c1ccccc1", 6),  # phenyl on phenyl: the first ring found is the core
        ("C1CCC(CC1)Oc1ccccc1", 6),  # cyclohexyloxy: ring in the substituent
        ("Brc1ccccc1", 0),  # halogen
        ("Oc1ccccc1", 0),  # hydroxy: no chain after the O
        ("FC(F)(F)COc1ccccc1", 2),  # 2,2,2-trifluoroethoxy: fluorine in the chain
    ],
)
def test_other_substituents(smiles, carbons):
    assert summary(smiles) == [("other", carbons, False, 1)]


def test_ketone_bridge_oxygen_belongs_to_the_core():
    # Fluoren-9-one core: the C=O is in the five-membered ring; its O is a core feature.
    assert chains("O=C1c2ccccc2-c2ccccc21") == []
    # A methoxy on it is still found.
    assert summary("O=C1c2ccccc2-c2cc(OC)ccc21") == [("alkoxy", 1, False, 1)]


def test_counter_ion_is_not_a_substituent():
    assert summary("CCCCOc1ccc(cc1)[N+](C)(C)C.[Cl-]") == [
        ("alkoxy", 4, False, 1),
        ("other", 3, False, 1),
    ]


def test_sorted_by_count_then_kind_and_carbons():
    found = summary("CCOc1cc(OCC)c(Br)c(SC)c1OC")
    assert found == [
        ("alkoxy", 2, False, 2),
        ("alkoxy", 1, False, 1),
        ("alkylthio", 1, False, 1),
        ("other", 0, False, 1),
    ]


def test_halogens_of_equal_carbon_count_keep_their_fragments():
    found = chains("Brc1ccc(Cl)cc1")
    assert len(found) == 1 and found[0].count == 2
    assert found[0].fragments == ("*Br", "*Cl")
    assert describe_side_chains(found) == "2 x other C0 (*Br, *Cl)"


def test_explicit_hydrogens_are_ignored():
    from rdkit import Chem

    found = perceive_side_chains(Chem.AddHs(Chem.MolFromSmiles("CCCCOc1ccccc1")))
    assert [(c.kind, c.carbons, c.count, c.fragments) for c in found] == [("alkoxy", 4, 1, ("*OCCCC",))]


def test_no_ring_no_core():
    assert chains("CCCCCC") == []
    assert describe_side_chains([]) == "no side chains"


def test_to_dict():
    assert chains("COc1ccccc1")[0].to_dict() == {
        "kind": "alkoxy", "carbons": 1, "branched": False, "count": 1, "fragments": ["*OC"]
    }
