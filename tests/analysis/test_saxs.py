"""Columnar-lattice indexing against analytic spacings, on noisy generated curves."""

from __future__ import annotations

import math

import numpy as np
import pytest

from server.analysis import saxs
from server.errors import AnalysisError
from server.synth.saxs import mesophase_curve


def _frame(df):
    return df.rename(columns={"q (1/nm)": "q_per_nm", "I ()": "intensity", "2theta (deg)": "two_theta_deg"})


def test_hexagonal_ratios_by_hand():
    # hexagonal columnar: d10 : d11 : d20 : d21 = 1 : 1/sqrt3 : 1/2 : 1/sqrt7 (docs/methods.md, columnar phases)
    ix = saxs.index_lattice("hexagonal", [2.7713, 2.7713 / math.sqrt(3), 2.7713 / 2, 2.7713 / math.sqrt(7)])
    assert [f"{h}{k}" for h, k in ix.hk] == ["10", "11", "20", "21"]
    assert saxs.lattice_parameters(ix)["a_nm"] == pytest.approx(2 * 2.7713 / math.sqrt(3), rel=1e-6)  # a = 2 d10/sqrt3


@pytest.mark.parametrize("seed", [1, 2])
def test_hexagonal_columnar_mesophase(seed):
    r = saxs.analyse_saxs(_frame(mesophase_curve("hexagonal", 3.2, rng=np.random.default_rng(seed))), temperature_K=350)
    assert r.lattice == "hexagonal" and r.verdict == "hexagonal columnar"
    assert r.a_nm == pytest.approx(3.2, rel=0.005)
    assert [p["hk"] for p in r.indexed_peaks] == ["10", "11", "20", "21"]
    assert all(abs(p["residual_pct"]) < 1.2 for p in r.indexed_peaks)
    assert r.stacking_A == pytest.approx(3.5, abs=0.03) and r.chain_halo_A == pytest.approx(4.5, abs=0.1)
    assert r.column_area_nm2 == pytest.approx(math.sqrt(3) / 2 * 3.2**2, rel=0.01)  # hexagonal cell area


def test_centred_rectangular_lattice():
    # c2mm, a = 4.0 nm, b = 2.6 nm: d11 = 1/sqrt(1/16 + 1/6.76) = 2.180 nm, d20 = 2.000, d02 = 1.300 (by hand)
    r = saxs.analyse_saxs(_frame(mesophase_curve("rectangular", 4.0, b_nm=2.6, rng=np.random.default_rng(4))))
    assert r.lattice == "rectangular"
    assert (r.a_nm, r.b_nm) == (pytest.approx(4.0, rel=0.005), pytest.approx(2.6, rel=0.005))
    d = {p["hk"]: p["d_nm"] for p in r.indexed_peaks}
    assert d["11"] == pytest.approx(2.180, rel=0.01) and d["20"] == pytest.approx(2.0, rel=0.01)


def test_oblique_lattice_in_its_reduced_basis():
    r = saxs.analyse_saxs(_frame(mesophase_curve("oblique", 3.4, b_nm=2.5, gamma_deg=105, n_reflections=5,
                                                 rng=np.random.default_rng(5))))
    assert r.lattice == "oblique"
    assert sorted([r.a_nm, r.b_nm]) == [pytest.approx(2.5, rel=0.01), pytest.approx(3.4, rel=0.01)]
    assert r.gamma_deg == pytest.approx(105, abs=1.0)


def test_lamellar_and_two_theta_input():
    curve = mesophase_curve("lamellar", 3.0, rng=np.random.default_rng(6), n_reflections=3)
    q = curve["q (1/nm)"].to_numpy()
    wl_A = 1.540593
    curve["2theta (deg)"] = np.degrees(2 * np.arcsin(q * wl_A / 10 / (4 * math.pi)))  # q = 4 pi sin(theta)/lambda
    r = saxs.analyse_saxs(_frame(curve.drop(columns=["q (1/nm)"])), wavelength_A=wl_A)
    assert r.lattice == "lamellar" and r.a_nm == pytest.approx(3.0, rel=0.005)
    with pytest.raises(AnalysisError) as e:
        saxs.analyse_saxs(_frame(curve.drop(columns=["q (1/nm)"])))
    assert e.value.field == "wavelength"


def test_one_peak_names_no_lattice():
    r = saxs.analyse_saxs(_frame(mesophase_curve("hexagonal", 3.2, rng=np.random.default_rng(7), n_reflections=1)))
    assert r.lattice == "undetermined" and r.verdict == "" and r.a_nm is None
    assert [f.code for f in r.flags] == ["lattice_undetermined"] and len(r.peaks) == 1
