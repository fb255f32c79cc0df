"""Invented single-crystal structures written as CIF, for tests and the demo campaign.

:func:`write_cif` writes a small-molecule CIF with core CIF dictionary names (Hall, Allen and
Brown, Acta Cryst. A47, 655 (1991), DOI 10.1107/S010876739101067X) through gemmi's CIF
writer. :func:`bowl_crystal_cif` builds a columnar crystal of a bowl molecule: the molecule is
embedded with RDKit (ETKDG v3 + MMFF94), its bowl axis put along one cell axis, and
neighbours stacked along that axis either head-to-tail (all bowls pointing the same way)
or antiparallel (an inversion centre between neighbours). The lateral cell edges are grown
until no intermolecular contact is shorter than a clash limit. The structures are invented:
no refinement, no real measurement.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product
from typing import Sequence

import gemmi
import numpy as np
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolDescriptors

from server.analysis.constants import NA_PER_MOL
from server.analysis.crystal import hill_formula, molar_mass_from_counts, parse_formula
from server.chem import geometry
from server.errors import ChemistryError

#: Shortest intermolecular contacts allowed in generated cells (A): van der Waals sums
#: (Bondi, J. Phys. Chem. 68, 441 (1964): C 1.70, H 1.20 A) minus about 0.4 A (common practice).
MIN_HEAVY_HEAVY_A = 3.0
MIN_HEAVY_H_A = 2.5
MIN_H_H_A = 2.0

_UISO_HEAVY_A2 = 0.040
_UISO_H_A2 = 0.048  # 1.2 x U(parent), the usual riding-H convention

Atom = tuple[str, str, float, float, float, float]


def write_cif(
    *,
    data_name: str,
    cell: Sequence[float],
    space_group_hm: str,
    space_group_number: int,
    atoms: Sequence[Atom],
    formula_sum: str,
    z: int,
    temperature_K: float,
    symops: Sequence[str] | None = None,
    r1: float | None = None,
    density: float | None = None,
) -> bytes:
    """Write a small-molecule CIF.

    Parameters
    ----------
    data_name : str
        Block name (written as ``data_<name>``).
    cell : (a, b, c, alpha, beta, gamma)
        Cell edges in angstrom and angles in degrees.
    space_group_hm, space_group_number : str, int
        Hermann-Mauguin symbol (``"P 1 21/c 1"`` or ``"P2_1/c"``) and IT number.
    atoms : sequence of (label, element, x, y, z, uiso)
        Asymmetric unit: fractional coordinates and U_iso in A^2.
    formula_sum : str
        ``_chemical_formula_sum`` (rewritten in Hill order).
    z : int
        ``_cell_formula_units_Z``.
    temperature_K : float
        Measurement temperature (``_diffrn_ambient_temperature`` and
        ``_cell_measurement_temperature``).
    symops : sequence of str, optional
        Symmetry operations as xyz triplets; taken from gemmi's table when omitted.
    r1, density : float, optional
        ``_refine_ls_R_factor_gt`` and ``_exptl_crystal_density_diffrn`` (g/cm^3).

    Returns
    -------
    bytes
        The CIF text (ASCII).
    """
    if len(cell) != 6 or any(not np.isfinite(v) or v <= 0 for v in cell):
        raise ChemistryError(f"cell must be six positive numbers, got {tuple(cell)}", field="cell")
    sg = gemmi.find_spacegroup_by_name(space_group_hm.replace("_", ""))
    if sg is None:
        raise ChemistryError(f"unknown space group '{space_group_hm}'", field="space_group")
    if sg.number != space_group_number:
        raise ChemistryError(
            f"space group '{space_group_hm}' is No. {sg.number}, not {space_group_number}", field="space_group"
        )
    if symops is None:
        symops = [op.triplet() for op in sg.operations()]
    if z <= 0:
        raise ChemistryError(f"Z must be positive, got {z}", field="z")
    counts = parse_formula(formula_sum, what="formula_sum")
    ucell = gemmi.UnitCell(*cell)

    doc = gemmi.cif.Document()
    block = doc.add_new_block(data_name)
    q = gemmi.cif.quote
    block.set_pair("_audit_creation_method", q("Remanence synthetic generator (invented structure)"))
    block.set_pair("_chemical_formula_sum", q(hill_formula(counts)))
    block.set_pair("_chemical_formula_weight", f"{molar_mass_from_counts(counts):.2f}")
    block.set_pair("_space_group_crystal_system", sg.crystal_system_str())
    block.set_pair("_space_group_name_H-M_alt", q(sg.xhm()))
    block.set_pair("_space_group_IT_number", str(sg.number))
    loop = block.init_loop("_space_group_symop_", ["id", "operation_xyz"])
    for i, op in enumerate(symops, start=1):
        loop.add_row([str(i), q(op)])
    for name, value in zip(("length_a", "length_b", "length_c", "angle_alpha", "angle_beta", "angle_gamma"), cell):
        block.set_pair(f"_cell_{name}", f"{value:.4f}")
    block.set_pair("_cell_volume", f"{ucell.volume:.2f}")
    block.set_pair("_cell_formula_units_Z", str(int(z)))
    block.set_pair("_cell_measurement_temperature", f"{temperature_K:.1f}")
    block.set_pair("_diffrn_ambient_temperature", f"{temperature_K:.1f}")
    if density is not None:
        block.set_pair("_exptl_crystal_density_diffrn", f"{density:.3f}")
    if r1 is not None:
        block.set_pair("_refine_ls_R_factor_gt", f"{r1:.4f}")
    loop = block.init_loop(
        "_atom_site_",
        ["label", "type_symbol", "fract_x", "fract_y", "fract_z", "U_iso_or_equiv", "adp_type", "occupancy"],
    )
    for label, element, x, y, zf, uiso in atoms:
        loop.add_row([label, element, f"{x:.6f}", f"{y:.6f}", f"{zf:.6f}", f"{uiso:.4f}", "Uiso", "1"])
    return doc.as_string().encode("ascii")


# --------------------------------------------------------------------------------------
# columnar bowl crystals

# Layouts: which cell axis carries the column (0 = a, 1 = b, 2 = c), where the molecule's
# core centroid sits, and how the column repeat follows from the stacking distance.
#   P1      column by pure translation along c (head-to-tail).
#   P2_1    molecule on the 2_1 axis (along b): neighbour = screw image, b = 2 x stacking.
#   Pna2_1  molecule on the 2_1 axis (along c): c = 2 x stacking; glide mates form a second
#           column at (1/2, 1/2), pointing the same way (polar group).
#   P-1, P2_1/c  column along a. Head-to-tail: translation a = stacking, molecule off the
#           inversion centres so the inverted mates form separate (antiparallel) columns.
#           Antiparallel: inversion centres between neighbours, alternating face-to-face
#           (concave sides) and back-to-back contacts.
_LAYOUTS = {
    "P1": ("P 1", 1, 2, ("head_to_tail",)),
    "P21": ("P 1 21 1", 4, 1, ("head_to_tail",)),
    "Pna21": ("P n a 21", 33, 2, ("head_to_tail",)),
    "P-1": ("P -1", 2, 0, ("head_to_tail", "antiparallel")),
    "P21/c": ("P 1 21/c 1", 14, 0, ("head_to_tail", "antiparallel")),
}


@dataclass(frozen=True)
class SyntheticCrystal:
    """A generated columnar crystal and the numbers it was built with."""

    cif: bytes
    mol: Chem.Mol  # embedded molecule with hydrogens, coordinates as in the crystal (A)
    space_group: str
    cell: tuple[float, float, float, float, float, float]
    stacking_A: float  # nearest centroid-to-centroid distance along the column, A
    back_to_back_A: float | None  # antiparallel columns: convex-convex contact, A
    face_to_face_A: float | None  # antiparallel columns: concave-concave contact, A
    head_to_tail: bool


def embed_bowl(core_smiles_or_mol: str | Chem.Mol, *, seed: int = 0) -> Chem.Mol:
    """3D molecule with hydrogens: ETKDG v3 (Wang et al., J. Chem. Inf. Model. 60, 2044 (2020))
    then MMFF94 (Halgren, J. Comput. Chem. 17, 490 (1996))."""
    if isinstance(core_smiles_or_mol, str):
        mol = Chem.MolFromSmiles(core_smiles_or_mol)
        if mol is None:
            raise ChemistryError(f"SMILES '{core_smiles_or_mol}' cannot be parsed", field="smiles")
    else:
        mol = Chem.Mol(core_smiles_or_mol)
    mol = Chem.AddHs(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = int(seed)
    if AllChem.EmbedMolecule(mol, params) != 0:
        raise ChemistryError("RDKit could not embed the molecule in 3D", field="smiles")
    if AllChem.MMFFHasAllMoleculeParams(mol):
        AllChem.MMFFOptimizeMolecule(mol, maxIters=5000)
    else:
        AllChem.UFFOptimizeMolecule(mol, maxIters=5000)
    return mol


def _oriented_coords(mol: Chem.Mol, core: geometry.CoreAtoms, column_axis: int) -> np.ndarray:
    """Core centroid at the origin, bowl axis (towards the convex side) along +column axis."""
    xyz = mol.GetConformer().GetPositions()
    axis = geometry.bowl_axis(xyz, core)
    centre = xyz[list(core.core)].mean(axis=0)
    ref = xyz[core.rim[0]] - centre if core.rim else np.cross(axis, [1.0, 0.0, 0.0])
    e1 = ref - np.dot(ref, axis) * axis
    if np.linalg.norm(e1) < 1e-6:
        e1 = np.cross(axis, [0.0, 1.0, 0.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(axis, e1)
    local = (xyz - centre) @ np.column_stack([e1, e2, axis])  # (lateral1, lateral2, axis)
    # cyclic permutations keep the frame right-handed (a chiral molecule stays itself)
    perm = {2: (0, 1, 2), 0: (1, 2, 0), 1: (2, 0, 1)}[column_axis]
    out = np.empty_like(local)
    out[:, perm[2]] = local[:, 2]
    out[:, perm[0]] = local[:, 0]
    out[:, perm[1]] = local[:, 1]
    return out


def _ops(sg: gemmi.SpaceGroup) -> list[tuple[np.ndarray, np.ndarray]]:
    return [
        (np.array(op.rot, dtype=float) / op.DEN, np.array(op.tran, dtype=float) / op.DEN) for op in sg.operations()
    ]


def _min_contacts(frac: np.ndarray, is_h: np.ndarray, lengths: np.ndarray, ops) -> tuple[float, float, float]:
    """Shortest heavy-heavy, heavy-H, H-H distances between different molecules (orthogonal cell)."""
    mols = [frac @ rot.T + tran for rot, tran in ops]
    cell_xyz = np.concatenate(mols) * lengths
    cell_h = np.concatenate([is_h] * len(mols))
    cell_id = np.repeat(np.arange(len(mols)), len(frac))
    shifts = np.array(list(product((-1, 0, 1), repeat=3)), dtype=float)
    best = [np.inf, np.inf, np.inf]
    for s in shifts:
        other = cell_xyz + s * lengths
        d = np.linalg.norm(cell_xyz[:, None, :] - other[None, :, :], axis=2)
        if not s.any():
            d[cell_id[:, None] == cell_id[None, :]] = np.inf
        hh = cell_h[:, None] & cell_h[None, :]
        xx = ~cell_h[:, None] & ~cell_h[None, :]
        xh = ~(hh | xx)
        for k, mask in enumerate((xx, xh, hh)):
            if mask.any():
                best[k] = min(best[k], float(d[mask].min()))
    return best[0], best[1], best[2]


def _clear(frac, is_h, lengths, ops) -> bool:
    xx, xh, hh = _min_contacts(frac, is_h, lengths, ops)
    return xx >= MIN_HEAVY_HEAVY_A and xh >= MIN_HEAVY_H_A and hh >= MIN_H_H_A


def bowl_crystal(
    core_smiles_or_mol: str | Chem.Mol,
    space_group: str,
    *,
    stacking_A: float = 3.8,
    head_to_tail: bool = True,
    seed: int = 0,
    temperature_K: float = 150.0,
    data_name: str = "rmx_synthetic",
) -> SyntheticCrystal:
    """Build an invented columnar crystal of a bowl molecule (see module docstring).

    Parameters
    ----------
    core_smiles_or_mol : str or rdkit Mol
        The molecule (hydrogens are added).
    space_group : str
        ``"P1"``, ``"P2_1"``, ``"Pna2_1"`` (head-to-tail only), ``"P-1"`` or ``"P2_1/c"``.
    stacking_A : float
        Centroid-to-centroid distance of neighbours in a column, A. Antiparallel columns
        alternate back-to-back (convex sides) and face-to-face (concave sides) contacts; each is
        the shortest clash-free spacing not below ``stacking_A`` (reported in the result).
    head_to_tail : bool
        True: all bowls in a column point the same way; False: alternate (needs P-1 or P2_1/c).
    seed : int
        ETKDG random seed.
    temperature_K : float
        Written as the measurement temperature.

    Raises
    ------
    ChemistryError
        Unknown layout, antiparallel in a group without inversion, no bowl core, or a stacking
        distance at which neighbours in a column clash.
    """
    key = space_group.replace("_", "").replace(" ", "")
    if key not in _LAYOUTS:
        raise ChemistryError(
            f"no column layout for space group '{space_group}'; choose one of P1, P2_1, Pna2_1, P-1, P2_1/c",
            field="space_group",
        )
    hm, number, col, modes = _LAYOUTS[key]
    mode = "head_to_tail" if head_to_tail else "antiparallel"
    if mode not in modes:
        raise ChemistryError(
            f"{space_group} cannot hold antiparallel columns (no inversion centre between neighbours); "
            "use P-1 or P2_1/c",
            field="space_group",
        )
    if not (np.isfinite(stacking_A) and stacking_A > 0):
        raise ChemistryError(f"stacking distance {stacking_A} A is not positive", field="stacking_A")
    mol = embed_bowl(core_smiles_or_mol, seed=seed)
    core = geometry.core_atoms(mol)
    if core is None or not core.rim:
        raise ChemistryError("the molecule has no fused ring core to stack", field="smiles")
    xyz = _oriented_coords(mol, core, col)
    is_h = np.array([a.GetAtomicNum() == 1 for a in mol.GetAtoms()])
    sg = gemmi.find_spacegroup_by_name(hm)
    ops = _ops(sg)
    lateral = [i for i in range(3) if i != col]
    far = float(np.ptp(xyz, axis=0).max()) + 30.0  # lateral edge with no lateral contacts

    def cell_for(col_len: float, lat: float) -> np.ndarray:
        lengths = np.empty(3)
        lengths[col] = col_len
        lengths[lateral] = lat
        return lengths

    def place(lengths: np.ndarray, centre_frac: np.ndarray) -> np.ndarray:
        return xyz / lengths + centre_frac

    def centre(lengths: np.ndarray, along: float) -> np.ndarray:
        c = np.zeros(3)
        c[col] = along
        if key in ("P-1", "P21/c") and head_to_tail:
            c[lateral] = 0.25  # off the inversion centres: inverted mates form other columns
        return c

    face_to_face: float | None = None
    back_to_back: float | None = None
    if mode == "head_to_tail":
        repeat = 2 * stacking_A if key in ("P21", "Pna21") else stacking_A
        lengths = cell_for(repeat, far)
        if not _clear(place(lengths, centre(lengths, 0.0)), is_h, lengths, ops):
            need = stacking_A
            while need < stacking_A + 10:
                need += 0.05
                rep = 2 * need if key in ("P21", "Pna21") else need
                trial = cell_for(rep, far)
                if _clear(place(trial, centre(trial, 0.0)), is_h, trial, ops):
                    break
            raise ChemistryError(
                f"bowls stacked {stacking_A:.2f} A apart clash; the shortest clash-free spacing for this "
                f"molecule is about {need:.2f} A",
                field="stacking_A",
            )
        col_len, along = repeat, 0.0
    else:
        # face-to-face contact across x = 0, back-to-back across x = 1/2 (molecule at +u points +a)
        def clear_pair(d_ff: float, d_bb: float) -> bool:
            lengths = cell_for(d_ff + d_bb, far)
            return _clear(place(lengths, centre(lengths, d_ff / (2 * (d_ff + d_bb)))), is_h, lengths, ops)

        def shortest(clear) -> float:
            d = stacking_A
            while not clear(d):
                d += 0.05
                if d > stacking_A + 15:
                    raise ChemistryError("no clash-free antiparallel spacing found", field="stacking_A")
            return d

        d_bb = shortest(lambda d: clear_pair(far, d))
        d_ff = shortest(lambda d: clear_pair(d, d_bb))
        back_to_back = d_bb
        face_to_face = d_ff
        col_len = d_ff + d_bb
        along = d_ff / (2 * col_len)

    # lateral edges: the smallest common clash-free value (1 A, then 0.25 A steps), then each
    # edge shrunk on its own while the packing stays clash-free
    def clear_cell(lengths: np.ndarray) -> bool:
        return _clear(place(lengths, centre(lengths, along)), is_h, lengths, ops)

    lat = float(np.ptp(xyz[:, lateral], axis=0).max()) * 0.5 + 1.0
    while not clear_cell(cell_for(col_len, lat)):
        lat += 1.0
        if lat > far:
            raise ChemistryError("could not find a clash-free cell", field="space_group")
    lat -= 1.0
    while not clear_cell(cell_for(col_len, lat)):
        lat += 0.25
    lengths = cell_for(col_len, lat)
    for i in lateral:
        while True:
            trial = lengths.copy()
            trial[i] -= 0.25
            if not clear_cell(trial):
                break
            lengths = trial
    frac = place(lengths, centre(lengths, along))

    symbols = [a.GetSymbol() for a in mol.GetAtoms()]
    counters: dict[str, int] = {}
    atoms: list[Atom] = []
    for el, f, h in zip(symbols, frac, is_h):
        counters[el] = counters.get(el, 0) + 1
        atoms.append((f"{el}{counters[el]}", el, *map(float, f), _UISO_H_A2 if h else _UISO_HEAVY_A2))
    formula = rdMolDescriptors.CalcMolFormula(mol)
    counts = parse_formula(formula)
    z = len(ops)
    volume = float(np.prod(lengths))
    density = z * molar_mass_from_counts(counts) / (NA_PER_MOL * volume * 1e-24)
    cell = (float(lengths[0]), float(lengths[1]), float(lengths[2]), 90.0, 90.0, 90.0)
    cif = write_cif(
        data_name=data_name,
        cell=cell,
        space_group_hm=hm,
        space_group_number=number,
        atoms=atoms,
        formula_sum=formula,
        z=z,
        temperature_K=temperature_K,
        density=density,
    )
    # the embedded molecule in crystal coordinates (A), for callers that compare geometry
    placed = Chem.Mol(mol)
    conf = placed.GetConformer()
    cart = frac * lengths
    for i, p in enumerate(cart):
        conf.SetAtomPosition(i, p.tolist())
    return SyntheticCrystal(
        cif=cif,
        mol=placed,
        space_group=sg.short_name(),
        cell=cell,
        stacking_A=stacking_A if back_to_back is None else min(back_to_back, face_to_face),
        back_to_back_A=back_to_back,
        face_to_face_A=face_to_face,
        head_to_tail=head_to_tail,
    )


def bowl_crystal_cif(
    core_smiles_or_mol: str | Chem.Mol,
    space_group: str,
    *,
    stacking_A: float = 3.8,
    head_to_tail: bool = True,
    seed: int = 0,
    temperature_K: float = 150.0,
) -> bytes:
    """CIF bytes of :func:`bowl_crystal` (same parameters)."""
    return bowl_crystal(
        core_smiles_or_mol,
        space_group,
        stacking_A=stacking_A,
        head_to_tail=head_to_tail,
        seed=seed,
        temperature_K=temperature_K,
    ).cif
