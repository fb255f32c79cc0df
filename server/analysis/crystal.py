"""Single-crystal structures (CIF): symmetry class, density, bowl depth and columnar stacking.

A CIF is read with gemmi; the space group is classified from its symmetry operations,
the molecule is rebuilt from covalent radii, and the bowl core (definitions in
:mod:`server.chem.geometry`) gives the bowl depth and the way neighbouring bowls stack.

Symmetry classes follow International Tables for Crystallography, Vol. A
(ed. M. I. Aroyo, 6th ed., Wiley 2016, DOI 10.1107/97809553602060000114):

* **polar**: the point group is one of the ten polar classes 1, 2, m, mm2, 4, 4mm, 3, 3m,
  6, 6mm (a direction is left unchanged by every operation, so a spontaneous polarisation
  is allowed; only these classes can be pyro- or ferroelectric);
* **centrosymmetric**: the point group is one of the eleven Laue classes -1, 2/m, mmm, 4/m,
  4/mmm, -3, -3m, 6/m, 6/mmm, m-3, m-3m;
* **chiral** (Sohncke group): all operations are proper (det R = +1), so the group can hold
  a single enantiomer.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from itertools import product
from typing import Any

import gemmi
import numpy as np
from rdkit import Chem
from scipy.spatial import cKDTree

from server.analysis.results import Flag, Result
from server.analysis.constants import NA_PER_MOL
from server.chem import geometry
from server.errors import AnalysisError, OverLimit

METHOD = (
    "Space group read with gemmi and classified by point group (International Tables for "
    "Crystallography Vol. A: 10 polar, 11 centrosymmetric classes; Sohncke groups have only "
    "proper operations); density Z M / (N_A V); molecule rebuilt from covalent radii "
    "(Cordero et al., Dalton Trans. 2008, 2832) + 0.4 A; bowl depth and column stacking "
    "from the core centroid and bowl axis of the symmetry mates."
)
VERSION = "crystal/1.2"  # 1.1: bowl depth for any hub ring size; 1.2: impossible cells and atom volumes refused

#: 1 A^3 in cm^3.
A3_TO_CM3 = 1e-24

#: The ten polar crystal classes (ITA Vol. A, Table 3.2.3.1; Hermann-Mauguin, as gemmi spells them).
POLAR_POINT_GROUPS = frozenset({"1", "2", "m", "mm2", "4", "4mm", "3", "3m", "6", "6mm"})
#: The eleven centrosymmetric (Laue) classes.
CENTROSYMMETRIC_POINT_GROUPS = frozenset(
    {"-1", "2/m", "mmm", "4/m", "4/mmm", "-3", "-3m", "6/m", "6/mmm", "m-3", "m-3m"}
)

#: Bond when d < r_cov(i) + r_cov(j) + tolerance (common practice; 0.4 A is the usual default
#: of crystallographic display programs, from memory). Radii: Cordero et al. 2008 (via RDKit).
BOND_TOLERANCE_A = 0.4
#: A neighbour stacks in the same column when its core centroid lies within ~37 degrees of the
#: bowl axis (|cos| > 0.8) and closer than STACK_MAX_A (our choice, see Notes of analyse_cif).
STACK_COS_MIN = 0.8
STACK_MAX_A = 8.0
#: Below this bowl depth the core counts as planar and has no direction (our choice: well
#: above the ~0.01 A precision of a routine structure).
FLAT_CORE_A = 0.1
#: Shell for the fraction of neighbours pointing the same way.
NEIGHBOUR_SHELL_A = 10.0
#: Relative difference that flags computed vs reported density (common practice: 2 %).
DENSITY_TOLERANCE = 0.02
#: Largest molecule we grow before calling the structure polymeric.
MAX_MOLECULE_ATOMS = 2000
#: Plausible cell of a small-molecule crystal (our choice, generous): edges up to 500 A (routine
#: molecular crystals stay well below 100 A), and a volume per non-hydrogen atom of 5-150 A^3.
#: Organic crystals give about 18 A^3 per non-H atom (Kempster & Lipson, Acta Cryst. B28, 3674,
#: 1972, the "18 A^3 rule"; value from memory); the range leaves room for solvent voids and
#: dense inorganic counter-ions, and refuses cells no crystal of molecules can have.
MAX_CELL_EDGE_A = 500.0
#: Bounds on the work one CIF may ask for (our choice, common practice for small-molecule
#: crystallography, not a published limit): a bowl molecule with its side chains has tens to a
#: hundred atoms, Z' rarely exceeds 4 and solvent adds a few more, so 1000 atom sites in the
#: asymmetric unit and 20 000 atoms in the cell leave wide room while refusing a protein-sized or
#: hostile file before its work grows (answered 413 naming ``cif_sites`` or ``cell_atoms``).
MAX_CIF_SITES = 1000
MAX_CELL_ATOMS = 20_000
ATOM_VOLUME_RANGE_A3 = (5.0, 150.0)

_SG_HM_TAGS = ("_space_group_name_H-M_alt", "_symmetry_space_group_name_H-M")
_SG_HALL_TAGS = ("_space_group_name_Hall", "_symmetry_space_group_name_Hall")
_SG_NUMBER_TAGS = ("_space_group_IT_number", "_symmetry_Int_Tables_number")
_SYMOP_TAGS = ("_space_group_symop_operation_xyz", "_symmetry_equiv_pos_as_xyz")
_CELL_TAGS = (
    "_cell_length_a",
    "_cell_length_b",
    "_cell_length_c",
    "_cell_angle_alpha",
    "_cell_angle_beta",
    "_cell_angle_gamma",
)


# --------------------------------------------------------------------------------------
# space-group classification


@dataclass(frozen=True)
class SpaceGroupClass:
    """Symmetry class of a space group (ITA Vol. A)."""

    polar: bool
    centrosymmetric: bool
    chiral: bool
    point_group: str


def rotation_matrices(sg: gemmi.SpaceGroup) -> list[np.ndarray]:
    """Rotation parts (integer 3x3 matrices, fractional basis) of all operations of ``sg``."""
    mats = []
    for op in sg.operations():
        mats.append(np.array(op.rot, dtype=float) / op.DEN)
    return mats


def classify_space_group(sg: gemmi.SpaceGroup) -> SpaceGroupClass:
    """Polar / centrosymmetric / Sohncke class of a gemmi space group.

    Parameters
    ----------
    sg : gemmi.SpaceGroup
        Any tabulated setting.

    Returns
    -------
    SpaceGroupClass
        ``polar`` and ``centrosymmetric`` from the Hermann-Mauguin point group against the
        lists of ten polar and eleven centrosymmetric classes; ``chiral`` (Sohncke) when every
        rotation part has determinant +1.

    References
    ----------
    International Tables for Crystallography, Vol. A (2016), Section 3.2 (crystal classes),
    DOI 10.1107/97809553602060000114. Counts over the 230 types: 68 polar, 92
    centrosymmetric, 65 Sohncke.
    """
    pg = sg.point_group_hm()
    chiral = all(np.linalg.det(r) > 0 for r in rotation_matrices(sg))
    return SpaceGroupClass(
        polar=pg in POLAR_POINT_GROUPS,
        centrosymmetric=pg in CENTROSYMMETRIC_POINT_GROUPS,
        chiral=chiral,
        point_group=pg,
    )


def find_space_group(name: str) -> gemmi.SpaceGroup | None:
    """Look up a Hermann-Mauguin symbol, accepting the ``P2_1/c`` subscript spelling."""
    cleaned = name.strip().replace("_", "")
    if not cleaned:
        return None
    return gemmi.find_spacegroup_by_name(cleaned)


# --------------------------------------------------------------------------------------
# formulae


_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]?)(\d+(?:\.\d+)?|\.\d+)?")


def parse_formula(text: str, *, what: str = "formula") -> dict[str, float]:
    """Element counts of a formula such as ``"C21 H12"``, ``"C21H12"`` or ``"C22 H14 Cl2"``.

    Charges (``+``, ``2-``) and spaces are ignored; an unknown element symbol raises
    :class:`AnalysisError`.
    """
    body = re.sub(r"\d*[+-]+\d*\s*$", "", text.strip())
    counts: dict[str, float] = {}
    pos = 0
    body = body.replace(" ", "")
    while pos < len(body):
        m = _FORMULA_TOKEN.match(body, pos)
        if not m or m.end() == pos:
            raise AnalysisError(f"{what} '{text}' cannot be read near '{body[pos:]}'")
        symbol, number = m.group(1), m.group(2)
        if gemmi.Element(symbol).atomic_number == 0:
            raise AnalysisError(f"{what} '{text}': '{symbol}' is not an element symbol")
        counts[symbol] = counts.get(symbol, 0.0) + (float(number) if number else 1.0)
        pos = m.end()
    if not counts:
        raise AnalysisError(f"{what} '{text}' has no elements")
    return counts


def hill_formula(counts: dict[str, float], sep: str = " ") -> str:
    """Hill order: C, then H, then the rest alphabetically (all alphabetical without C)."""
    keys = sorted(counts)
    if "C" in counts:
        keys = ["C"] + (["H"] if "H" in counts else []) + [k for k in keys if k not in ("C", "H")]
    parts = []
    for k in keys:
        n = counts[k]
        if abs(n) < 1e-9:
            continue
        num = "" if abs(n - 1) < 1e-9 else (f"{n:g}")
        parts.append(f"{k}{num}")
    return sep.join(parts)


def molar_mass_from_counts(counts: dict[str, float]) -> float:
    """Molar mass (g/mol) from RDKit's periodic table (IUPAC conventional atomic weights)."""
    table = Chem.GetPeriodicTable()
    return float(sum(table.GetAtomicWeight(el) * n for el, n in counts.items()))


