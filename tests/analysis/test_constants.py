"""The constants module against the published CODATA 2018 values.

Exact values (SI redefinition of 2019): k_B, h, N_A, c (CODATA 2018, Rev. Mod. Phys. 93, 025010
(2021)); epsilon_0 is measured, 8.8541878128(13)e-12 F/m in the same adjustment. The thermochemical
calorie is 4.184 J by definition (NIST SP 811 (2008), B.8).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from server.analysis import constants as k

ROOT = Path(__file__).resolve().parents[2]


def test_codata_2018_exact_values():
    assert k.KB_J_K == 1.380649e-23  # CODATA 2018, exact
    assert k.H_J_S == 6.62607015e-34  # CODATA 2018, exact
    assert k.NA_PER_MOL == 6.02214076e23  # CODATA 2018, exact
    assert k.C_M_S == 299792458.0  # exact since 1983
    assert k.R_J_MOLK == pytest.approx(6.02214076e23 * 1.380649e-23, rel=1e-15)
    assert k.R_J_MOLK == pytest.approx(8.314462618, rel=1e-10)  # CODATA 2018 R, 8.314 462 618... J/(mol K)
    assert k.EPS0_F_M == pytest.approx(8.8541878128e-12, rel=1e-12)  # CODATA 2018
    assert k.CAL_J == 4.184  # thermochemical calorie, NIST SP 811
    # 1 D = 3.335 64e-30 C m (IUPAC Green Book, 3rd ed., 2007, p. 26; to the digits given there).
    assert k.DEBYE_C_M == pytest.approx(3.33564e-30, rel=1e-6)


def test_no_other_module_declares_these_constants():
    # Any literal of a constant above, assigned at module level outside constants.py, is a second home.
    literals = {1.380649e-23, 6.62607015e-34, 6.02214076e23, 8.8541878128e-12, 4.184, 8.314462618}
    offenders = []
    for folder in ("server", "seed_demo", "bench"):
        for path in (ROOT / folder).rglob("*.py"):
            if path.name == "constants.py":
                continue
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.Constant) and isinstance(node.value, float) and node.value in literals:
                    offenders.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    assert offenders == []
