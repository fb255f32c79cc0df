"""Multiplicity and J of 1H NMR signals by the first-order rules, on spectra built from a physical model.

Outside references:
* the first-order rules: n equivalent neighbours give n + 1 lines spaced by J with the binomial intensities
  (Pascal's triangle), two different couplings a doublet of doublets of four equal lines (H. Friebolin,
  *Basic One- and Two-Dimensional NMR Spectroscopy*, 5th ed. 2010, ch. 4; T. D. W. Claridge,
  *High-Resolution NMR Techniques in Organic Chemistry*, 3rd ed. 2016, ch. 4);
* the AB system, exact: lines at ν0 ± (D ± J)/2 with D = sqrt(Δν² + J²), inner/outer intensities
  (1 + J/D)/(1 - J/D) (Friebolin ch. 4), for a pair that is not first-order;
* ethyl acetate in CDCl3: 4.12 (q, J = 7.1 Hz, 2H), 2.05 (s, 3H), 1.26 (t, J = 7.1 Hz, 3H) (H. E. Gottlieb,
  V. Kotlyar and A. Nudelman, J. Org. Chem. 62, 7512 (1997), table 1; recalled from memory).
The model spectra are Lorentzian lines with 1-3 % Gaussian noise of the tallest line and 0.8-2.5 Hz widths.
"""

from __future__ import annotations

import numpy as np
import pytest

from server.analysis.nmr_spectrum import analyse_nmr_spectrum, multiplet
from server.precision import decimals_within
from server.services.identity import nmr_line
from server.synth.nmr_spectrum import Signal, ab_lines, spectrum

EA = [Signal(2.05, 3), Signal(4.12, 2, 3, 7.1), Signal(1.26, 3, 2, 7.1), Signal(7.26, 0.5), Signal(0.0, 1.0)]


def _analyse(signals, *, seed, noise=0.01, fwhm=1.0, points=65536, lines=(), mhz=400.0, **kw):
    ppm, y = spectrum(signals, rng=np.random.default_rng(seed), mhz=mhz, noise_rel=noise, points=points,
                      fwhm_Hz=fwhm, lines=tuple(lines))
    return analyse_nmr_spectrum(ppm, y, nucleus="1H", solvent="CDCl3", spectrometer_MHz=mhz, **kw)


def _sample(r):
    return [s for s in r.signals if not s.assigned]


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_ethyl_acetate_quartet_singlet_triplet_with_j_7_1(seed):
    r = _analyse(EA, seed=seed, smiles="CC(=O)OCC")
    q, s, t = _sample(r)
    assert (q.multiplicity, s.multiplicity, t.multiplicity) == ("q", "s", "t")  # Gottlieb et al. (1997)
    assert q.j_Hz[0] == pytest.approx(7.1, abs=0.15) and t.j_Hz[0] == pytest.approx(7.1, abs=0.15)
    assert s.j_Hz == () and s.pattern == ""
    # 0.067 Hz per point: u(J) = 0.027 Hz, so J is printed to 0.1 Hz, as the literature gives it
    line = nmr_line(r.to_dict())
    assert line == ("1H NMR (400 MHz, CDCl3): δ 4.12 (q, J = 7.1 Hz, 2H), 2.05 (s, 3H), 1.26 (t, J = 7.1 Hz, 3H).")


def test_coarse_digital_resolution_prints_j_in_whole_hertz():
    r = _analyse(EA, seed=3, points=8192, fwhm=1.5, noise=0.005, smiles="CC(=O)OCC")
    assert r.resolution_Hz == pytest.approx(11.0 * 400 / 8191)  # 0.54 Hz per point
    assert r.j_err_Hz == pytest.approx(r.resolution_Hz / 6 ** 0.5)  # 0.22 Hz: more than 0.1, at most 1
    assert [s.multiplicity for s in _sample(r)] == ["q", "s", "t"]
    assert "4.12 (q, J = 7 Hz, 2H)" in nmr_line(r.to_dict())


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_a_doublet_of_doublets_gives_both_couplings(seed):
    # an aromatic H with an ortho (8.4 Hz) and a meta (2.1 Hz) neighbour, 2 % noise
    r = _analyse([Signal(7.50, 1, 1, 8.4, ((1, 2.1),)), Signal(3.80, 1)], seed=seed, noise=0.02, fwhm=1.2)
    dd = next(s for s in r.signals if abs(s.shift_ppm - 7.50) < 0.01)
    assert dd.multiplicity == "dd" and dd.lines == 4
    assert dd.j_Hz == pytest.approx((8.4, 2.1), abs=0.15)  # largest first
    assert "7.50 (dd, J = 8.4, 2.1 Hz" in nmr_line(r.to_dict())


