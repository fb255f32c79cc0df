"""Physical constants and unit factors, taken once from :mod:`scipy.constants`.

SciPy's values are CODATA 2018 (E. Tiesinga et al., "CODATA recommended values of the fundamental
physical constants: 2018", Rev. Mod. Phys. 93, 025010 (2021), DOI 10.1103/RevModPhys.93.025010). Since
the SI redefinition of 2019, k_B, h, N_A, e and c are exact; epsilon_0 is measured. The thermochemical
calorie is 4.184 J exactly (NIST Special Publication 811 (2008), appendix B.8). Every module that needs
one of these imports it from here; ``tests/analysis/test_constants.py`` checks them against the
published values.
"""

from __future__ import annotations

import scipy.constants as sc

#: Boltzmann constant, J/K.
KB_J_K: float = sc.k
#: Planck constant, J s.
H_J_S: float = sc.h
#: Avogadro constant, 1/mol.
NA_PER_MOL: float = sc.N_A
#: Molar gas constant R = N_A k_B, J/(mol K).
R_J_MOLK: float = sc.N_A * sc.k
#: Vacuum electric permittivity, F/m.
EPS0_F_M: float = sc.epsilon_0
#: Thermochemical calorie, J.
CAL_J: float = sc.calorie
#: Speed of light in vacuum, m/s.
C_M_S: float = sc.c
#: One debye in C m: 1 D = 1e-21 C m^2 s^-1 / c (10^-18 statC cm).
DEBYE_C_M: float = 1e-21 / sc.c
