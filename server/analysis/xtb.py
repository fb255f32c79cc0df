"""Computed bowl-to-bowl inversion barrier with GFN2-xTB (tblite).

The estimate compares two GFN2-xTB energies of one molecule:

* the **bowl minimum**: a full, unconstrained geometry optimisation;
* a **planar transition-state model**: the same molecule with the heavy atoms of the
  core ring system held in one plane (their out-of-plane coordinate fixed at z = 0)
  and every other coordinate optimised.

``barrier = E(planar) - E(bowl)``. Bowl inversion of C3-symmetric bowls runs through
a planar (D3h-like) transition state, so a planar-constrained optimisation is the
usual cheap model of the saddle point (common practice for buckybowl inversion
barriers; see the references below); it is an upper-bound
style estimate, not a located saddle point.

Threads: tblite parallelises with OpenMP and reads ``OMP_NUM_THREADS`` when its
library is first loaded. This module never changes the environment; a worker that
shares cores should start with ``OMP_NUM_THREADS=1`` (the benchmark script does).
"""

from __future__ import annotations

import importlib.metadata
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy
import scipy.constants as sc
from ..chem.identity import quiet_rdkit
from rdkit import Chem, rdBase
from rdkit import __version__ as rdkit_version
from rdkit.Chem import AllChem
from scipy.optimize import minimize

from server.analysis.results import Flag, Result
from server.chem.geometry import bowl_axis, bowl_depth_A, core_atoms, plane_fit
from server.errors import AnalysisError, ChemistryError

METHOD = (
    "GFN2-xTB (tblite) energies of the optimised bowl and of a planar-core constrained "
    "structure; barrier = E(planar) - E(bowl) (Bannwarth, Ehlert and Grimme, "
    "J. Chem. Theory Comput. 15, 1652 (2019), doi:10.1021/acs.jctc.8b01176)."
)
VERSION = "xtb/1.1"  # 1.1: bowl depth for any hub ring size

#: 1 Hartree in kcal/mol, from CODATA (scipy.constants): E_h N_A / (4184 J/kcal).
HARTREE_KCAL_MOL: float = sc.physical_constants["Hartree energy"][0] * sc.N_A / (1000.0 * sc.calorie)
#: 1 bohr in angstrom (CODATA Bohr radius).
BOHR_A: float = sc.physical_constants["Bohr radius"][0] * 1e10
#: 1 e*bohr in debye: e a0 / (1e-21 C m / c), since 1 D = 1e-21/c C m.
EBOHR_DEBYE: float = sc.e * sc.physical_constants["Bohr radius"][0] * sc.c / 1e-21

#: Default convergence threshold on the largest Cartesian gradient component, Hartree/bohr.
#: 4.5e-4 Eh/bohr is the usual "maximum force" criterion of quantum-chemistry programs
#: (Gaussian's default; common practice). xtb's own "normal" level uses 1e-3 Eh/bohr.
DEFAULT_GTOL_EH_BOHR: float = 4.5e-4
#: Below this bowl depth (angstrom) the optimised minimum is taken as planar.
PLANAR_DEPTH_A: float = 0.05
#: A pre-optimised core shallower than this (angstrom) is curved into a bowl before
#: the GFN2-xTB optimisation (see ``_bowl_start``).
START_DEPTH_A: float = 0.6
#: Energies closer than this (Hartree) are numerical noise of SCF and optimisation
#: convergence (about 0.006 kcal/mol).
ENERGY_NOISE_EH: float = 1e-5

DEFAULT_SEED = 0xB0E1
DEFAULT_MAX_STEPS = 400
DEFAULT_CONFORMERS = 6

ProgressFn = Callable[[float, str], None]
CancelFn = Callable[[], bool]


class EstimateCancelled(Exception):
    """The caller asked (through ``should_cancel``) to stop a running estimate.

    Deliberately not an :class:`~server.errors.InputError`: nothing is wrong with the input.
    """


