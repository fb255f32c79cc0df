"""Polar / centrosymmetric / Sohncke classification over all 230 space-group types.

Reference: International Tables for Crystallography, Vol. A (2016): 68 polar, 92
centrosymmetric and 65 Sohncke space-group types; the polar numbers below are the ones listed
in ITA Vol. A (copied into docs/methods.md, Crystal structures). Polarity is checked twice: by the point-group list
used in the code, and here independently by symmetry (a direction left invariant by every
rotation part exists).
"""

from __future__ import annotations

import gemmi
import numpy as np
import pytest

from server.analysis.crystal import classify_space_group

# ITA Vol. A (2016), section 3.2 (listed in docs/methods.md): polar space-group numbers.
POLAR_NUMBERS = (
    [1]
    + list(range(3, 10))
    + list(range(25, 47))
    + list(range(75, 81))
    + list(range(99, 111))
    + list(range(143, 147))
    + list(range(156, 162))
    + list(range(168, 174))
    + list(range(183, 187))
)

ALL = [gemmi.find_spacegroup_by_number(n) for n in range(1, 231)]


def invariant_dimension(sg: gemmi.SpaceGroup) -> int:
    """Dimension of the subspace fixed by all rotation parts: null space of the stacked (R - I)."""
    stacked = np.vstack([np.array(op.rot, dtype=float) / op.DEN - np.eye(3) for op in sg.operations()])
    s = np.linalg.svd(stacked, compute_uv=False)
    return int(np.sum(s < 1e-9))


def test_reference_counts():
    classes = [classify_space_group(sg) for sg in ALL]
    # ITA Vol. A: 68 polar, 92 centrosymmetric, 65 Sohncke types
    assert sum(c.polar for c in classes) == 68
    assert sum(c.centrosymmetric for c in classes) == 92
    assert sum(c.chiral for c in classes) == 65


def test_polar_numbers_match_published_list():
    assert len(POLAR_NUMBERS) == 68
    found = [sg.number for sg in ALL if classify_space_group(sg).polar]
    assert found == POLAR_NUMBERS


@pytest.mark.parametrize("sg", ALL, ids=lambda sg: f"{sg.number}")
def test_polar_iff_invariant_direction(sg):
    # symmetry argument: polar <=> some vector is left unchanged by every rotation part
    assert classify_space_group(sg).polar == (invariant_dimension(sg) >= 1)


@pytest.mark.parametrize("sg", ALL, ids=lambda sg: f"{sg.number}")
def test_centrosymmetric_and_sohncke_agree_with_operations(sg):
    cls = classify_space_group(sg)
    rots = [np.array(op.rot) / op.DEN for op in sg.operations()]
    has_inversion = any(np.allclose(r, -np.eye(3)) for r in rots)
    assert cls.centrosymmetric == has_inversion
    # gemmi's own flags are an independent implementation
    assert cls.centrosymmetric == sg.is_centrosymmetric()
    assert cls.chiral == sg.is_sohncke()
    # a polar group can never be centrosymmetric (inversion reverses every direction)
    assert not (cls.polar and cls.centrosymmetric)


def test_classification_does_not_depend_on_setting():
    # every tabulated setting (gemmi's ITB table: 530 entries) gives the class of its type
    reference = {sg.number: classify_space_group(sg) for sg in ALL}
    n = 0
    for sg in gemmi.spacegroup_table_itb():
        c = classify_space_group(sg)
        r = reference[sg.number]
        assert (c.polar, c.centrosymmetric, c.chiral) == (r.polar, r.centrosymmetric, r.chiral), sg.xhm()
        n += 1
    assert n > 230


@pytest.mark.parametrize(
    "number, polar, centro, chiral",
    [
        (4, True, False, True),  # P2_1
        (14, False, True, False),  # P2_1/c
        (33, True, False, False),  # Pna2_1
        (161, True, False, False),  # R3c
        (2, False, True, False),  # P-1
        (19, False, False, True),  # P2_12_12_1: chiral, not polar
        (122, False, False, False),  # I-42d: neither polar nor centrosymmetric
        (43, True, False, False),  # Fdd2
        (160, True, False, False),  # R3m
        (186, True, False, False),  # P6_3mc
        (9, True, False, False),  # Cc
    ],
)
def test_spot_checks(number, polar, centro, chiral):
    # spot checks from ITA Vol. A (docs/methods.md, Crystal structures)
    c = classify_space_group(gemmi.find_spacegroup_by_number(number))
    assert (c.polar, c.centrosymmetric, c.chiral) == (polar, centro, chiral)


def test_point_group_names():
    # ITA point groups of a few types (memory, standard textbook values)
    pg = {n: classify_space_group(gemmi.find_spacegroup_by_number(n)).point_group for n in (1, 2, 14, 33, 122, 161)}
    assert pg == {1: "1", 2: "-1", 14: "2/m", 33: "mm2", 122: "-42m", 161: "3m"}
