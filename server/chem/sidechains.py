"""Side chains of a bowl compound, perceived from its structure alone.

The registry groups derivatives of one core by their side chains ("6 x C12 alkoxy
(linear)"). This module finds them from a plain SMILES, without knowing the scaffold:

* the **core** is the largest fused ring system (``server.chem.geometry.fused_ring_systems``);
  bridge atoms (CH2, S, Se, NH in the core's five-membered rings) are ring atoms and so
  belong to the core;
* a **substituent** is the connected piece left after cutting a bond from a core atom to a
  non-core heavy atom (hydrogens are ignored);
* a substituent of a single heavy atom joined to the core by a double bond (the =O of a
  ketone bridge, =S, =NH, =CH2) is a feature of the core, not a side chain, and is not
  reported;
* each substituent is classified:

  ``alkoxy``     O followed by an acyclic, saturated all-carbon chain (O-CnH2n+1);
  ``alkylthio``  S followed by such a chain;
  ``alkyl``      the saturated acyclic carbon chain alone;
  ``other``      anything else: esters, ethers with oxygen in the chain, halogens, aryl,
                 rings, unsaturation, charges, hydroxy; ``carbons`` is its carbon count.

* ``branched``: for alkyl-type chains, the carbon skeleton is not a path starting at the
  attachment carbon, i.e. some chain carbon has more than two carbon neighbours in the
  chain, or the first chain carbon has more than one (a non-terminal attachment, as in
  isopropoxy). Branching is not defined for ``other`` substituents and is reported False.

The classes follow IUPAC substituent-prefix nomenclature (alkyloxy/"alkoxy",
alkylsulfanyl/"alkylthio", alkyl): IUPAC, *Nomenclature of Organic Chemistry, IUPAC
Recommendations and Preferred Names 2013* (the "Blue Book", RSC 2014), P-29 and P-63.
Ring systems are RDKit's symmetrised SSSR (https://www.rdkit.org).
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass

from rdkit import Chem

from server.chem.geometry import fused_ring_systems

__all__ = ["SideChain", "KINDS", "perceive_side_chains", "describe_side_chains"]

KINDS = ("alkoxy", "alkylthio", "alkyl", "other")


@dataclass(frozen=True)
class SideChain:
    """One kind of substituent on the core and how many times it occurs.

    Attributes
    ----------
    kind : str
        "alkoxy", "alkylthio", "alkyl" or "other".
    carbons : int
        Carbon atoms in one substituent.
    branched : bool
        True for a branched chain (see module notes); always False for "other".
    count : int
        How many such substituents the molecule carries.
    fragments : tuple of str
        Distinct canonical SMILES of these substituents, ``*`` marking the attachment
        to the core (e.g. ``"*OCCCCCC"``); tells apart "other" substituents of equal
        carbon count (``*Br`` and ``*Cl``).
    """

    kind: str
    carbons: int
    branched: bool
    count: int
    fragments: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "carbons": self.carbons,
            "branched": self.branched,
            "count": self.count,
            "fragments": list(self.fragments),
        }


def _substituent(mol: Chem.Mol, start: int, core: set[int]) -> set[int]:
    """Heavy atoms reachable from ``start`` without entering the core."""
    seen = {start}
    stack = [start]
    while stack:
        atom = mol.GetAtomWithIdx(stack.pop())
        for nb in atom.GetNeighbors():
            j = nb.GetIdx()
            if j in seen or j in core or nb.GetAtomicNum() == 1:
                continue
            seen.add(j)
            stack.append(j)
    return seen


def _is_saturated_chain(mol: Chem.Mol, atoms: set[int]) -> bool:
    """All carbons, acyclic, single bonds only, uncharged, no radicals."""
    for i in atoms:
        atom = mol.GetAtomWithIdx(i)
        if (
            atom.GetAtomicNum() != 6
            or atom.GetIsAromatic()
            or atom.IsInRing()
            or atom.GetFormalCharge() != 0
            or atom.GetNumRadicalElectrons() != 0
        ):
            return False
        for bond in atom.GetBonds():
            if bond.GetOtherAtomIdx(i) in atoms and bond.GetBondType() != Chem.BondType.SINGLE:
                return False
    return True


def _branched(mol: Chem.Mol, chain: set[int], head: int) -> bool:
    """True unless the chain's carbons form a path that starts at ``head``."""
    for i in chain:
        n_carbon = sum(1 for nb in mol.GetAtomWithIdx(i).GetNeighbors() if nb.GetIdx() in chain)
        if n_carbon > (1 if i == head else 2):
            return True
    return False