@dataclass(frozen=True)
class XtbEstimate(Result):
    """Result of :func:`estimate_barrier`. Energies in Hartree, lengths in angstrom.

    ``xyz_bowl`` and ``xyz_planar`` are XYZ files (angstrom) of the optimised bowl and
    planar-core structures; atom order: the heavy atoms in the order of ``smiles_used``,
    then the hydrogens. ``xyz_planar`` is None when the minimum was planar from the start.
    The JSON leaves the coordinates out and adds the module ``version``.
    """

    JSON_KEYS = (
        "barrier_kcal_mol", "bowl_depth_A", "dipole_D", "dipole_axial_D", "planar", "model", "method", "converged",
        "steps_bowl", "steps_planar", "gradient_evaluations_bowl", "gradient_evaluations_planar",
        "conformers_screened", "screening_evaluations", "max_gradient_bowl_Eh_bohr", "max_gradient_planar_Eh_bohr",
        "gtol_Eh_bohr", "energy_bowl_Eh", "energy_planar_Eh", "wall_time_s", "software", "smiles_used", "atoms",
        "flags", "version",
    )  # fmt: skip

    barrier_kcal_mol: float
    bowl_depth_A: float
    dipole_D: float
    dipole_axial_D: float
    planar: bool
    model: str
    converged: bool
    steps_bowl: int
    steps_planar: int
    gradient_evaluations_bowl: int
    gradient_evaluations_planar: int
    conformers_screened: int
    screening_evaluations: int
    max_gradient_bowl_Eh_bohr: float
    max_gradient_planar_Eh_bohr: float | None
    gtol_Eh_bohr: float
    energy_bowl_Eh: float
    energy_planar_Eh: float | None
    wall_time_s: float
    software: dict
    smiles_used: str
    atoms: int
    flags: tuple[Flag, ...] = ()
    method: str = "gfn2-xtb"
    xyz_bowl: str = field(default="", repr=False)
    xyz_planar: str | None = field(default=None, repr=False)

    @property
    def version(self) -> str:
        return VERSION


# --------------------------------------------------------------------------- structure


def _parse(smiles: str) -> Chem.Mol:
    if not isinstance(smiles, str) or not smiles.strip():
        raise ChemistryError("no SMILES given", field="smiles")
    mol = Chem.MolFromSmiles(smiles.strip())
    if mol is None:
        raise ChemistryError(f"RDKit cannot read the SMILES '{smiles}'", field="smiles")
    frags = Chem.GetMolFrags(mol)
    if len(frags) > 1:
        raise AnalysisError(
            f"the SMILES has {len(frags)} separate fragments; give the molecule alone "
            "(no counter-ions or solvent) for a computed estimate",
            field="smiles",
        )
    return mol


def _core_set(mol: Chem.Mol) -> set[int]:
    ca = core_atoms(mol)
    if ca is None:
        raise AnalysisError(
            "the structure has no six-membered ring, so it has no bowl core to invert",
            field="smiles",
        )
    return set(ca.core)