def _same_counts(a: dict[str, float], b: dict[str, float], tol: float = 1e-6) -> bool:
    keys = set(a) | set(b)
    return all(abs(a.get(k, 0.0) - b.get(k, 0.0)) <= tol for k in keys)


# --------------------------------------------------------------------------------------
# result


@dataclass(frozen=True)
class CrystalResult(Result):
    """What a CIF says about polarity, packing and consistency with the registry."""

    JSON_KEYS = (
        "data_block", "space_group", "space_group_xhm", "space_group_number", "point_group", "crystal_system",
        "polar", "centrosymmetric", "chiral", "z", "cell", "density_g_cm3", "density_cif_g_cm3",
        "molar_mass_g_mol", "temperature_K", "r1", "wr2", "goof", "flack", "formula_cif", "bowl_depth_A", "stacking_distance_A",
        "column_axis", "column_axis_angle_deg", "column_polar", "neighbours_same_direction", "verdict", "flags",
    )  # fmt: skip

    data_block: str
    space_group: str
    space_group_xhm: str
    space_group_number: int
    point_group: str
    crystal_system: str
    polar: bool
    centrosymmetric: bool
    chiral: bool
    z: int | None
    cell: dict[str, float]
    density_g_cm3: float | None
    density_cif_g_cm3: float | None
    molar_mass_g_mol: float | None
    temperature_K: float | None
    r1: float | None
    formula_cif: str | None
    bowl_depth_A: float | None = None
    stacking_distance_A: float | None = None
    column_axis: str | None = None
    column_axis_angle_deg: float | None = None
    column_polar: bool | None = None
    neighbours_same_direction: float | None = None
    flags: tuple[Flag, ...] = field(default_factory=tuple)
    wr2: float | None = None
    goof: float | None = None
    flack: float | None = None

    @property
    def verdict(self) -> str:
        """``"polar"``, ``"centrosymmetric"`` or ``"non_polar_acentric"``."""
        if self.centrosymmetric:
            return "centrosymmetric"
        if self.polar:
            return "polar"
        return "non_polar_acentric"


# --------------------------------------------------------------------------------------
# CIF reading helpers


def _read_document(raw: bytes) -> gemmi.cif.Document:
    if not raw or not raw.strip():
        raise AnalysisError("the CIF file is empty")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        # CIF 1.1 is ASCII; old files carry Latin-1 text fields (e.g. an angstrom sign).
        text = raw.decode("latin-1")
    if "\x00" in text:
        raise AnalysisError("the file is binary (contains NUL bytes), not a CIF text file")
    try:
        return gemmi.cif.read_string(text)
    except (ValueError, RuntimeError) as exc:
        msg = str(exc)
        m = re.match(r"^[^:]*:(\d+):(?:\d+(?:\(\d+\))?:)?\s*(.*)$", msg)
        line = int(m.group(1)) if m else None
        detail = m.group(2) if m else msg
        raise AnalysisError(f"not a CIF gemmi can read: {detail}", line=line) from exc


