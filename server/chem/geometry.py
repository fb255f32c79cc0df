"""Geometry of bowl-shaped cores, shared by the computed estimate and the crystal analysis.

Definitions (one place, so computed and crystal bowl depths are the same quantity):

* **core ring system**: the largest set of fused rings in the molecule (rings sharing
  at least one atom), the bridges' five-membered rings included.
* **hub**: the ring of the core, of any size, whose atoms sit in the most rings on
  average (in a C3-symmetric bowl of three benzo rings and three bridges around a central
  benzene, each hub atom is in three rings; in a bowl built on a five-membered hub the central
  five-membered ring is the hub, each of its atoms in three rings).
* **rim**: core atoms that are not hub atoms, lie on one six-membered ring only, and carry
  a hydrogen or a bond to an atom outside the core ring system (the peripheral positions
  where side chains sit; bridge atoms in the five-membered rings are not rim atoms).
* **bowl depth**: the distance, in angstrom, from the least-squares plane through the
  hub atoms to the centroid of the rim atoms. This follows the usual crystallographic
  practice for buckybowls of measuring depth between the central ring's plane and the
  peripheral carbons (common practice for buckybowls; see the review by Wu and Siegel,
  Chem. Rev. 106, 4843 (2006)); a planar core gives 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rdkit import Chem


@dataclass(frozen=True)
class CoreAtoms:
    """Atom indices (RDKit order) of a bowl core."""

    core: tuple[int, ...]
    hub: tuple[int, ...]
    rim: tuple[int, ...]


def fused_ring_systems(mol: Chem.Mol) -> list[set[int]]:
    """Atom sets of the fused ring systems (rings that share atoms), largest first."""
    systems: list[set[int]] = []
    for ring in mol.GetRingInfo().AtomRings():
        ring_set = set(ring)
        merged = [s for s in systems if s & ring_set]
        for s in merged:
            systems.remove(s)
            ring_set |= s
        systems.append(ring_set)
    return sorted(systems, key=len, reverse=True)


def core_atoms(mol: Chem.Mol) -> CoreAtoms | None:
    """Find core, hub and rim atoms; ``None`` when the molecule has no six-membered ring.

    The hub may have any ring size: the ring with the highest mean ring membership of its
    atoms (ties: the larger ring, then the lowest atom index).
    """
    systems = fused_ring_systems(mol)
    if not systems:
        return None
    core = systems[0]
    ring_info = mol.GetRingInfo()
    rings = [r for r in ring_info.AtomRings() if set(r) <= core]
    if not any(len(r) == 6 for r in rings):
        return None
    hub = max(rings, key=lambda r: (sum(ring_info.NumAtomRings(i) for i in r) / len(r), len(r), -min(r)))
    rim = []
    for idx in sorted(core - set(hub)):
        # Peripheral positions sit on the outer six-membered rings only; bridge atoms (CH2, S, Se
        # in the five-membered rings) are not rim atoms even when they carry hydrogens.
        if ring_info.NumAtomRings(idx) != 1 or not ring_info.IsAtomInRingOfSize(idx, 6):
            continue
        atom = mol.GetAtomWithIdx(idx)
        outside = [n for n in atom.GetNeighbors() if n.GetIdx() not in core]
        if atom.GetTotalNumHs() > 0 or outside:
            rim.append(idx)
    return CoreAtoms(core=tuple(sorted(core)), hub=tuple(hub), rim=tuple(rim))


def plane_fit(points_A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares plane through points: (centroid, unit normal) by SVD."""
    pts = np.asarray(points_A, dtype=float)
    centroid = pts.mean(axis=0)
    _, _, vt = np.linalg.svd(pts - centroid)
    return centroid, vt[-1]


def bowl_depth_A(coords_A: np.ndarray, core: CoreAtoms) -> float:
    """Bowl depth in angstrom (see module docstring): hub plane to rim centroid distance."""
    coords = np.asarray(coords_A, dtype=float)
    if not core.rim:
        return 0.0
    centroid, normal = plane_fit(coords[list(core.hub)])
    rim_centroid = coords[list(core.rim)].mean(axis=0)
    return float(abs(np.dot(rim_centroid - centroid, normal)))


def bowl_axis(coords_A: np.ndarray, core: CoreAtoms) -> np.ndarray:
    """Unit vector along the bowl axis, pointing from the rim centroid towards the hub (convex side).

    Used to tell whether stacked bowls point the same way (head-to-tail columns).
    """
    coords = np.asarray(coords_A, dtype=float)
    centroid, normal = plane_fit(coords[list(core.hub)])
    if core.rim:
        rim_centroid = coords[list(core.rim)].mean(axis=0)
        if np.dot(centroid - rim_centroid, normal) < 0:
            normal = -normal
    return normal