def truncate_mol(mol: Chem.Mol) -> tuple[Chem.Mol, int]:
    """Shorten every substituent on the core ring system to its first one or two atoms.

    Each substituent keeps the atom bonded to the core (the attachment atom). If that
    atom is a heteroatom (O, S, N, Se, ...), the heavy atoms bonded to it are kept as
    well; everything further out is removed and the kept atoms are filled up with
    hydrogens. So alkoxy O-R becomes O-CH3, alkylthio S-CH3, dialkylamino N(CH3)2,
    and an alkyl or aryl group on the core becomes CH3. Aromatic flags of kept
    substituent atoms are dropped (their ring partners are gone).

    Returns the new molecule and the number of heavy atoms removed.

    Notes
    -----
    Truncating long chains to methyl is the usual way to make semi-empirical or DFT
    barriers of alkoxy-substituted bowls affordable: the chains change the barrier
    little compared with the attachment atom (common practice).
    """
    core = _core_set(mol)
    keep: set[int] = set(core)
    for idx in core:
        for nbr in mol.GetAtomWithIdx(idx).GetNeighbors():
            j = nbr.GetIdx()
            if j in core:
                continue
            keep.add(j)
            if nbr.GetAtomicNum() != 6:
                keep.update(n.GetIdx() for n in nbr.GetNeighbors() if n.GetIdx() not in core)
    drop = sorted(set(range(mol.GetNumAtoms())) - keep, reverse=True)
    if not drop:
        return Chem.Mol(mol), 0
    rw = Chem.RWMol(mol)
    touched: set[int] = set()
    for j in drop:
        for nbr in rw.GetAtomWithIdx(j).GetNeighbors():
            if nbr.GetIdx() in keep:
                touched.add(nbr.GetIdx())
    for i in keep - core:
        atom = rw.GetAtomWithIdx(i)
        if atom.GetIsAromatic():
            atom.SetIsAromatic(False)
            touched.add(i)
            for bond in atom.GetBonds():
                if bond.GetIsAromatic() or bond.GetBondType() == Chem.BondType.AROMATIC:
                    bond.SetIsAromatic(False)
                    bond.SetBondType(Chem.BondType.SINGLE)
    for i in touched:
        atom = rw.GetAtomWithIdx(i)
        atom.SetNoImplicit(False)
        atom.SetNumExplicitHs(0)
    for j in drop:  # descending, so remaining indices stay valid
        rw.RemoveAtom(j)
    out = rw.GetMol()
    try:
        Chem.SanitizeMol(out)
    except Chem.rdchem.MolSanitizeException as exc:
        raise AnalysisError(
            f"cannot shorten the side chains of this structure to methyl ({exc}); "
            "run it with full side chains instead",
            field="smiles",
        ) from exc
    return out, len(drop)


def truncated_smiles(smiles: str) -> str:
    """Canonical SMILES of ``smiles`` with side chains shortened as in :func:`truncate_mol`."""
    mol, _ = truncate_mol(_parse(smiles))
    return Chem.MolToSmiles(mol)


def _xyz_block(numbers: np.ndarray, coords_A: np.ndarray, comment: str) -> str:
    lines = [str(len(numbers)), comment]
    table = Chem.GetPeriodicTable()
    for z, (x, y, zc) in zip(numbers, coords_A):
        lines.append(f"{table.GetElementSymbol(int(z)):<2s} {x:14.8f} {y:14.8f} {zc:14.8f}")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- GFN2-xTB