def _value(block: gemmi.cif.Block, tags: tuple[str, ...] | str) -> str | None:
    for tag in (tags,) if isinstance(tags, str) else tags:
        v = block.find_value(tag)
        if v is not None:
            s = gemmi.cif.as_string(v).strip()
            if s not in ("", "?", "."):
                return s
    return None


def _number(block: gemmi.cif.Block, tags: tuple[str, ...] | str) -> float | None:
    for tag in (tags,) if isinstance(tags, str) else tags:
        v = block.find_value(tag)
        if v is None or gemmi.cif.is_null(v):
            continue
        x = gemmi.cif.as_number(v)
        if not math.isfinite(x):
            raise AnalysisError(f"{tag} = '{v}' is not a number", field="cif")
        return float(x)
    return None


def _loop_values(block: gemmi.cif.Block, tags: tuple[str, ...]) -> list[str]:
    for tag in tags:
        col = block.find_values(tag)
        if len(col) > 0:
            return [gemmi.cif.as_string(v) for v in col]
    return []


def _pick_block(doc: gemmi.cif.Document) -> gemmi.cif.Block:
    for block in doc:
        if block.find_value("_cell_length_a") is not None and len(block.find_values("_atom_site_fract_x")) > 0:
            return block
    names = ", ".join(b.name for b in doc) or "none"
    raise AnalysisError(
        "no data block has both a unit cell (_cell_length_a ...) and fractional atom sites "
        f"(_atom_site_fract_x ...); blocks found: {names}"
    )


def _space_group(block: gemmi.cif.Block) -> tuple[gemmi.SpaceGroup, list[Flag]]:
    """The space group, preferring the listed operations (they are what was refined)."""
    flags: list[Flag] = []
    triplets = _loop_values(block, _SYMOP_TAGS)
    hm = _value(block, _SG_HM_TAGS)
    hall = _value(block, _SG_HALL_TAGS)
    number = _number(block, _SG_NUMBER_TAGS)
    from_ops = None
    if triplets:
        try:
            ops = gemmi.GroupOps([gemmi.Op(t) for t in triplets])
        except (ValueError, RuntimeError) as exc:
            raise AnalysisError(f"symmetry operations cannot be read: {exc}", field="cif") from exc
        from_ops = gemmi.find_spacegroup_by_ops(ops)
    from_hm = None
    if hm:
        from_hm = find_space_group(hm)
    from_hall = None
    if hall:
        try:
            from_hall = gemmi.find_spacegroup_by_ops(gemmi.symops_from_hall(hall))
        except (ValueError, RuntimeError) as exc:
            flags.append(Flag("hall_unreadable", f"Hall symbol '{hall}' cannot be read ({exc}); not used"))
    from_number = None
    if number is not None:
        if not (1 <= number <= 230 and float(number).is_integer()):
            raise AnalysisError(f"space-group number {number:g} is not between 1 and 230", field="cif")
        from_number = gemmi.find_spacegroup_by_number(int(number))

    if not (triplets or hm or hall or number is not None):
        raise AnalysisError(
            "the CIF gives no space group: add _space_group_name_H-M_alt (or "
            "_symmetry_space_group_name_H-M), the symmetry operations "
            "(_space_group_symop_operation_xyz) or _space_group_IT_number"
        )
    sg = from_ops or from_hall or from_hm or from_number
    if sg is None:
        raise AnalysisError(
            "the space group given in the CIF is not recognised "
            f"(H-M '{hm}', Hall '{hall}', {len(triplets)} symmetry operations)",
            field="cif",
        )
    others = [g for g in (from_ops, from_hall, from_hm, from_number) if g is not None]
    if any(g.number != sg.number for g in others):
        flags.append(
            Flag(
                "space_group_inconsistent",
                "the space-group symbol, number and symmetry operations in the CIF disagree; "
                f"using {sg.short_name()} (No. {sg.number}) from the "
                + ("symmetry operations" if from_ops else "first readable item"),
            )
        )
    if triplets and from_ops is None:
        flags.append(
            Flag(
                "symops_untabulated",
                "the listed symmetry operations match no tabulated setting; the space group "
                f"was taken from the symbol instead ({sg.short_name()})",
            )
        )
    return sg, flags


@dataclass
class _CellAtom:
    site: int
    element: str
    frac: np.ndarray
    occ: float


def check_cell(cell: dict[str, float]) -> None:
    """Refuse a cell no crystal can have, naming the CIF field.

    Edges must be positive and at most :data:`MAX_CELL_EDGE_A`; angles strictly between 0 and
    180 degrees, and together they must span a real volume: the metric-tensor factor
    ``1 - cos^2(alpha) - cos^2(beta) - cos^2(gamma) + 2 cos(alpha) cos(beta) cos(gamma)`` must be
    positive (V = abc sqrt(factor); International Tables for Crystallography Vol. B, ch. 1.1).
    With the angles in (0, 180) this is also sufficient: the metric tensor is then positive definite.
    """
    for axis in "abc":
        tag = f"_cell_length_{axis}"
        value = cell[tag]
        if not (math.isfinite(value) and 0 < value <= MAX_CELL_EDGE_A):
            raise AnalysisError(f"{tag} = {value:g} A is not a cell edge (0 to {MAX_CELL_EDGE_A:g} A)", field=tag)
    for name in ("alpha", "beta", "gamma"):
        tag = f"_cell_angle_{name}"
        value = cell[tag]
        if not (math.isfinite(value) and 0 < value < 180):
            raise AnalysisError(f"{tag} = {value:g} degrees is not between 0 and 180", field=tag)
    ca, cb, cg = (math.cos(math.radians(cell[f"_cell_angle_{n}"])) for n in ("alpha", "beta", "gamma"))
    factor = 1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg
    if not factor > 1e-9:
        raise AnalysisError(
            f"the cell angles {cell['_cell_angle_alpha']:g}, {cell['_cell_angle_beta']:g}, "
            f"{cell['_cell_angle_gamma']:g} degrees enclose no volume", field="_cell_angle_alpha")