def test_overlapping_couplings_are_an_unresolved_multiplet_not_a_guess():
    # three small different couplings under 2.5 Hz lines: the lines run together
    r = _analyse([Signal(5.40, 1, 1, 3.0, ((1, 2.2), (1, 1.4))), Signal(3.80, 3)], seed=7, noise=0.01, fwhm=2.5)
    m = next(s for s in r.signals if abs(s.shift_ppm - 5.40) < 0.02)
    assert m.multiplicity == "m" and m.j_Hz == () and m.pattern
    assert "5.40 (m, 25 %)" in nmr_line(r.to_dict())  # no structure: the integral as a fraction


def test_a_lost_outer_line_makes_m_never_a_wrong_doublet():
    # at 3 % noise the quartet's outer lines (1/8 of 2 H) fall under the 5-sigma limit: its inner pair alone
    # would read as a 1:1 doublet; the analysis sees a line hiding one J beyond and says m
    calls = [_sample(_analyse(EA, seed=seed, noise=0.03, fwhm=1.5, points=32768))[0] for seed in range(1, 6)]
    assert {c.multiplicity for c in calls} <= {"q", "m"}
    assert any(c.multiplicity == "m" and "hide" in c.pattern for c in calls)


def test_a_strongly_coupled_ab_pair_is_m_a_weakly_coupled_one_two_doublets():
    strong = ab_lines(5.0, 8.0, 12.0, 2.0, mhz=400.0)  # Δν/J = 0.67: inner/outer 5.4, not first-order
    weak = ab_lines(3.5, 200.0, 12.0, 2.0, mhz=400.0)  # Δν/J = 17: a roof of 1.15, first-order
    r = _analyse([Signal(1.0, 3)], seed=21, noise=0.003, fwhm=1.0, lines=strong + weak)
    ab = next(s for s in r.signals if abs(s.shift_ppm - 5.0) < 0.05)
    assert ab.multiplicity == "m" and ab.lines == 4
    doublets = [s for s in r.signals if abs(s.shift_ppm - 3.5) < 0.5]
    assert [s.multiplicity for s in doublets] == ["d", "d"]
    assert [s.j_Hz[0] for s in doublets] == pytest.approx([12.0, 12.0], abs=0.1)


def test_a_broad_single_line_is_m():
    r = _analyse([Signal(2.00, 3), Signal(3.00, 3)], seed=5, fwhm=1.0,
                 lines=tuple((5.0 + k * 0.0025, 0.25) for k in (-1.5, -0.5, 0.5, 1.5)))  # 1 Hz apart: one hump
    hump = next(s for s in r.signals if abs(s.shift_ppm - 5.0) < 0.02)
    assert hump.multiplicity == "m" and "broad singlet" in hump.pattern


def test_without_the_frequency_no_j_is_given():
    ppm, y = spectrum(EA, rng=np.random.default_rng(3), mhz=400.0, noise_rel=0.01, points=65536, fwhm_Hz=1.0)
    r = analyse_nmr_spectrum(ppm, y, nucleus="1H", solvent="CDCl3")
    assert all(s.j_Hz == () for s in r.signals) and r.j_err_Hz is None and r.resolution_Hz is None


@pytest.mark.parametrize("n, name", [(1, "d"), (2, "t"), (3, "q"), (4, "quint"), (5, "sext"), (6, "sept")])
def test_pascal_intensities_give_the_n_plus_1_names(n, name):
    from math import comb

    x = np.arange(n + 1) * 6.5
    got = multiplet(x, [comb(n, k) for k in range(n + 1)], 1.0, resolution_Hz=0.1)
    assert got.multiplicity == name and got.j_Hz == pytest.approx((6.5,))


def test_patterns_that_are_not_first_order_are_m():
    # four equal lines equally spaced are a dd with J1 = 2 J2 (Claridge ch. 4), 1:2:2:1 is no pattern
    assert multiplet([0, 3, 6, 9], [1, 1, 1, 1], 1.0, resolution_Hz=0.1).j_Hz == pytest.approx((6.0, 3.0))
    assert multiplet([0, 3, 6, 9], [1, 2, 2, 1], 1.0, resolution_Hz=0.1).multiplicity == "m"
    # a doublet with a roof of 2 (Δν/J about 3) is second order
    assert multiplet([0, 7], [1, 2], 1.0, resolution_Hz=0.1).multiplicity == "m"
    # unequal spacings beyond the digital resolution
    assert multiplet([0, 7, 15], [1, 2, 1], 1.0, resolution_Hz=0.1).multiplicity == "m"
    # lines closer than their width are not resolved for a call
    assert multiplet([0, 0.8], [1, 1], 1.0, resolution_Hz=0.1).multiplicity == "m"


@pytest.mark.parametrize("err, decimals", [(0.055, 1), (0.1, 1), (0.22, 0), (1.0, 0), (3.0, None), (None, None),
                                           (0.004, 1)])
def test_decimals_follow_the_uncertainty(err, decimals):
    assert decimals_within(err) == decimals
