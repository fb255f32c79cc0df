"""Tests of the GFN2-xTB bowl-inversion estimate (server/analysis/xtb.py).

Reference values and where they come from:

* 1 Hartree = 627.5095 kcal/mol and 1 e*bohr = 2.541746 D: CODATA-derived values
  quoted in quantum-chemistry program manuals (memory), checked to the digits given.
* CH2-bridged C21 bowl (C21H12): bowl-inversion barrier about 20 kcal/mol from dynamic
  NMR of the deuterated parent (Science 301, 1878 (2003);
  memory, "18-20 kcal/mol"); X-ray bowl depth about 1.11 A (same paper; memory).
* S-bridged bowl (C18H6S3): computed inversion barrier about 2 kcal/mol (memory);
  Se-bridged bowl (C18H6Se3): computed planar, barrier about 0 (memory).
* Triphenylene is planar (textbook fact).

The ranges are generous on purpose: GFN2-xTB is a semi-empirical method and the
planar-core model is an approximate transition state. What GFN2-xTB (tblite 0.8.0,
gtol 4.5e-4 Eh/bohr, seed 0xB0E1) gave when these tests were written (regression
snapshot, not a reference): CH2 bowl 23.2 kcal/mol, depth 1.18 A; S bowl 3.68 kcal/mol,
depth 0.75 A; Se bowl 0 (flat surface, flag flat_minimum); methyl-truncated hexa-OMe
CH2 bowl 19.8-21.2 kcal/mol depending on the OMe conformer (seeds), depth 1.14-1.17 A,
about 15 s on one core.

Run the slow tests one at a time with OMP_NUM_THREADS=1 on shared machines.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem.rdMolDescriptors import CalcMolFormula

from server.analysis import xtb
from server.analysis.xtb import EstimateCancelled, estimate_barrier, truncate_mol, truncated_smiles
from server.chem.geometry import core_atoms, plane_fit
from server.errors import AnalysisError, ChemistryError, InputError

# Parents, written by hand: central benzene hub, three outer rings, three bridges in the bays.
CH2_BOWL = "C1c2ccc3Cc4ccc5Cc6ccc1c7c2c3c4c5c67"
S_BOWL = "S1c2ccc3Sc4ccc5Sc6ccc1c7c2c3c4c5c67"
SE_BOWL = "[Se]1c2ccc3[Se]c4ccc5[Se]c6ccc1c7c2c3c4c5c67"
TRIPHENYLENE = "c1ccc2c(c1)c1ccccc1c1ccccc21"
# Same CH2-bridged core with the six rim positions as placeholders.
CH2_BOWL_RIM = "C1c2c({R})c({R})c3Cc4c({R})c({R})c5Cc6c({R})c({R})c1c7c2c3c4c5c67"

CONTRACT_KEYS = {
    "barrier_kcal_mol", "bowl_depth_A", "dipole_D", "dipole_axial_D", "planar", "model", "method",
    "converged", "steps_bowl", "steps_planar", "wall_time_s", "software", "smiles_used", "atoms",
}


def _canon(smiles: str) -> str:
    return Chem.MolToSmiles(Chem.MolFromSmiles(smiles))


def _xyz_coords(block: str) -> tuple[list[str], np.ndarray]:
    lines = block.strip().splitlines()
    n = int(lines[0])
    rows = [line.split() for line in lines[2 : 2 + n]]
    return [r[0] for r in rows], np.array([[float(v) for v in r[1:4]] for r in rows])


# --------------------------------------------------------------------------- fast tests


def test_unit_conversions_match_codata_values():
    # 627.5095 kcal/mol per Hartree and 2.541746 D per e*bohr (CODATA-based; memory).
    assert xtb.HARTREE_KCAL_MOL == pytest.approx(627.5095, abs=1e-4)
    assert xtb.EBOHR_DEBYE == pytest.approx(2.541746, abs=2e-6)
    assert xtb.BOHR_A == pytest.approx(0.529177, abs=1e-6)


@pytest.mark.parametrize(
    ("smiles", "formula"),
    [(CH2_BOWL, "C21H12"), (S_BOWL, "C18H6S3"), (SE_BOWL, "C18H6Se3")],
)
def test_parent_smiles_have_the_right_formula(smiles, formula):
    # Formulas of the three parents (hand count: 6 hub + 3x4 ring C + 3 bridges).
    mol = Chem.MolFromSmiles(smiles)
    assert CalcMolFormula(mol) == formula
    assert mol.GetRingInfo().NumRings() == 7
    assert len(core_atoms(mol).core) == 21


def test_hexa_dodecyloxy_truncates_to_hexa_methoxy():
    c12 = "O" + "C" * 12
    got = truncated_smiles(CH2_BOWL_RIM.format(R=c12))
    assert got == _canon(CH2_BOWL_RIM.format(R="OC"))
    # Hand count: C21H6 core + 6 OCH3.
    assert CalcMolFormula(Chem.MolFromSmiles(got)) == "C27H24O6"


def test_alkylthio_and_alkyl_and_branched_chains_truncate():
    assert truncated_smiles(CH2_BOWL_RIM.format(R="SCCCCCCCC")) == _canon(CH2_BOWL_RIM.format(R="SC"))
    assert truncated_smiles(CH2_BOWL_RIM.format(R="CCCCCC")) == _canon(CH2_BOWL_RIM.format(R="C"))
    # 2-ethylhexyloxy (branched) keeps O and its first carbon only.
    assert truncated_smiles(CH2_BOWL_RIM.format(R="OCC(CC)CCCC")) == _canon(CH2_BOWL_RIM.format(R="OC"))
    # A phenoxy group loses its ring: O-CH3 (the kept carbon is no longer aromatic).
    assert truncated_smiles(CH2_BOWL_RIM.format(R="Oc9ccccc9")) == _canon(CH2_BOWL_RIM.format(R="OC"))


def test_parents_and_methoxy_are_left_alone():
    for smiles in (CH2_BOWL, S_BOWL, CH2_BOWL_RIM.format(R="OC"), CH2_BOWL_RIM.format(R="F")):
        mol, removed = truncate_mol(Chem.MolFromSmiles(smiles))
        assert removed == 0
        assert Chem.MolToSmiles(mol) == _canon(smiles)


@pytest.mark.parametrize("smiles", ["CCCCCC", "C1CCCC1", "CCO"])
def test_no_six_membered_ring_is_an_analysis_error(smiles):
    with pytest.raises(AnalysisError, match="six-membered ring"):
        estimate_barrier(smiles)


def test_bad_input_errors():
    with pytest.raises(ChemistryError):
        estimate_barrier("C1c2ccc(")
    with pytest.raises(AnalysisError, match="fragments"):
        estimate_barrier(TRIPHENYLENE + ".Cl")


def test_scf_failure_becomes_an_analysis_error(monkeypatch):
    # tblite raises TBLiteRuntimeError when the SCF does not converge; the estimate must
    # turn it into an AnalysisError carrying tblite's message, not crash.
    from tblite.exceptions import TBLiteRuntimeError
    from tblite.interface import Calculator

    def failing_singlepoint(self, res=None, copy=False):
        raise TBLiteRuntimeError("SCF not converged in 250 cycles")

    monkeypatch.setattr(Calculator, "singlepoint", failing_singlepoint)
    with pytest.raises(AnalysisError, match="SCF not converged in 250 cycles"):
        estimate_barrier(TRIPHENYLENE)


def test_cancelled_is_not_an_input_error():
    assert not issubclass(EstimateCancelled, InputError)


def test_cancel_before_start_raises():
    with pytest.raises(EstimateCancelled):
        estimate_barrier(CH2_BOWL, should_cancel=lambda: True)


def test_cancel_during_optimisation_raises_and_stops():
    calls = {"n": 0}

    def cancel_on_fifth():
        calls["n"] += 1
        return calls["n"] >= 5

    with pytest.raises(EstimateCancelled):
        estimate_barrier(CH2_BOWL, should_cancel=cancel_on_fifth)
    assert calls["n"] == 5  # polled before each evaluation, stopped at once


def test_planar_molecule_gives_zero_barrier_and_progress_ends_at_one():
    # Triphenylene is planar: the estimate must find depth ~0 and barrier exactly 0.
    seen: list[tuple[float, str]] = []
    result = estimate_barrier(TRIPHENYLENE, progress=lambda f, m: seen.append((f, m)))
    assert result.planar is True
    assert result.barrier_kcal_mol == 0.0
    assert result.bowl_depth_A < 0.05
    assert result.dipole_D < 0.05  # D3h-symmetric: no dipole
    assert result.steps_planar == 0
    fractions = [f for f, _ in seen]
    assert fractions[0] == 0.0 and fractions[-1] == 1.0
    assert all(b >= a for a, b in zip(fractions, fractions[1:]))
    assert len(fractions) >= 4
    data = result.to_dict()
    assert CONTRACT_KEYS <= set(data)
    assert data["method"] == "gfn2-xtb"
    assert "xyz_bowl" not in data
    json.dumps(data)  # JSON-ready
    assert set(data["software"]) >= {"tblite", "rdkit", "numpy"}
    symbols, coords = _xyz_coords(result.xyz_bowl)
    assert len(symbols) == data["atoms"] == 30 and symbols.count("C") == 18


# --------------------------------------------------------------------------- slow tests


@pytest.fixture(scope="module")
def parents():
    out = {}
    progress = []
    out["CH2"] = estimate_barrier(CH2_BOWL, progress=lambda f, m: progress.append(f))
    out["S"] = estimate_barrier(S_BOWL)
    out["Se"] = estimate_barrier(SE_BOWL)
    out["progress"] = progress
    return out


@pytest.mark.slow
def test_ch2_bowl_barrier_and_depth(parents):
    r = parents["CH2"]
    # Dynamic NMR ~20 kcal/mol (Science 301, 1878 (2003); memory); GFN2-xTB gave 23.2.
    assert 12.0 < r.barrier_kcal_mol < 28.0
    # X-ray depth ~1.11 A (memory); GFN2-xTB gave 1.18.
    assert 0.8 < r.bowl_depth_A < 1.4
    assert r.planar is False and r.converged is True
    assert r.steps_bowl > 0 and r.steps_planar > 0
    # C3v bowl: the dipole lies along the bowl axis.
    assert abs(r.dipole_axial_D) == pytest.approx(r.dipole_D, rel=1e-3)
    fractions = parents["progress"]
    assert fractions[-1] == 1.0 and all(b >= a for a, b in zip(fractions, fractions[1:]))
    assert any(0.55 < f < 0.95 for f in fractions)  # the planar stage reported progress


@pytest.mark.slow
def test_s_and_se_bowls_are_shallower_and_ordered(parents):
    ch2, s, se = parents["CH2"], parents["S"], parents["Se"]
    # S-bridged ~2 kcal/mol (computations; memory); GFN2-xTB gave 3.7.
    assert 0.0 < s.barrier_kcal_mol < 8.0
    # Se-bridged planar (computations; memory); GFN2-xTB gave 0 with a flat surface.
    assert se.barrier_kcal_mol < 2.0
    assert se.bowl_depth_A < 0.3
    assert ch2.barrier_kcal_mol > s.barrier_kcal_mol > se.barrier_kcal_mol
    assert ch2.bowl_depth_A > s.bowl_depth_A > se.bowl_depth_A
    for r in (ch2, s, se):
        assert r.barrier_kcal_mol >= 0.0


@pytest.mark.slow
def test_reported_structures_reproduce_the_barrier(parents):
    # Independent check: fresh tblite single points on the two XYZ blocks give the
    # reported energy difference, and the planar structure really has a flat core.
    from tblite.interface import Calculator

    r = parents["CH2"]
    energies = []
    for block in (r.xyz_bowl, r.xyz_planar):
        symbols, coords_A = _xyz_coords(block)
        numbers = np.array([Chem.GetPeriodicTable().GetAtomicNumber(s) for s in symbols])
        calc = Calculator("GFN2-xTB", numbers, coords_A / 0.529177210544)  # CODATA 2022 bohr
        calc.set("verbosity", 0)
        energies.append(calc.singlepoint().get("energy"))
    assert (energies[1] - energies[0]) * 627.5095 == pytest.approx(r.barrier_kcal_mol, abs=0.01)
    _, planar_A = _xyz_coords(r.xyz_planar)
    core = list(core_atoms(Chem.MolFromSmiles(r.smiles_used)).core)
    centroid, normal = plane_fit(planar_A[core])
    assert np.max(np.abs((planar_A[core] - centroid) @ normal)) < 1e-6


@pytest.mark.slow
def test_methyl_truncated_hexa_alkoxy_bowl():
    # Its speed (about 15 s on one core) is measured by bench/bench_estimate.py, not asserted here.
    r = estimate_barrier(CH2_BOWL_RIM.format(R="OCCCCCCCCCCCC"))
    assert "truncated" in r.model
    assert r.smiles_used == _canon(CH2_BOWL_RIM.format(R="OC"))
    assert r.atoms == 57
    # Same core as the parent: barrier of the same size (GFN2-xTB gave 19.8-21.2).
    assert 12.0 < r.barrier_kcal_mol < 28.0
    assert 0.8 < r.bowl_depth_A < 1.4
    assert r.converged
