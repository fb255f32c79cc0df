"""core_atoms on the parent bowls: hub and rim as the geometry module defines them.

Expected atoms are found here from RDKit ring membership and hydrogen counts, independently
of the geometry code: hub atoms are the six atoms shared by three rings (central benzene,
one benzo ring, one bridge ring); rim atoms are the one-ring core carbons that carry H or
a substituent.
"""

from __future__ import annotations

import pytest
from rdkit import Chem

from server.chem.geometry import core_atoms
from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold


def parent(bridge: str) -> Chem.Mol:
    smiles = PARENT_BOWLS[bridge]
    for n in range(1, 7):
        smiles = smiles.replace(f"[*:{n}]", "[H]")
    return Chem.MolFromSmiles(smiles)


@pytest.mark.parametrize("bridge", ["CH2", "S", "Se"])
def test_hub_is_the_central_benzene(bridge):
    mol = parent(bridge)
    ring_info = mol.GetRingInfo()
    three_ring_atoms = {a.GetIdx() for a in mol.GetAtoms() if ring_info.NumAtomRings(a.GetIdx()) == 3}
    found = core_atoms(mol)
    assert found is not None
    assert set(found.hub) == three_ring_atoms
    assert len(found.core) == mol.GetNumAtoms()  # every atom of the parent is in the ring system


@pytest.mark.parametrize("bridge, n_rim", [("S", 6), ("Se", 6), ("CH2", 6)])
def test_rim_atoms(bridge, n_rim):
    mol = parent(bridge)
    aromatic_ch = {a.GetIdx() for a in mol.GetAtoms() if a.GetIsAromatic() and a.GetTotalNumHs() == 1}
    found = core_atoms(mol)
    assert aromatic_ch == set(found.rim)
    assert len(aromatic_ch) == 6
    # Bridge atoms (the CH2 carbons, S, Se in the five-membered rings) are never rim atoms,
    # so all three bowls measure depth on the same six peripheral carbons.
    assert len(found.rim) == n_rim


def test_rim_of_a_substituted_bowl_is_where_the_chains_sit():
    mol = Chem.MolFromSmiles(build_from_scaffold(PARENT_BOWLS["Se"], "alkoxy", 4))
    found = core_atoms(mol)
    oxygen_bearing = {
        a.GetIdx() for a in mol.GetAtoms()
        if a.GetIsAromatic() and any(n.GetSymbol() == "O" for n in a.GetNeighbors())
    }
    assert set(found.rim) == oxygen_bearing


def test_five_membered_hub_of_a_pentagonal_bowl():
    # A pentagonal bowl: a central five-membered ring fused to five benzene rings (issue 16, defect 7).
    # Hub = the five atoms in three rings (counted here from RDKit ring membership); rim = the ten
    # CH carbons. With the hub in the plane z = 0 and the rim at z = 0.87 A (about the depth such a
    # bowl has in its crystal, from memory), the depth is 0.87 A by construction.
    import numpy as np

    from server.chem.geometry import bowl_depth_A

    mol = Chem.MolFromSmiles("c1cc2ccc3ccc4ccc5ccc1c1c2c3c4c51")
    ring_info = mol.GetRingInfo()
    three = {a.GetIdx() for a in mol.GetAtoms() if ring_info.NumAtomRings(a.GetIdx()) == 3}
    ch = {a.GetIdx() for a in mol.GetAtoms() if a.GetTotalNumHs() == 1}
    found = core_atoms(mol)
    assert set(found.hub) == three and len(found.hub) == 5
    assert set(found.rim) == ch and len(found.rim) == 10
    rng = np.random.default_rng(1)
    coords = np.zeros((mol.GetNumAtoms(), 3))
    coords[:, :2] = rng.uniform(-3, 3, (mol.GetNumAtoms(), 2))
    coords[list(found.rim), 2] = 0.87
    others = [i for i in range(mol.GetNumAtoms()) if i not in found.rim and i not in found.hub]
    coords[others, 2] = 0.4
    assert bowl_depth_A(coords, found) == pytest.approx(0.87, abs=1e-9)
