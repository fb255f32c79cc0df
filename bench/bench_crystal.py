"""Benchmark: bond perception of a CIF's unit cell, k-d tree against comparing all pairs.

Data: an invented columnar crystal from ``server.synth.cif.bowl_crystal_cif`` (ETKDG geometry,
fixed seed) of 2,3,6,7,10,11-hexamethoxy triphenylene in P2_1/c (Z = 4, 216 atoms in the cell),
and the same crystal written as a P1 supercell of k cells along the short stacking axis a
(216 k atoms: 1728 for k = 8), as a large cell that stays chemically sensible.

Measured: ``server.analysis.crystal`` growing every molecule of the cell from its k-d tree bond
graph (``_bond_graph`` + ``_grow_molecule``), i.e. what ``_estimate_z`` does. Baseline: the
all-pairs breadth-first search the module used before (kept below, verbatim in method: every
atom against all atoms and their 27 lattice images). Figure: baseline / measured (a speed-up,
target >= 10 at the larger cell), plus ``analyse_cif`` on the whole file for scale.
"""

from __future__ import annotations

from itertools import product

import numpy as np
from rdkit import Chem

from server.analysis import crystal
from server.synth.cif import bowl_crystal_cif

from .common import Row, Section, fmt_s, paired, repeat


def _all_pairs_molecules(atoms, orth) -> int:  # noqa: ANN001 - the old algorithm, for the baseline
    table = Chem.GetPeriodicTable()
    frac = np.array([a.frac for a in atoms])
    radii = np.array([table.GetRcovalent(a.element) for a in atoms])
    shifts = np.array(list(product((-1, 0, 1), repeat=3)), dtype=float)
    seen: set[int] = set()
    n_mol = 0
    for seed in range(len(atoms)):
        if seed in seen:
            continue
        placed = {seed: frac[seed].copy()}
        queue = [seed]
        while queue:
            i = queue.pop(0)
            p = placed[i]
            d = frac - p
            d -= np.round(d)
            cand = p[None, None, :] + d[:, None, :] + shifts[None, :, :]
            dist = np.linalg.norm((cand - p) @ orth.T, axis=2)
            hits = np.argwhere((dist < (radii + radii[i] + crystal.BOND_TOLERANCE_A)[:, None]) & (dist > 0.1))
            for j, s in hits:
                if j not in placed:
                    placed[j] = cand[j, s]
                    queue.append(j)
        seen.update(placed)
        n_mol += 1
    return n_mol


def _kdtree_molecules(atoms, orth) -> int:  # noqa: ANN001
    graph = crystal._bond_graph(atoms, orth)
    seen: set[int] = set()
    n_mol = 0
    for seed in range(len(atoms)):
        if seed not in seen:
            seen.update(crystal._grow_molecule(seed, atoms, orth, graph).cell_indices)
            n_mol += 1
    return n_mol


def _cell(raw: bytes):  # noqa: ANN202
    import gemmi

    block = gemmi.cif.read_string(raw.decode()).sole_block()
    small = gemmi.make_small_structure_from_block(block)
    orth = np.array(small.cell.orth.mat.tolist())
    sg = gemmi.find_spacegroup_by_name(small.spacegroup_hm)
    return crystal._expand(list(small.sites), crystal._op_matrices(sg), orth), orth


SMILES = "COc1cc2c3cc(OC)c(OC)cc3c3cc(OC)c(OC)cc3c2cc1OC"  # hexamethoxy triphenylene


def _supercell_cif(raw: bytes, k: int) -> bytes:
    """The cell of ``raw`` repeated ``k`` times along a, written in P1 (no formula: Z is found by
    growing every molecule, the path whose cost this measures)."""
    import gemmi

    atoms, _ = _cell(raw)
    cell = gemmi.make_small_structure_from_block(gemmi.cif.read_string(raw.decode()).sole_block()).cell
    lines = ["data_rmx_supercell", "_space_group_name_H-M_alt 'P 1'", "loop_", "_space_group_symop_operation_xyz",
             "x,y,z", f"_cell_length_a {cell.a * k:.4f}", f"_cell_length_b {cell.b:.4f}",
             f"_cell_length_c {cell.c:.4f}", f"_cell_angle_alpha {cell.alpha:.4f}",
             f"_cell_angle_beta {cell.beta:.4f}", f"_cell_angle_gamma {cell.gamma:.4f}", "loop_",
             "_atom_site_label", "_atom_site_type_symbol", "_atom_site_fract_x", "_atom_site_fract_y",
             "_atom_site_fract_z", "_atom_site_occupancy"]
    n = 0
    for i in range(k):
        for a in atoms:
            n += 1
            x, y, z = a.frac
            lines.append(f"{a.element}{n} {a.element} {(x + i) / k:.6f} {y:.6f} {z:.6f} 1")
    return ("\n".join(lines) + "\n").encode()


def run(quick: bool = False) -> Section:
    section = Section("crystal")
    base = bowl_crystal_cif(SMILES, "P2_1/c", seed=3, stacking_A=4.5)
    for k in ((1, 4) if quick else (1, 8)):
        raw = base if k == 1 else _supercell_cif(base, k)
        atoms, orth = _cell(raw)
        new, old = _kdtree_molecules(atoms, orth), _all_pairs_molecules(atoms, orth)
        if new != old:
            raise RuntimeError(f"k-d tree finds {new} molecules, all pairs {old}")
        t_new, t_old = paired(lambda: _kdtree_molecules(atoms, orth), lambda: _all_pairs_molecules(atoms, orth),
                              rounds=3, budget_s=30)
        section.rows.append(Row(benchmark=f"CIF bonds, {len(atoms)} cell atoms: all pairs / k-d tree",
                                measured=fmt_s(t_new.median_s), baseline=fmt_s(t_old.median_s),
                                ratio=t_old.median_s / t_new.median_s, target=(">=", 10.0) if len(atoms) > 1000 else None))
        try:
            t_all = fmt_s(repeat(lambda: crystal.analyse_cif(raw), times=3, warmup=0).median_s)
        except crystal.OverLimit as exc:  # the P1 supercell lists every atom as a site
            t_all = f"refused ({exc.limit} {exc.value})"
        section.details.append(f"hexamethoxy triphenylene: {len(atoms)} atoms in the cell, {new} molecules; "
                               f"cell x{k} along a; whole analyse_cif {t_all} ({len(raw) / 1024:.0f} KiB CIF).")
    return section


if __name__ == "__main__":
    s = run()
    for r in s.rows:
        print(r.benchmark, r.measured, r.baseline, f"{r.ratio:.1f}x")
    print("\n".join(s.details))