def check_atom_volume(volume_A3: float, non_h_atoms: float) -> None:
    """Refuse a cell whose volume per non-hydrogen atom is outside :data:`ATOM_VOLUME_RANGE_A3`."""
    lo, hi = ATOM_VOLUME_RANGE_A3
    if non_h_atoms <= 0:
        return  # nothing to compare; a CIF of hydrogen only is refused elsewhere or has no molecule
    per_atom = volume_A3 / non_h_atoms
    if not lo <= per_atom <= hi:
        raise AnalysisError(
            f"the cell volume {volume_A3:.4g} A^3 gives {per_atom:.3g} A^3 per non-hydrogen atom "
            f"({non_h_atoms:g} in the cell); crystals of molecules have about 18 (accepted: {lo:g}-{hi:g})",
            field="_cell_volume")


def main_component(sites: list[gemmi.SmallStructure.Site]) -> tuple[list[gemmi.SmallStructure.Site], list[int]]:
    """The ordered atoms and the first disorder group (the main component); also every group found."""
    groups = sorted({s.disorder_group for s in sites if s.disorder_group > 0})
    if groups:
        sites = [s for s in sites if s.disorder_group <= 0 or s.disorder_group == groups[0]]
    return sites, groups


def _op_matrices(sg: gemmi.SpaceGroup) -> list[tuple[np.ndarray, np.ndarray]]:
    out = []
    for op in sg.operations():
        out.append((np.array(op.rot, dtype=float) / op.DEN, np.array(op.tran, dtype=float) / op.DEN))
    return out


def _expand(
    sites: list[gemmi.SmallStructure.Site], ops: list[tuple[np.ndarray, np.ndarray]], orth: np.ndarray
) -> list[_CellAtom]:
    """All atoms in the unit cell (fractional coordinates wrapped to [0, 1)), special positions merged.

    Images of one site closer than 0.1 A (after wrapping) are one atom; the first in the order of
    the space group's operations is kept. Refuses (:class:`OverLimit`, ``cell_atoms``) a cell of
    more than :data:`MAX_CELL_ATOMS` atoms as soon as it is reached.
    """
    rots = np.array([rot for rot, _ in ops])
    trans = np.array([tran for _, tran in ops])
    atoms: list[_CellAtom] = []
    for k, site in enumerate(sites):
        f0 = np.array([site.fract.x, site.fract.y, site.fract.z])
        f = rots @ f0 + trans
        f = f - np.floor(f + 1e-9)
        diff = f[:, None, :] - f[None, :, :]
        diff -= np.round(diff)
        close = np.linalg.norm(diff @ orth.T, axis=2) < 0.1
        keep = ~np.any(np.tril(close, k=-1), axis=1)  # not within 0.1 A of an earlier image
        # An image close only to a dropped image is kept by this rule but was dropped by the
        # sequential rule; for a 0.1 A merge radius both agree (images of one site on a special
        # position coincide exactly).
        for g in f[keep]:
            atoms.append(_CellAtom(site=k, element=site.element.name, frac=g, occ=float(site.occ)))
        if len(atoms) > MAX_CELL_ATOMS:
            raise OverLimit(f"the unit cell holds more than {MAX_CELL_ATOMS} atoms; this registry analyses "
                            "small-molecule crystals only", limit="cell_atoms", value=MAX_CELL_ATOMS)
    return atoms


@dataclass
class _Molecule:
    elements: list[str]
    cart: np.ndarray
    bonds: list[tuple[int, int]]
    cell_indices: list[int]
    polymeric: bool


_SHIFTS = np.array(list(product((-1, 0, 1), repeat=3)), dtype=float)


@dataclass
class _BondGraph:
    """Covalent bonds between the cell's atoms and their lattice images: ``pairs[i]`` lists
    ``(j, shift)`` for atom ``j`` at ``frac[j] + shift`` bonded to atom ``i`` at ``frac[i]``."""

    pairs: list[list[tuple[int, np.ndarray]]]


def _bond_graph(atoms: list[_CellAtom], orth: np.ndarray) -> _BondGraph:
    """Bonds by covalent radii (sum + :data:`BOND_TOLERANCE_A`), found with a k-d tree.

    Neighbour search: every atom and its 26 neighbouring lattice images go into one
    ``scipy.spatial.cKDTree`` and each atom of the cell asks for the points within the largest
    possible bond length (Bentley, Commun. ACM 18, 509, 1975; SciPy's cKDTree). The cost grows as
    N log N instead of the N^2 of comparing all pairs. As before, a bond longer than the shortest
    cell edge (impossible for real cells) is not seen.
    """
    table = Chem.GetPeriodicTable()
    n = len(atoms)
    frac = np.array([a.frac for a in atoms]).reshape(n, 3)
    radii = np.array([table.GetRcovalent(a.element) for a in atoms])
    if n == 0:
        return _BondGraph(pairs=[])
    images = (frac[None, :, :] + _SHIFTS[:, None, :]).reshape(-1, 3) @ orth.T  # index s * n + j
    tree = cKDTree(images)
    centre = frac @ orth.T
    reach = 2.0 * float(radii.max()) + BOND_TOLERANCE_A
    pairs: list[list[tuple[int, np.ndarray]]] = []
    for i, found in enumerate(tree.query_ball_point(centre, r=reach)):
        found = np.asarray(found, dtype=int)
        j, s = found % n, found // n
        dist = np.linalg.norm(images[found] - centre[i], axis=1)
        ok = (dist < radii[j] + radii[i] + BOND_TOLERANCE_A) & (dist > 0.1)
        pairs.append([(int(jj), _SHIFTS[ss]) for jj, ss in zip(j[ok], s[ok])])
    return _BondGraph(pairs=pairs)


