"""The contents of one unit cell from a CIF, for drawing its packing: every atom of the main
disorder component, expanded with the space-group operations and wrapped into the cell.

The reading, the choice of block, the space group and the expansion are those of
:func:`server.analysis.crystal.analyse_cif` (one home: this module only gathers what it computes),
so the drawing shows exactly the atoms the analysis used.

References
----------
International Tables for Crystallography Vol. A (2016), ch. 1.4: symmetry operations applied to
fractional coordinates; Vol. B (2008), ch. 1.1: the orthogonalisation matrix of a cell (gemmi's
``UnitCell.orth``, PDB convention: a along x, b in the xy plane).
"""

from __future__ import annotations

from dataclasses import dataclass

import gemmi
import numpy as np

from server.analysis import crystal
from server.errors import AnalysisError


@dataclass(frozen=True)
class CellContents:
    """``orth`` (3x3, Å): columns are the cell edges a, b, c in Cartesian coordinates.
    ``elements``: one symbol per atom; ``frac``: (n, 3) fractional coordinates in [0, 1)."""

    orth: np.ndarray
    elements: tuple[str, ...]
    frac: np.ndarray
    space_group: str
    disorder_groups: tuple[int, ...]

    @property
    def cart_A(self) -> np.ndarray:
        """(n, 3) Cartesian coordinates in Å."""
        return self.frac @ self.orth.T

    @property
    def edges_A(self) -> tuple[float, float, float]:
        """Lengths of a, b and c in Å."""
        return tuple(float(x) for x in np.linalg.norm(self.orth, axis=0))


def cell_contents(raw: bytes) -> CellContents:
    """Every atom in one unit cell of the CIF ``raw`` (main disorder component).

    Raises :class:`AnalysisError` as :func:`server.analysis.crystal.analyse_cif` does for a file it
    cannot read, and ``OverLimit`` for a cell beyond ``crystal.MAX_CELL_ATOMS`` atoms.
    """
    block = crystal._pick_block(crystal._read_document(raw))
    for tag in crystal._CELL_TAGS:
        if crystal._number(block, tag) is None:
            raise AnalysisError(f"the cell is incomplete: {tag} is missing", field="cif")
    crystal.check_cell({tag: crystal._number(block, tag) for tag in crystal._CELL_TAGS})
    sg, _ = crystal._space_group(block)
    try:
        small = gemmi.make_small_structure_from_block(block)
    except (ValueError, RuntimeError) as exc:
        raise AnalysisError(f"gemmi cannot build the structure: {exc}", field="cif") from exc
    orth = np.array(small.cell.orth.mat.tolist())
    sites, groups = crystal.main_component(list(small.sites))
    atoms = crystal._expand(sites, crystal._op_matrices(sg), orth)
    frac = np.array([a.frac for a in atoms]) if atoms else np.zeros((0, 3))
    return CellContents(orth=orth, elements=tuple(a.element for a in atoms), frac=frac,
                        space_group=sg.xhm(), disorder_groups=tuple(groups))