class _Gfn2:
    """GFN2-xTB energy and gradient with an SCF restart and an evaluation counter."""

    def __init__(self, numbers: np.ndarray, positions_bohr: np.ndarray, charge: int, uhf: int,
                 should_cancel: CancelFn | None) -> None:
        from tblite.exceptions import TBLiteRuntimeError, TBLiteValueError
        from tblite.interface import Calculator

        self._errors = (TBLiteRuntimeError, TBLiteValueError)
        try:
            self.calc = Calculator("GFN2-xTB", numbers, positions_bohr, charge=float(charge), uhf=uhf)
            self.calc.set("verbosity", 0)
        except self._errors as exc:
            raise AnalysisError(f"GFN2-xTB cannot set up this molecule: {exc}", field="smiles") from exc
        self.result = None
        self.evaluations = 0
        self.should_cancel = should_cancel

    def __call__(self, positions_bohr: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
        if self.should_cancel is not None and self.should_cancel():
            raise EstimateCancelled("estimate cancelled on request")
        try:
            self.calc.update(positions_bohr)
            self.result = self.calc.singlepoint(self.result)
        except self._errors as exc:
            raise AnalysisError(
                f"GFN2-xTB failed (SCF did not converge or the geometry is unreasonable): {exc}"
            ) from exc
        self.evaluations += 1
        energy = float(self.result.get("energy"))
        gradient = np.asarray(self.result.get("gradient"), dtype=float)
        if not math.isfinite(energy) or not np.all(np.isfinite(gradient)):
            raise AnalysisError("GFN2-xTB returned a non-finite energy or gradient")
        return energy, gradient, np.asarray(self.result.get("dipole"), dtype=float)


@dataclass
class _OptResult:
    x_bohr: np.ndarray
    energy_Eh: float
    gradient: np.ndarray
    dipole_ebohr: np.ndarray
    steps: int
    evaluations: int
    max_gradient: float
    converged: bool


def _optimise(
    xtb: _Gfn2,
    x0_bohr: np.ndarray,
    free: np.ndarray,
    *,
    gtol: float,
    max_steps: int,
    progress: ProgressFn | None,
    span: tuple[float, float],
    label: str,
) -> _OptResult:
    """L-BFGS-B in Cartesian coordinates over the ``free`` (boolean mask, shape (n, 3)) coordinates.

    Converged when the largest free gradient component is below ``gtol`` (Eh/bohr).
    The energy-change test of L-BFGS-B is switched off (``ftol`` tiny) so that the
    gradient criterion decides; after an abnormal line-search stop (SCF noise) the
    optimiser is restarted from the last point while steps remain.
    """
    x_full = np.array(x0_bohr, dtype=float)
    mask = free.ravel()
    evals_start = xtb.evaluations
    cache: dict = {}

    def fun(v: np.ndarray) -> tuple[float, np.ndarray]:
        x = x_full.copy().ravel()
        x[mask] = v
        x = x.reshape(-1, 3)
        e, g, d = xtb(x)
        cache.update(x=x, e=e, g=g, d=d)
        return e, g.ravel()[mask]

    steps = 0
    lo, hi = span

    def callback(intermediate_result) -> None:  # scipy >= 1.11 signature
        nonlocal steps
        steps += 1
        if progress is not None:
            gmax = float(np.max(np.abs(cache["g"].ravel()[mask])))
            frac = lo + (hi - lo) * steps / (steps + 40.0)
            progress(frac, f"{label}: step {steps}, max gradient {gmax:.1e} Eh/bohr")

    v = x_full.ravel()[mask].copy()
    for _ in range(4):
        remaining = max_steps - steps
        if remaining <= 0:
            break
        res = minimize(
            fun, v, jac=True, method="L-BFGS-B", callback=callback,
            options={"maxiter": remaining, "gtol": gtol, "ftol": 1e-15, "maxcor": 30, "maxls": 30},
        )
        v = res.x
        if not np.array_equal(cache["x"].ravel()[mask], v):
            fun(v)  # the last evaluation was a line-search trial: evaluate the final point
        if float(np.max(np.abs(cache["g"].ravel()[mask]))) < gtol:
            break
    x = cache["x"]
    g = cache["g"]
    gmax = float(np.max(np.abs(g.ravel()[mask])))
    return _OptResult(
        x_bohr=x, energy_Eh=cache["e"], gradient=g, dipole_ebohr=cache["d"], steps=steps,
        evaluations=xtb.evaluations - evals_start, max_gradient=gmax, converged=gmax < gtol,
    )


def _bowl_start(coords_A: np.ndarray, ca) -> np.ndarray:
    """Starting structure for the bowl optimisation: curve a (nearly) flat core into a bowl.

    Force fields often embed shallow bowls flat. A flat start is a stationary point by
    symmetry (the out-of-plane gradient vanishes), so the optimiser would stay on the
    planar saddle. When the pre-optimised depth is below :data:`START_DEPTH_A`, every
    atom is displaced along the core normal by c r^2 (r: in-plane distance from the core
    centroid), with c chosen to give a rim depth of about ``START_DEPTH_A``; a molecule
    whose minimum is planar flattens again during the GFN2-xTB optimisation.
    """
    coords = np.asarray(coords_A, dtype=float)
    if bowl_depth_A(coords, ca) >= START_DEPTH_A or not ca.rim:
        return coords
    core_idx = list(ca.core)
    centroid, normal = plane_fit(coords[core_idx])
    rel = coords - centroid
    height = rel @ normal
    r2 = np.sum(rel**2, axis=1) - height**2
    rim_r2 = float(np.mean(r2[list(ca.rim)]))
    curvature = START_DEPTH_A / rim_r2
    return coords + np.outer(curvature * r2, normal)


def _planar_start(coords_A: np.ndarray, mol_h: Chem.Mol, core: set[int]) -> np.ndarray:
    """Rotate so the core plane is z = 0, then flatten the core onto it.

    Each non-core atom is shifted along z with the core atom it hangs from (nearest by
    bonds), so substituent bond lengths stay sensible in the starting structure.
    """
    core_idx = sorted(core)
    centroid, _ = plane_fit(coords_A[core_idx])
    _, _, vt = np.linalg.svd(coords_A[core_idx] - centroid)
    if np.linalg.det(vt) < 0:
        vt[0] = -vt[0]
    local = (coords_A - centroid) @ vt.T  # columns: in-plane u, v; normal z
    dist = Chem.GetDistanceMatrix(mol_h)
    out = local.copy()
    for i in range(len(out)):
        anchor = i if i in core else min(core_idx, key=lambda c: dist[i, c])
        out[i, 2] = local[i, 2] - local[anchor, 2]
    out[core_idx, 2] = 0.0
    return out


# --------------------------------------------------------------------------- estimate


def _software() -> dict:
    return {
        "tblite": importlib.metadata.version("tblite"),
        "rdkit": rdkit_version,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
    }


def estimate_barrier(
    smiles: str,
    *,
    truncate_side_chains: bool = True,
    seed: int = DEFAULT_SEED,
    max_steps: int = DEFAULT_MAX_STEPS,
    gtol_Eh_bohr: float = DEFAULT_GTOL_EH_BOHR,
    conformers: int = DEFAULT_CONFORMERS,
    progress: ProgressFn | None = None,
    should_cancel: CancelFn | None = None,
) -> XtbEstimate:
    """Estimate the bowl-to-bowl inversion barrier of a bowl-shaped aromatic with GFN2-xTB.

    Parameters
    ----------
    smiles : str
        Structure of the molecule (one fragment).
    truncate_side_chains : bool
        Shorten substituents on the core to OMe / SMe / Me (see :func:`truncate_mol`);
        ``False`` computes the full side chains (slow for long alkoxy chains).
    seed : int
        Random seed of the RDKit ETKDGv3 embedding (the result is reproducible).
    max_steps : int
        Maximum optimiser iterations for each of the two optimisations.
    gtol_Eh_bohr : float
        Convergence threshold on the largest Cartesian gradient component, Hartree/bohr.
    conformers : int
        Number of ETKDGv3 conformers (RMSD-pruned at 0.5 A, MMFF94-optimised) whose
        GFN2-xTB single-point energies pick the starting structure.
    progress : callable(fraction, message), optional
        Called at each stage and optimiser step: embedding (0 to 0.05), bowl
        optimisation (0.05 to 0.55), planar optimisation (0.55 to 0.95), done (1.0).
    should_cancel : callable() -> bool, optional
        Polled before every GFN2-xTB evaluation; when it returns True,
        :class:`EstimateCancelled` is raised.

    Returns
    -------
    XtbEstimate
        ``barrier_kcal_mol`` (>= 0), ``bowl_depth_A`` at the bowl minimum
        (:func:`server.chem.geometry.bowl_depth_A`), dipole magnitude ``dipole_D`` and its
        component ``dipole_axial_D`` along :func:`server.chem.geometry.bowl_axis`
        (rim to hub, convex side positive), step counts, timings and the optimised
        coordinates as XYZ blocks.

    Raises
    ------
    ChemistryError
        SMILES that RDKit cannot read.
    AnalysisError
        No six-membered ring / core, several fragments, failed 3D embedding, or a
        GFN2-xTB failure (e.g. SCF not converged), with tblite's message.
    EstimateCancelled
        ``should_cancel()`` returned True.

    Notes
    -----
    Procedure: RDKit ETKDGv3 embedding of a few conformers (Wang, Witek, Landrum and
    Riniker, J. Chem. Inf. Model. 60, 2044 (2020), doi:10.1021/acs.jcim.0c00025) with
    explicit hydrogens, MMFF94 pre-optimisation (Halgren, J. Comput. Chem. 17, 490
    (1996)), the conformer lowest in a GFN2-xTB single point as start (a flat core is
    first curved into a shallow bowl, see ``_bowl_start``), then GFN2-xTB
    (Bannwarth, Ehlert and Grimme, J. Chem. Theory Comput. 15, 1652 (2019),
    doi:10.1021/acs.jctc.8b01176) through tblite's Python API, optimised with L-BFGS-B
    (Byrd, Lu, Nocedal and Zhu, SIAM J. Sci. Comput. 16, 1190 (1995)) in Cartesian
    coordinates until the largest gradient component is below ``gtol_Eh_bohr``.

    Planar transition-state model: the optimised bowl is rotated so that the
    least-squares plane of the core heavy atoms is z = 0, the core is flattened, and the
    structure is optimised with the z coordinates of all core heavy atoms fixed
    (bridging CH2/S/Se included, since they belong to the fused core). Substituent
    atoms (the O/S/C attached to the core and the methyl beyond) and all hydrogens are
    free. Reason: the inversion coordinate is the out-of-plane motion of the fused
    core; any extra constraint (for example forcing OMe methyls into the plane, which
    crowded ortho-dimethoxy groups avoid) would add strain that has nothing to do with
    inversion and raise the estimate. With the core flat the substituents settle where
    the flat core puts them (for a parent bowl every heavy atom is a core atom, so this
    is "all heavy atoms in a plane, hydrogens free").

    If the unconstrained optimisation ends with a bowl depth below 0.05 angstrom the
    molecule is planar: barrier 0, ``planar=True``, no planar optimisation. If the
    planar-core energy comes out at or below the bowl energy plus 1e-5 Eh (noise), the
    surface is so flat that the unconstrained optimisation stopped short of a planar
    minimum (seen for the Se-bridged bowl): ``planar=True``, barrier 0, depth and
    dipole of the planar structure, flag ``flat_minimum``. The barrier is never negative.

    Energy conversion: 1 Eh = E_h N_A / 4184 J kcal^-1 = 627.5095 kcal/mol; dipole
    1 e bohr = e a0 c / 1e-21 D = 2.541746 D (CODATA values through scipy.constants).
    No thermal or zero-point correction: this is an electronic-energy barrier, to be
    compared with a dynamic-NMR free energy of activation only roughly.

    References
    ----------
    Science 301, 1878 (2003), doi:10.1126/science.1088290 (synthesis and dynamic-NMR barrier of the CH2-bridged parent)
    (bowl synthesis, depth and NMR inversion barrier of the CH2-bridged C21 bowl).
    Amaya, Sakane, Muneishi and Hirao, Chem. Commun. 765 (2008), doi:10.1039/b712839h
    (bowl inversion barriers of the CH2-bridged C21 bowl and derivatives).
    """
    t0 = time.perf_counter()

    def report(frac: float, msg: str) -> None:
        if progress is not None:
            progress(float(frac), msg)

    def check_cancel() -> None:
        if should_cancel is not None and should_cancel():
            raise EstimateCancelled("estimate cancelled on request")

    if conformers < 1:
        raise AnalysisError("conformers must be at least 1", field="conformers")
    if max_steps < 1:
        raise AnalysisError("max_steps must be at least 1", field="max_steps")
    mol = _parse(smiles)
    _core_set(mol)  # raises for structures without a bowl core
    removed = 0
    if truncate_side_chains:
        mol, removed = truncate_mol(mol)
        if removed:
            model = "side chains truncated to methyl (OMe/SMe/Me); planar-core constrained TS model"
        else:
            model = "full structure (no side chains longer than methyl); planar-core constrained TS model"
    else:
        model = "full side chains; planar-core constrained TS model"
    smiles_used = Chem.MolToSmiles(mol)
    # Work on the molecule as read back from smiles_used, so that the atom order of the
    # XYZ blocks is the order of smiles_used (heavy atoms), then the added hydrogens.
    mol = Chem.MolFromSmiles(smiles_used)
    ca = core_atoms(mol)
    core = set(ca.core)

    report(0.0, "embedding 3D structure (RDKit ETKDGv3, MMFF94)")
    check_cancel()
    mol_h = Chem.AddHs(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = int(seed)
    params.pruneRmsThresh = 0.5  # rigid parents give one conformer
    flags: list[Flag] = []
    with quiet_rdkit():  # UFF typer warnings for Se etc. are not the user's business
        conf_ids = list(AllChem.EmbedMultipleConfs(mol_h, numConfs=int(conformers), params=params))
        if not conf_ids:
            params.useRandomCoords = True
            conf_ids = list(AllChem.EmbedMultipleConfs(mol_h, numConfs=int(conformers), params=params))
        if not conf_ids:
            raise AnalysisError("RDKit could not build a 3D structure for this molecule", field="smiles")
        if AllChem.MMFFHasAllMoleculeParams(mol_h):
            AllChem.MMFFOptimizeMoleculeConfs(mol_h, numThreads=1, maxIters=2000)
        else:
            AllChem.UFFOptimizeMoleculeConfs(mol_h, numThreads=1, maxIters=2000)
            flags.append(Flag("uff_preoptimisation",
                              "MMFF94 has no parameters for this molecule; UFF was used to pre-optimise."))
    numbers = np.array([a.GetAtomicNum() for a in mol_h.GetAtoms()], dtype=int)
    starts_bohr = [_bowl_start(mol_h.GetConformer(cid).GetPositions(), ca) / BOHR_A for cid in conf_ids]
    charge = Chem.GetFormalCharge(mol_h)
    uhf = sum(a.GetNumRadicalElectrons() for a in mol_h.GetAtoms())
    xtb = _Gfn2(numbers, starts_bohr[0], charge, uhf, should_cancel)
    # Side-chain conformers (OMe orientations) change the energy by ~1-2 kcal/mol:
    # start from the force-field conformer that GFN2-xTB puts lowest.
    if len(starts_bohr) > 1:
        screen_E = []
        for k, x in enumerate(starts_bohr):
            xtb.result = None  # fresh SCF guess for an unrelated geometry
            screen_E.append(xtb(x)[0])
            report(0.01 + 0.04 * (k + 1) / len(starts_bohr), f"screened conformer {k + 1} of {len(starts_bohr)}")
        x0_bohr = starts_bohr[int(np.argmin(screen_E))]
        xtb.result = None
    else:
        x0_bohr = starts_bohr[0]
    screening_evaluations = xtb.evaluations if len(starts_bohr) > 1 else 0
    report(0.05, "GFN2-xTB optimisation of the bowl minimum")

    free_all = np.ones((len(numbers), 3), dtype=bool)
    bowl = _optimise(xtb, x0_bohr, free_all, gtol=gtol_Eh_bohr, max_steps=max_steps,
                     progress=progress, span=(0.05, 0.55), label="bowl optimisation")
    bowl_A = bowl.x_bohr * BOHR_A
    depth_A = bowl_depth_A(bowl_A[: mol.GetNumAtoms()], ca)
    axis = bowl_axis(bowl_A[: mol.GetNumAtoms()], ca)
    dipole_vec_D = bowl.dipole_ebohr * EBOHR_DEBYE
    dipole_D = float(np.linalg.norm(dipole_vec_D))
    dipole_axial_D = float(np.dot(dipole_vec_D, axis))
    if not bowl.converged:
        flags.append(Flag("bowl_not_converged",
                          f"Bowl optimisation stopped after {bowl.steps} steps with max gradient "
                          f"{bowl.max_gradient:.1e} Eh/bohr (threshold {gtol_Eh_bohr:.1e})."))
    xyz_bowl = _xyz_block(numbers, bowl_A, f"GFN2-xTB bowl minimum E={bowl.energy_Eh:.10f} Eh {smiles_used}")

    planar = depth_A < PLANAR_DEPTH_A
    planar_opt: _OptResult | None = None
    xyz_planar = None
    if planar:
        barrier_kcal = 0.0
        report(0.95, f"bowl depth {depth_A:.3f} A: the minimum is planar, barrier 0")
    else:
        report(0.55, "GFN2-xTB optimisation of the planar-core structure")
        start_A = _planar_start(bowl_A, mol_h, core)
        free = np.ones((len(numbers), 3), dtype=bool)
        free[sorted(core), 2] = False  # core heavy atoms held at z = 0
        planar_opt = _optimise(xtb, start_A / BOHR_A, free, gtol=gtol_Eh_bohr, max_steps=max_steps,
                               progress=progress, span=(0.55, 0.95), label="planar optimisation")
        if not planar_opt.converged:
            flags.append(Flag("planar_not_converged",
                              f"Planar-core optimisation stopped after {planar_opt.steps} steps with max "
                              f"gradient {planar_opt.max_gradient:.1e} Eh/bohr (threshold {gtol_Eh_bohr:.1e})."))
        delta_Eh = planar_opt.energy_Eh - bowl.energy_Eh
        xyz_planar = _xyz_block(numbers, planar_opt.x_bohr * BOHR_A,
                                f"GFN2-xTB planar-core structure E={planar_opt.energy_Eh:.10f} Eh {smiles_used}")
        if delta_Eh <= ENERGY_NOISE_EH:
            # The flat structure is as low as the bowl (within noise) or lower: the
            # unconstrained optimisation stopped on a very flat surface short of the
            # planar minimum. The planar structure is the minimum found.
            flags.append(Flag("flat_minimum",
                              f"The unconstrained optimisation stopped at depth {depth_A:.2f} A, "
                              f"{delta_Eh * HARTREE_KCAL_MOL:+.3f} kcal/mol from the planar-core structure: "
                              "the surface is flat and the minimum is taken as planar."))
            planar = True
            barrier_kcal = 0.0
            flat_A = planar_opt.x_bohr * BOHR_A
            depth_A = bowl_depth_A(flat_A[: mol.GetNumAtoms()], ca)
            dipole_vec_D = planar_opt.dipole_ebohr * EBOHR_DEBYE
            dipole_D = float(np.linalg.norm(dipole_vec_D))
            dipole_axial_D = float(np.dot(dipole_vec_D, bowl_axis(flat_A[: mol.GetNumAtoms()], ca)))
        else:
            barrier_kcal = delta_Eh * HARTREE_KCAL_MOL

    converged = bowl.converged and (planar_opt is None or planar_opt.converged)
    result = XtbEstimate(
        barrier_kcal_mol=float(barrier_kcal),
        bowl_depth_A=float(depth_A),
        dipole_D=dipole_D,
        dipole_axial_D=dipole_axial_D,
        planar=bool(planar),
        model=model,
        converged=bool(converged),
        steps_bowl=bowl.steps,
        steps_planar=planar_opt.steps if planar_opt else 0,
        gradient_evaluations_bowl=bowl.evaluations,
        gradient_evaluations_planar=planar_opt.evaluations if planar_opt else 0,
        conformers_screened=len(starts_bohr),
        screening_evaluations=screening_evaluations,
        max_gradient_bowl_Eh_bohr=bowl.max_gradient,
        max_gradient_planar_Eh_bohr=planar_opt.max_gradient if planar_opt else None,
        gtol_Eh_bohr=float(gtol_Eh_bohr),
        energy_bowl_Eh=bowl.energy_Eh,
        energy_planar_Eh=planar_opt.energy_Eh if planar_opt else None,
        wall_time_s=time.perf_counter() - t0,
        software=_software(),
        smiles_used=smiles_used,
        atoms=int(len(numbers)),
        flags=tuple(flags),
        xyz_bowl=xyz_bowl,
        xyz_planar=xyz_planar,
    )
    report(1.0, f"done: barrier {barrier_kcal:.2f} kcal/mol")
    return result