def _grow_molecule(seed: int, atoms: list[_CellAtom], orth: np.ndarray,
                   graph: _BondGraph | None = None) -> _Molecule:
    """Breadth-first search over bonded atoms and their lattice images, starting at ``seed``."""
    graph = graph or _bond_graph(atoms, orth)
    frac = np.array([a.frac for a in atoms])
    placed: dict[int, np.ndarray] = {seed: frac[seed].copy()}
    order = [seed]
    position = {seed: 0}
    bonds: set[tuple[int, int]] = set()
    polymeric = False
    queue = [seed]
    head = 0
    while head < len(queue):
        i = queue[head]
        head += 1
        offset = np.round(placed[i] - frac[i])  # the lattice translation the placed atom sits at
        for j, shift in graph.pairs[i]:
            q = frac[j] + shift + offset
            if j in placed:
                if np.linalg.norm(orth @ (placed[j] - q)) > 0.1:
                    polymeric = True
                    continue
            else:
                if len(placed) >= MAX_MOLECULE_ATOMS:
                    polymeric = True
                    continue
                placed[j] = q
                position[j] = len(order)
                order.append(j)
                queue.append(j)
            a, b = sorted((position[i], position[j]))
            bonds.add((a, b))
    cart = np.array([orth @ placed[j] for j in order])
    return _Molecule(
        elements=[atoms[j].element for j in order],
        cart=cart,
        bonds=sorted(bonds),
        cell_indices=order,
        polymeric=polymeric,
    )


def _rdkit_graph(mol: _Molecule) -> Chem.Mol:
    """Connectivity-only RDKit molecule (single bonds) for ring perception."""
    has_h = any(el == "H" for el in mol.elements)
    rw = Chem.RWMol()
    for el in mol.elements:
        atom = Chem.Atom(el)
        atom.SetNoImplicit(True)
        rw.AddAtom(atom)
    for a, b in mol.bonds:
        rw.AddBond(int(a), int(b), Chem.BondType.SINGLE)
    if not has_h:
        # Hydrogens not modelled: give carbons with fewer than three neighbours a hydrogen
        # count so geometry.core_atoms can still tell rim CH positions.
        for atom in rw.GetAtoms():
            if atom.GetAtomicNum() == 6 and atom.GetDegree() < 4:
                atom.SetNumExplicitHs(4 - atom.GetDegree())
    rw.UpdatePropertyCache(strict=False)
    Chem.GetSymmSSSR(rw)
    return rw.GetMol()


def _lattice_direction(vec_frac: np.ndarray, orth: np.ndarray) -> tuple[str, float]:
    """Closest lattice direction [uvw] (|u|,|v|,|w| <= 3) to a fractional vector, with the angle."""
    target = orth @ vec_frac
    target = target / np.linalg.norm(target)
    best = None
    for uvw in product(range(-3, 4), repeat=3):
        if uvw == (0, 0, 0) or math.gcd(math.gcd(abs(uvw[0]), abs(uvw[1])), abs(uvw[2])) != 1:
            continue
        first = next(c for c in uvw if c != 0)
        if first < 0:
            continue
        v = orth @ np.array(uvw, dtype=float)
        cos = abs(float(np.dot(v, target) / np.linalg.norm(v)))
        key = (round(cos, 6), -sum(abs(c) for c in uvw))
        if best is None or key > best[0]:
            best = (key, uvw, cos)
    assert best is not None
    _, uvw, cos = best
    names = {(1, 0, 0): "a", (0, 1, 0): "b", (0, 0, 1): "c"}
    name = names.get(uvw, "[" + " ".join(str(c) for c in uvw) + "]")
    return name, math.degrees(math.acos(min(1.0, cos)))


@dataclass(frozen=True)
class _BowlPacking:
    bowl_depth_A: float
    stacking_distance_A: float | None
    column_axis: str | None
    column_axis_angle_deg: float | None
    column_polar: bool | None
    neighbours_same_direction: float | None


def _bowl_packing(
    coords_A: np.ndarray,
    core: geometry.CoreAtoms,
    ops: list[tuple[np.ndarray, np.ndarray]],
    orth: np.ndarray,
) -> _BowlPacking:
    frac_m = np.linalg.inv(orth)
    core_xyz = coords_A[list(core.core)]
    centre_cart = core_xyz.mean(axis=0)
    centre = frac_m @ centre_cart
    axis = geometry.bowl_axis(coords_A, core)
    depth = geometry.bowl_depth_A(coords_A, core)

    # enough lattice translations to cover the neighbour shell along each axis
    spacing = 1.0 / np.linalg.norm(frac_m, axis=1)  # interplanar distances d_100, d_010, d_001
    reach = max(NEIGHBOUR_SHELL_A, STACK_MAX_A)
    n = [int(math.ceil(reach / s)) + 1 for s in spacing]
    translations = np.array(
        list(product(range(-n[0], n[0] + 1), range(-n[1], n[1] + 1), range(-n[2], n[2] + 1))), dtype=float
    )
    vecs, axes = [], []
    for rot, tran in ops:
        img = rot @ centre + tran
        rot_cart = orth @ rot @ frac_m
        img_axis = rot_cart @ axis
        d_frac = img[None, :] + translations - centre[None, :]
        vecs.append(d_frac)
        axes.append(np.repeat(img_axis[None, :], len(translations), axis=0))
    d_frac = np.concatenate(vecs)
    n_axes = np.concatenate(axes)
    d_cart = d_frac @ orth.T
    dist = np.linalg.norm(d_cart, axis=1)
    others = dist > 0.5  # drop the molecule itself (and itself again on a special position)
    shell = others & (dist <= NEIGHBOUR_SHELL_A)
    same = n_axes @ axis > 0
    fraction = float(np.mean(same[shell])) if np.any(shell) else None
    with np.errstate(invalid="ignore", divide="ignore"):
        cos = np.abs(d_cart @ axis) / dist
    stack = others & (dist <= STACK_MAX_A) & (cos > STACK_COS_MIN)
    if not np.any(stack):
        return _BowlPacking(depth, None, None, None, None, fraction)
    k = int(np.flatnonzero(stack)[np.argmin(dist[stack])])
    name, angle = _lattice_direction(d_frac[k], orth)
    return _BowlPacking(
        bowl_depth_A=depth,
        stacking_distance_A=float(dist[k]),
        column_axis=name,
        column_axis_angle_deg=angle,
        column_polar=bool(n_axes[k] @ axis > 0),
        neighbours_same_direction=fraction,
    )


# --------------------------------------------------------------------------------------
# main entry