def _classify(mol: Chem.Mol, attach: int, atoms: set[int]) -> tuple[str, int, bool]:
    carbons = sum(1 for i in atoms if mol.GetAtomWithIdx(i).GetAtomicNum() == 6)
    first = mol.GetAtomWithIdx(attach)
    element = first.GetAtomicNum()
    if element in (8, 16):
        chain = atoms - {attach}
        heads = [nb.GetIdx() for nb in first.GetNeighbors() if nb.GetIdx() in chain]
        if (
            chain
            and len(heads) == 1
            and first.GetFormalCharge() == 0
            and not first.IsInRing()
            and _is_saturated_chain(mol, chain)
        ):
            kind = "alkoxy" if element == 8 else "alkylthio"
            return kind, carbons, _branched(mol, chain, heads[0])
        return "other", carbons, False
    if element == 6 and _is_saturated_chain(mol, atoms):
        return "alkyl", carbons, _branched(mol, atoms, attach)
    return "other", carbons, False


def _fragment_smiles(mol: Chem.Mol, bond_idx: int, attach: int) -> str:
    """Canonical SMILES of the substituent with ``*`` where the core was."""
    pieces = Chem.FragmentOnBonds(mol, [bond_idx], addDummies=True, dummyLabels=[(0, 0)])
    for atom_ids in Chem.GetMolFrags(pieces, sanitizeFrags=False):
        if attach in atom_ids:
            return Chem.MolFragmentToSmiles(pieces, atomsToUse=list(atom_ids), isomericSmiles=False)
    raise AssertionError("the cut substituent must be one of the fragments")  # pragma: no cover


def perceive_side_chains(mol: Chem.Mol) -> list[SideChain]:
    """Classify and count the substituents on the largest fused ring system.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        A sanitised molecule (e.g. from ``server.chem.identity.parse_structure``).

    Returns
    -------
    list of SideChain
        One entry per distinct (kind, carbons, branched), sorted by count (largest first),
        then kind, carbons and branched. Empty when the molecule has no ring (no core)
        or nothing on its core.

    Notes
    -----
    Counter-ions and solvent molecules (other '.' fragments) are not substituents: they are
    not bonded to the core. A substituent bonded to the core by two bonds would close a
    ring and so be part of the core; it cannot occur here. See the module docstring for
    the classification rules and the treatment of exocyclic double bonds on the core.
    """
    mol = Chem.RemoveHs(mol)  # explicit H atoms (from a MOL block with H) are not substituents
    systems = fused_ring_systems(mol)
    if not systems:
        return []
    core = systems[0]
    groups: dict[tuple[str, int, bool], list[str]] = defaultdict(list)
    seen: set[frozenset[int]] = set()
    for i in sorted(core):
        for bond in mol.GetAtomWithIdx(i).GetBonds():
            j = bond.GetOtherAtomIdx(i)
            other = mol.GetAtomWithIdx(j)
            if j in core or other.GetAtomicNum() == 1:
                continue
            atoms = _substituent(mol, j, core)
            key_atoms = frozenset(atoms)
            if key_atoms in seen:
                continue
            seen.add(key_atoms)
            if len(atoms) == 1 and bond.GetBondType() == Chem.BondType.DOUBLE:
                continue  # exocyclic =O, =S, =CH2 on the core: a core feature (module notes)
            if bond.GetBondType() != Chem.BondType.SINGLE:
                key = ("other", sum(1 for k in atoms if mol.GetAtomWithIdx(k).GetAtomicNum() == 6), False)
            else:
                key = _classify(mol, j, atoms)
            groups[key].append(_fragment_smiles(mol, bond.GetIdx(), j))
    chains = [
        SideChain(kind=k, carbons=c, branched=b, count=len(frags), fragments=tuple(sorted(set(frags))))
        for (k, c, b), frags in groups.items()
    ]
    return sorted(chains, key=lambda s: (-s.count, s.kind, s.carbons, s.branched))


def describe_side_chains(chains: list[SideChain]) -> str:
    """One-line summary, e.g. ``"3 x C8 alkoxy (branched), 3 x C6 alkylthio (linear)"``.

    "other" substituents show their fragment SMILES: ``"6 x other C0 (*Br)"``.
    An empty list reads ``"no side chains"``.
    """
    if not chains:
        return "no side chains"
    parts = []
    for chain in chains:
        if chain.kind == "other":
            parts.append(f"{chain.count} x other C{chain.carbons} ({', '.join(chain.fragments)})")
        else:
            shape = "branched" if chain.branched else "linear"
            parts.append(f"{chain.count} x C{chain.carbons} {chain.kind} ({shape})")
    return ", ".join(parts)
