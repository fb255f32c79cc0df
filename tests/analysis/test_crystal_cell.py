"""Unit-cell contents and the packing figure of a crystal structure (issue 22 item 11)."""

from __future__ import annotations

import gemmi
import numpy as np

from server.analysis.crystal_cell import cell_contents
from server.kinds import KINDS
from server.plots.crystal import packing_figure, projection_basis, view_axis


def _gemmi_cell_sites(raw: bytes) -> tuple[list[str], np.ndarray]:
    """Independent reference: gemmi's own expansion (SmallStructure.get_all_unit_cell_sites)."""
    small = gemmi.make_small_structure_from_block(gemmi.cif.read_string(raw.decode()).sole_block())
    sites = small.get_all_unit_cell_sites()
    frac = np.array([[s.fract.x, s.fract.y, s.fract.z] for s in sites])
    return [s.element.name for s in sites], frac - np.floor(frac + 1e-9)


def test_cell_contents_match_gemmis_own_expansion():
    raw = KINDS["crystal"].example().raw
    c = cell_contents(raw)
    elements, frac = _gemmi_cell_sites(raw)
    assert sorted(c.elements) == sorted(elements)
    # same positions: every atom has a partner within 0.01 A (periodic distance)
    d = c.frac[:, None, :] - frac[None, :, :]
    d -= np.round(d)
    dist = np.linalg.norm(d @ c.orth.T, axis=2)
    assert dist.min(axis=1).max() < 0.01
    assert ((c.frac >= 0) & (c.frac < 1)).all()
    # P2_1 has two general positions: two molecules in the cell
    assert c.space_group.replace(" ", "") == "P1211" and len(c.elements) % 2 == 0


def test_packing_figure_draws_the_cell_and_every_atom_in_projection():
    c = cell_contents(KINDS["crystal"].example().raw)
    fig = packing_figure(c)
    cell = fig.data[0]
    assert cell.name == "unit cell"
    assert sum(1 for x in cell.x if x is None) == 12  # 12 edges, each ended by a gap
    atoms = [t for t in fig.data[1:]]
    assert sum(len(t.x) for t in atoms) == len(c.elements)
    assert {t.name.split(" ")[0] for t in atoms} == set(c.elements)
    # the projection is orthonormal and perpendicular to the view edge
    along = view_axis(c)
    assert c.edges_A[along] == min(c.edges_A)
    u, v = projection_basis(c.orth, along)
    w = c.orth[:, along]
    np.testing.assert_allclose([u @ u, v @ v, u @ v, u @ w, v @ w], [1, 1, 0, 0, 0], atol=1e-12)
    # an atom's plotted point is its Cartesian position projected
    first = atoms[0]
    el = first.name.split(" ")[0]
    pos = c.cart_A[np.array(c.elements) == el][0]
    np.testing.assert_allclose([first.x[0], first.y[0]], [pos @ u, pos @ v], atol=1e-9)
    # equal scales on both axes, so the cell's shape is true; axis titles carry the unit
    assert fig.layout.yaxis.scaleanchor == "x" and fig.layout.yaxis.scaleratio == 1
    assert fig.layout.xaxis.title.text.endswith("(Å)") and fig.layout.yaxis.title.text.endswith("(Å)")
