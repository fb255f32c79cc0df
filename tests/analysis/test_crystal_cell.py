"""Impossible cells are refused with the CIF field named (issue 12, item 19)."""

from __future__ import annotations

import pytest

from server.analysis.crystal import analyse_cif, check_atom_volume, check_cell
from server.errors import AnalysisError

from .test_crystal import cif

GOOD = {"_cell_length_a": 7.2, "_cell_length_b": 9.4, "_cell_length_c": 8.1,
        "_cell_angle_alpha": 90.0, "_cell_angle_beta": 104.0, "_cell_angle_gamma": 90.0}


@pytest.mark.parametrize("old,new,field", [
    ("_cell_length_a 7.2000(3)", "_cell_length_a 1e30", "_cell_length_a"),
    ("_cell_length_b 9.4000(4)", "_cell_length_b 0", "_cell_length_b"),
    ("_cell_length_c 8.1000(3)", "_cell_length_c -8.1", "_cell_length_c"),
    ("_cell_angle_beta 104.000(2)", "_cell_angle_beta 180", "_cell_angle_beta"),
    ("_cell_angle_alpha 90", "_cell_angle_alpha -5", "_cell_angle_alpha"),
])
def test_impossible_edges_and_angles_name_their_field(old, new, field):
    with pytest.raises(AnalysisError) as err:
        analyse_cif(cif(replace={old: new}), formula="C6H6")
    assert err.value.field == field


def test_angles_that_enclose_no_volume():
    # alpha = beta = gamma = 120 deg: 1 - 3 (1/4) + 2 (-1/8) = 0 (by hand): the three axes are coplanar.
    with pytest.raises(AnalysisError) as err:
        check_cell({**GOOD, "_cell_angle_alpha": 120.0, "_cell_angle_beta": 120.0, "_cell_angle_gamma": 120.0})
    assert "no volume" in str(err.value)
    # 30, 30, 90 deg: 1 - 3/4 - 3/4 - 0 + 0 < 0 (by hand): no real cell either.
    with pytest.raises(AnalysisError):
        check_cell({**GOOD, "_cell_angle_alpha": 30.0, "_cell_angle_beta": 30.0, "_cell_angle_gamma": 90.0})


def test_ordinary_cells_pass():
    check_cell(GOOD)
    check_cell({**GOOD, "_cell_angle_beta": 90.0, "_cell_angle_gamma": 120.0})  # hexagonal: factor 3/4
    check_cell({**GOOD, "_cell_angle_alpha": 60.0, "_cell_angle_beta": 60.0, "_cell_angle_gamma": 60.0})  # 1/2


@pytest.mark.parametrize("scale", ["10", "0.1"])
def test_absurd_volume_per_non_hydrogen_atom(scale):
    # The hand CIF has 531.9 A^3 for 24 C (22 A^3 each, near the 18 A^3 rule of thumb). Scaling all
    # edges by 10 gives ~22 000 A^3 per atom; by 0.1, ~0.02 A^3: neither is a crystal of molecules.
    f = float(scale)
    text = cif(replace={"_cell_length_a 7.2000(3)": f"_cell_length_a {7.2 * f:g}",
                        "_cell_length_b 9.4000(4)": f"_cell_length_b {9.4 * f:g}",
                        "_cell_length_c 8.1000(3)": f"_cell_length_c {8.1 * f:g}"})
    with pytest.raises(AnalysisError) as err:
        analyse_cif(text, formula="C6H6")
    assert err.value.field == "_cell_volume"


def test_volume_per_atom_bounds():
    check_atom_volume(531.9, 24)
    with pytest.raises(AnalysisError):
        check_atom_volume(531.9, 200)  # 2.7 A^3 per atom