#: Plausible density of organic molecular crystals, g/cm3 (common practice, from memory: packed
#: aromatics sit near 1.2-1.5 g/cm3; below 1.1 the cell is mostly empty, above 1.6 heavy atoms are needed).
DENSITY_PLAUSIBLE_G_CM3 = (1.1, 1.6)
#: Longest centroid distance of pi-stacked bowls in a column, A (common practice, from memory: stacked
#: bowls sit near 3.4-4.2 A; a longer contact is no pi-stack).
PI_STACK_MAX_A = 4.2
#: A monoclinic beta within this of 90 deg may hide orthorhombic symmetry (common practice: 90.00 as reported).
BETA_90_TOLERANCE_DEG = 0.005


def quality_flags(*, r1: float | None, wr2: float | None, density_g_cm3: float | None,
                  stacking_distance_A: float | None, crystal_system: str, beta_deg: float,
                  polar: bool, chiral: bool, flack: float | None) -> list[Flag]:
    """Checks a referee makes of a structure; each flag lowers the structure's weight in the verdict
    (:mod:`server.analysis.verdict`), none deletes it.

    * ``r_factors_missing``: no R1 (``_refine_ls_R_factor_gt``) or no wR2 (``_refine_ls_wR_factor_ref``):
      the refinement cannot be judged (IUCr CIF core dictionary, refine category);
    * ``density_implausible``: outside :data:`DENSITY_PLAUSIBLE_G_CM3` (common practice);
    * ``column_too_long``: column neighbour farther than :data:`PI_STACK_MAX_A` (common practice);
    * ``monoclinic_beta_90``: monoclinic with beta = 90.00 deg: possible missed (orthorhombic) symmetry;
    * ``absolute_structure_missing``: a polar or chiral space group without a Flack parameter
      (H. D. Flack, Acta Cryst. A39, 876 (1983)): the polar direction or handedness is not determined.
    """
    flags: list[Flag] = []
    missing = [n for n, v in (("R1", r1), ("wR2", wr2)) if v is None]
    if missing:
        flags.append(Flag("r_factors_missing", f"the CIF gives no {' and no '.join(missing)}: the refinement "
                          "quality cannot be judged"))
    lo, hi = DENSITY_PLAUSIBLE_G_CM3
    if density_g_cm3 is not None and not (lo <= density_g_cm3 <= hi):
        flags.append(Flag("density_implausible", f"density {density_g_cm3:.2f} g/cm3 is outside {lo:g}-{hi:g} "
                          "g/cm3, the usual range for organic crystals (common practice): check Z, the cell and "
                          "the formula"))
    if stacking_distance_A is not None and stacking_distance_A > PI_STACK_MAX_A:
        flags.append(Flag("column_too_long", f"column neighbour at {stacking_distance_A:.1f} A, longer than "
                          f"{PI_STACK_MAX_A:g} A: not a pi-stacked column (common practice)"))
    if crystal_system.lower() == "monoclinic" and abs(beta_deg - 90.0) < BETA_90_TOLERANCE_DEG:
        flags.append(Flag("monoclinic_beta_90", f"monoclinic cell with beta = {beta_deg:.2f} deg: possible "
                          "missed orthorhombic symmetry"))
    if (polar or chiral) and flack is None:
        flags.append(Flag("absolute_structure_missing", "polar or chiral space group without a Flack parameter: "
                          "the absolute structure (polar direction, handedness) is not determined"))
    return flags


def analyse_cif(
    raw: bytes,
    *,
    formula: str | None = None,
    molar_mass_g_mol: float | None = None,
    core_smiles: str | None = None,
) -> CrystalResult:
    """Read a small-molecule CIF and report symmetry class, density, bowl depth and stacking.

    Parameters
    ----------
    raw : bytes
        The CIF file.
    formula : str, optional
        Registered molecular formula (e.g. ``"C21H12"``), compared with _chemical_formula_sum.
    molar_mass_g_mol : float, optional
        Registered molar mass (g/mol); used for the density when given, else the CIF formula.
    core_smiles : str, optional
        SMILES of the registered bowl core; the crystal's core ring system must have the same
        number of atoms.

    Returns
    -------
    CrystalResult
        Contract keys: space_group, space_group_number, point_group, crystal_system, polar,
        centrosymmetric, chiral, z, cell {a, b, c (A), alpha, beta, gamma (deg), volume (A^3)},
        density_g_cm3, density_cif_g_cm3, temperature_K, r1, formula_cif, data_block,
        bowl_depth_A, stacking_distance_A, column_axis, column_polar,
        neighbours_same_direction, flags, verdict.

    Raises
    ------
    AnalysisError
        A file gemmi cannot parse (with its line), no block with cell and atoms, no space
        group, a bad cell.

    Notes
    -----
    * Classification: :func:`classify_space_group` (ITA Vol. A).
    * Density: rho = Z M / (N_A V), V from the cell (gemmi), N_A from CODATA 2018; compared
      with _exptl_crystal_density_diffrn (flag above 2 %, common practice).
    * Molecule: atoms of the asymmetric unit (main disorder component) are expanded with the
      space-group operations, then grown breadth-first over lattice images, bonding pairs
      closer than the sum of covalent radii (Cordero et al., Dalton Trans. 2008, 2832,
      DOI 10.1039/b801115j) + 0.4 A. The core and bowl depth come from
      :mod:`server.chem.geometry`, so they match the computed estimate.
    * Stacking: the core centroid and bowl axis are mapped by every operation (the axis with
      the Cartesian rotation part, so inversions and mirrors flip it) and by lattice
      translations. The column neighbour is the nearest image within 8 A whose centroid
      vector makes less than ~37 degrees with the bowl axis (|cos| > 0.8; our choice, wide
      enough for slipped stacks). ``column_polar`` is True when that neighbour's axis points
      the same way (dot > 0): head-to-tail. ``neighbours_same_direction`` is the fraction of
      all images with centroids within 10 A whose axes point the same way.
    """
    if molar_mass_g_mol is not None and not (math.isfinite(molar_mass_g_mol) and molar_mass_g_mol > 0):
        raise AnalysisError(f"molar mass {molar_mass_g_mol} g/mol is not a positive number", field="molar_mass")
    doc = _read_document(raw)
    block = _pick_block(doc)
    flags: list[Flag] = []

    for tag in _CELL_TAGS:
        if _number(block, tag) is None:
            raise AnalysisError(f"the cell is incomplete: {tag} is missing", field="cif")
    check_cell({tag: _number(block, tag) for tag in _CELL_TAGS})
    sg, sg_flags = _space_group(block)
    flags.extend(sg_flags)
    try:
        small = gemmi.make_small_structure_from_block(block)
    except (ValueError, RuntimeError) as exc:
        raise AnalysisError(f"gemmi cannot build the structure: {exc}", field="cif") from exc
    cell = small.cell
    if not (cell.volume > 0 and math.isfinite(cell.volume)):
        raise AnalysisError("the cell parameters give no positive volume", field="cif")
    cls = classify_space_group(sg)
    orth = np.array(cell.orth.mat.tolist())
    ops = _op_matrices(sg)

    # atoms: main disorder component only
    sites = list(small.sites)
    if not sites:
        raise AnalysisError("the CIF lists no atom sites", field="cif")
    if len(sites) > MAX_CIF_SITES:
        raise OverLimit(f"the CIF lists {len(sites)} atom sites; at most {MAX_CIF_SITES} are analysed (small-molecule "
                        "crystals have far fewer)", limit="cif_sites", value=MAX_CIF_SITES)
    sites, groups = main_component(sites)
    if groups:
        flags.append(
            Flag("disorder", f"disorder groups {groups} present; geometry uses group {groups[0]} and ordered atoms")
        )
    unknown = sorted({s.type_symbol for s in sites if s.element.atomic_number == 0})
    if unknown:
        raise AnalysisError(f"atom sites with unknown element types: {', '.join(unknown)}", field="cif")
    cell_atoms = _expand(sites, ops, orth)
    check_atom_volume(cell.volume, sum(a.occ for a in cell_atoms if a.element not in ("H", "D")))

    # formulae
    formula_cif_text = _value(block, "_chemical_formula_sum")
    counts_cif = parse_formula(formula_cif_text, what="_chemical_formula_sum") if formula_cif_text else None
    counts_reg = parse_formula(formula, what="registered formula") if formula else None
    if counts_cif and counts_reg and not _same_counts(counts_cif, counts_reg):
        flags.append(Flag("formula_mismatch", _formula_mismatch_message(counts_cif, counts_reg)))
    counts_unit = counts_cif or counts_reg

    # Z
    z_value = _number(block, "_cell_formula_units_Z")
    z: int | None
    if z_value is not None:
        if z_value <= 0 or not float(z_value).is_integer():
            raise AnalysisError(f"_cell_formula_units_Z = {z_value:g} is not a positive integer", field="cif")
        z = int(z_value)
    else:
        z = _estimate_z(cell_atoms, counts_unit, orth)
        flags.append(
            Flag(
                "z_estimated",
                "_cell_formula_units_Z is missing; Z = "
                + (f"{z} estimated from the atoms in the cell" if z else "unknown (could not be estimated)"),
            )
        )

    # cell content vs Z x formula
    if counts_unit and z:
        msg = _content_mismatch(cell_atoms, counts_unit, z)
        if msg:
            flags.append(Flag("cell_content_mismatch", msg))

    # density
    mass = molar_mass_g_mol if molar_mass_g_mol is not None else (
        molar_mass_from_counts(counts_cif) if counts_cif else None
    )
    density = z * mass / (NA_PER_MOL * cell.volume * A3_TO_CM3) if (z and mass) else None
    density_cif = _number(block, "_exptl_crystal_density_diffrn")
    if density is None:
        flags.append(Flag("no_density", "density not computed: Z or the formula/molar mass is missing"))
    elif density_cif is not None and abs(density - density_cif) > DENSITY_TOLERANCE * density_cif:
        flags.append(
            Flag(
                "density_mismatch",
                f"computed density {density:.3f} g/cm3 differs from the CIF's {density_cif:.3f} g/cm3 by more "
                "than 2 %: check Z, the formula (solvent?) and the cell",
            )
        )

    temperature = _number(block, ("_diffrn_ambient_temperature", "_cell_measurement_temperature"))
    if temperature is not None and temperature <= 0:
        raise AnalysisError(f"temperature {temperature:g} K is not positive", field="cif")
    if temperature is None:
        flags.append(Flag("no_temperature", "the CIF gives no measurement temperature"))
    r1 = _number(block, ("_refine_ls_R_factor_gt", "_refine_ls_R_factor_obs"))
    wr2 = _number(block, ("_refine_ls_wR_factor_ref", "_refine_ls_wR_factor_gt"))
    goof = _number(block, ("_refine_ls_goodness_of_fit_ref", "_refine_ls_goodness_of_fit_all"))
    flack = _number(block, ("_refine_ls_abs_structure_Flack", "_refine_ls_abs_structure_Flack_errorless"))

    packing = _analyse_molecules(sites, cell_atoms, ops, orth, core_smiles, flags)
    flags.extend(quality_flags(r1=r1, wr2=wr2, density_g_cm3=density,
                               stacking_distance_A=packing.stacking_distance_A if packing else None,
                               crystal_system=sg.crystal_system_str(), beta_deg=cell.beta,
                               polar=cls.polar, chiral=cls.chiral, flack=flack))

    return CrystalResult(
        data_block=block.name,
        space_group=sg.short_name(),
        space_group_xhm=sg.xhm(),
        space_group_number=sg.number,
        point_group=cls.point_group,
        crystal_system=sg.crystal_system_str(),
        polar=cls.polar,
        centrosymmetric=cls.centrosymmetric,
        chiral=cls.chiral,
        z=z,
        cell={
            "a": cell.a,
            "b": cell.b,
            "c": cell.c,
            "alpha": cell.alpha,
            "beta": cell.beta,
            "gamma": cell.gamma,
            "volume": cell.volume,
        },
        density_g_cm3=density,
        density_cif_g_cm3=density_cif,
        molar_mass_g_mol=mass,
        temperature_K=temperature,
        r1=r1,
        wr2=wr2,
        goof=goof,
        flack=flack,
        formula_cif=hill_formula(counts_cif) if counts_cif else None,
        bowl_depth_A=packing.bowl_depth_A if packing else None,
        stacking_distance_A=packing.stacking_distance_A if packing else None,
        column_axis=packing.column_axis if packing else None,
        column_axis_angle_deg=packing.column_axis_angle_deg if packing else None,
        column_polar=packing.column_polar if packing else None,
        neighbours_same_direction=packing.neighbours_same_direction if packing else None,
        flags=tuple(flags),
    )


def _formula_mismatch_message(cif: dict[str, float], reg: dict[str, float]) -> str:
    base = f"CIF formula {hill_formula(cif)} differs from the registered {hill_formula(reg)}"
    ratios = {cif.get(k, 0.0) / reg[k] for k in reg if reg[k]} if set(cif) == set(reg) else set()
    if len(ratios) == 1:
        (k,) = ratios
        if k > 1 and abs(k - round(k)) < 1e-6:
            return base + f": the CIF formula unit holds {round(k)} molecules (Z' > 1 formula unit?)"
    diff = {k: cif.get(k, 0.0) - reg.get(k, 0.0) for k in set(cif) | set(reg)}
    extra = {k: v for k, v in diff.items() if v > 1e-6}
    missing = {k: -v for k, v in diff.items() if v < -1e-6}
    if extra and not missing:
        return base + (
            f": the crystal has {hill_formula(extra)} more per formula unit; a solvate (solvent in the "
            "lattice) or a salt/co-crystal is the common reason"
        )
    if missing and not extra:
        return base + f": the CIF lacks {hill_formula(missing)}; unmodelled atoms or a different compound?"
    return base + ": a different compound, a solvate or a salt; check the sample"


def _cell_counts(cell_atoms: list[_CellAtom]) -> dict[str, float]:
    counts: dict[str, float] = {}
    for a in cell_atoms:
        counts[a.element] = counts.get(a.element, 0.0) + a.occ
    return counts


def _estimate_z(cell_atoms: list[_CellAtom], counts: dict[str, float] | None, orth: np.ndarray,
                graph: _BondGraph | None = None) -> int | None:
    """Z from atoms in the cell / atoms in the formula, else the number of molecules in the cell."""
    if counts:
        heavy_cell = sum(v for k, v in _cell_counts(cell_atoms).items() if k != "H")
        heavy_unit = sum(v for k, v in counts.items() if k != "H")
        if heavy_unit > 0:
            ratio = heavy_cell / heavy_unit
            if ratio >= 0.5 and abs(ratio - round(ratio)) < 0.1:
                return int(round(ratio))
            return None
    seen: set[int] = set()
    n = 0
    graph = graph or _bond_graph(cell_atoms, orth)
    for i in range(len(cell_atoms)):
        if i in seen:
            continue
        mol = _grow_molecule(i, cell_atoms, orth, graph)
        seen.update(mol.cell_indices)
        n += 1
    return n or None


def _content_mismatch(cell_atoms: list[_CellAtom], counts: dict[str, float], z: int) -> str | None:
    have = _cell_counts(cell_atoms)
    want = {k: v * z for k, v in counts.items()}
    diffs = {k: have.get(k, 0.0) - want.get(k, 0.0) for k in set(have) | set(want)}
    bad = {k: v for k, v in diffs.items() if abs(v) > 0.5}
    if not bad:
        return None
    parts = ", ".join(f"{k} {have.get(k, 0.0):g} vs {want.get(k, 0.0):g}" for k in sorted(bad))
    msg = f"atoms in the cell disagree with Z x formula ({z} x {hill_formula(counts)}): {parts}"
    if set(bad) == {"H"} and bad["H"] < 0:
        msg += "; hydrogen atoms may not be modelled"
    return msg


def _analyse_molecules(
    sites: list[gemmi.SmallStructure.Site],
    cell_atoms: list[_CellAtom],
    ops: list[tuple[np.ndarray, np.ndarray]],
    orth: np.ndarray,
    core_smiles: str | None,
    flags: list[Flag],
) -> _BowlPacking | None:
    # seed molecules at the identity image of each asymmetric-unit site until all are covered
    first_image = {}
    for idx, a in enumerate(cell_atoms):
        first_image.setdefault(a.site, idx)
    covered: set[int] = set()
    best: tuple[int, Chem.Mol, np.ndarray, geometry.CoreAtoms] | None = None
    n_cores = 0
    graph = _bond_graph(cell_atoms, orth)
    for k in range(len(sites)):
        if k in covered:
            continue
        mol = _grow_molecule(first_image[k], cell_atoms, orth, graph)
        covered.update(cell_atoms[j].site for j in mol.cell_indices)
        if mol.polymeric:
            flags.append(Flag("polymeric", "atoms bond to their own lattice images: a network, not molecules"))
            continue
        rd = _rdkit_graph(mol)
        core = geometry.core_atoms(rd)
        if core is None or not core.rim:
            continue
        n_cores += 1
        if best is None or len(core.core) > best[0]:
            best = (len(core.core), rd, mol.cart, core)
    if best is None:
        flags.append(
            Flag("no_bowl_core", "no fused ring system of two or more rings (bowl core) found in the structure")
        )
        return None
    if n_cores > 1:
        flags.append(
            Flag("several_molecules", f"{n_cores} independent molecules with a core; the largest core is analysed")
        )
    _, rd, cart, core = best
    if core_smiles:
        ref = Chem.MolFromSmiles(core_smiles)
        if ref is None:
            raise AnalysisError(f"core SMILES '{core_smiles}' cannot be parsed", field="core_smiles")
        ref_core = geometry.core_atoms(ref)
        if ref_core is None or len(ref_core.core) != len(core.core):
            flags.append(
                Flag(
                    "core_mismatch",
                    f"the crystal's core ring system has {len(core.core)} atoms, the registered core "
                    f"{len(ref_core.core) if ref_core else 0}",
                )
            )
    packing = _bowl_packing(cart, core, ops, orth)
    if packing.bowl_depth_A < FLAT_CORE_A:
        flags.append(
            Flag(
                "flat_core",
                f"bowl depth {packing.bowl_depth_A:.3f} A is below {FLAT_CORE_A} A: the core is planar, so the "
                "bowl direction and the column polarity are undefined",
            )
        )
        packing = replace(packing, column_polar=None, neighbours_same_direction=None)
    return packing
