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

import re
import numpy as np
import pytest

from server.analysis.nmr_spectrum import analyse_nmr_spectrum, multiplet
from server.precision import decimals_within
from server.services.identity import nmr_line, nmr_resolution_note
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
    # 64 k points over 13 ppm, 0.079 Hz per point: u(J) = 0.032 Hz, so J is printed to 0.1 Hz, as the literature gives it
    line = nmr_line(r.to_dict())
    assert line == ("1H NMR (400 MHz, CDCl3): δ 4.12 (q, J = 7.1 Hz, 2H), 2.05 (s, 3H), 1.26 (t, J = 7.1 Hz, 3H).")


def test_coarse_digital_resolution_prints_j_in_whole_hertz():
    r = _analyse(EA, seed=3, points=8192, fwhm=1.5, noise=0.005, smiles="CC(=O)OCC")
    assert r.resolution_Hz == pytest.approx(13.0 * 400 / 8191)  # 8 k points over 13 ppm: 0.63 Hz per point
    assert r.j_err_Hz == pytest.approx(r.resolution_Hz / 6 ** 0.5)  # 0.26 Hz: more than 0.1, at most 1
    assert [s.multiplicity for s in _sample(r)] == ["q", "s", "t"]
    assert "4.12 (q, J = 7 Hz, 2H)" in nmr_line(r.to_dict())


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_a_doublet_of_doublets_gives_both_couplings(seed):
    # an aromatic H with an ortho (8.4 Hz) and a meta (2.1 Hz) neighbour, 2 % noise
    r = _analyse([Signal(7.50, 1, 1, 8.4, ((1, 2.1),)), Signal(3.80, 1)], seed=seed, noise=0.02, fwhm=1.2)
    dd = next(s for s in r.signals if abs(s.shift_ppm - 7.50) < 0.01)
    assert dd.multiplicity == "dd" and dd.lines == 4
    assert dd.j_Hz == pytest.approx((8.4, 2.1), abs=0.15)  # largest first
    # J within 0.15 Hz of the model's, so printed to 0.1 Hz it reads 8.3-8.5 and 2.0-2.2 (the lines' noise
    # adds to the resolution's 0.065 Hz)
    assert re.search(r"7\.50 \(dd, J = 8\.[345], 2\.[012] Hz", nmr_line(r.to_dict())), nmr_line(r.to_dict())


def test_overlapping_couplings_are_an_unresolved_multiplet_not_a_guess():
    # three small different couplings under 2.5 Hz lines: the lines run together
    r = _analyse([Signal(5.40, 1, 1, 3.0, ((1, 2.2), (1, 1.4))), Signal(3.80, 3)], seed=7, noise=0.01, fwhm=2.5)
    m = next(s for s in r.signals if abs(s.shift_ppm - 5.40) < 0.02)
    assert m.multiplicity == "m" and m.j_Hz == () and m.pattern
    # one broad hump: printed as the range of its half-height points (its lines span ±3.3 Hz = ±0.008 ppm);
    # no structure: the integral as a fraction (1 : 3 of the model, within a few per cent)
    assert re.search(r"δ 5\.41–5\.39 \(m, (24|25|26) %\)", nmr_line(r.to_dict())), nmr_line(r.to_dict())


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


# Two distinct couplings (Friebolin 2010 ch. 4; Pretsch et al. 2009 ch. 5: named largest J first). The J are
# of real-world size (from memory, common textbook values): a trans-vinyl H with 15.6 Hz and a CH2 (dt), an
# axial cyclohexane H with two axial-axial (11.5 Hz) and one axial-equatorial neighbour (td), an H between two
# CH2 (tt), the =CH of a crotyl group (dq, 15.5 and 6.9 Hz) and a CH of CH3-CH-H with a long-range 2.5 Hz (qd).
TREES = [("dd", Signal(7.50, 1, 1, 8.4, ((1, 2.1),)), (8.4, 2.1)),
         ("dt", Signal(5.80, 1, 1, 15.6, ((2, 6.8),)), (15.6, 6.8)),
         ("td", Signal(3.20, 1, 2, 11.5, ((1, 4.2),)), (11.5, 4.2)),
         ("tt", Signal(2.10, 1, 2, 12.2, ((2, 3.6),)), (12.2, 3.6)),
         ("dq", Signal(6.95, 1, 1, 15.5, ((3, 6.9),)), (15.5, 6.9)),
         ("qd", Signal(4.55, 1, 3, 7.0, ((1, 2.5),)), (7.0, 2.5)),
         # interleaved: J_large < 2 J_small, the two triplets' lines alternate (1:1:2:2:1:1 read out of order)
         ("dt", Signal(1.80, 1, 1, 7.0, ((2, 5.0),)), (7.0, 5.0))]


@pytest.mark.parametrize("points", [65536, 32768])
def test_two_coupling_trees_are_named_with_both_j(points):
    # 1 % noise of the tallest point, 1 Hz lines, five noise draws: each tree is named with both J, largest
    # first, within 0.1 Hz; a draw where a noise spike joins the lines may read "m", never a wrong name
    right = 0
    for seed in range(1, 6):
        r = _analyse([s for _, s, _ in TREES], seed=seed, noise=0.01, fwhm=1.0, points=points)
        for name, sig, j in TREES:
            got = next(s for s in r.signals if abs(s.shift_ppm - sig.shift_ppm) < 0.01)
            assert got.multiplicity in (name, "m"), (name, got)
            if got.multiplicity == name:
                right += 1
                assert got.j_Hz == pytest.approx(j, abs=0.1)
                assert got.lines == len(sig.lines_Hz(400.0))
    assert right >= 0.9 * 5 * len(TREES)


def test_a_dt_and_a_td_print_as_the_literature_does():
    r = _analyse([TREES[1][1], TREES[2][1]], seed=4, noise=0.01, fwhm=1.0)
    line = nmr_line(r.to_dict())
    assert "5.80 (dt, J = 15.6, 6.8 Hz, 50 %)" in line and "3.20 (td, J = 11.5, 4.2 Hz, 50 %)" in line


@pytest.mark.parametrize("name, n_large, j_large, n_small, j_small", [
    ("dt", 1, 15.6, 2, 6.8), ("td", 2, 11.5, 1, 4.2), ("tt", 2, 12.2, 2, 3.6), ("dq", 1, 15.5, 3, 6.9),
    ("qd", 3, 7.0, 1, 2.5), ("dd", 1, 10.0, 1, 5.0)])
def test_trees_from_their_stick_lines_with_a_few_percent_intensity_noise(name, n_large, j_large, n_small, j_small):
    from server.analysis.nmr_spectrum import tree_lines

    rng = np.random.default_rng(31)
    pos, w, _, _ = tree_lines(n_large, j_large, n_small, j_small, merge_Hz=0.9)
    for _ in range(20):
        got = multiplet(pos + rng.normal(0, 0.03, pos.size), w * (1 + rng.normal(0, 0.04, w.size)), 0.9,
                        resolution_Hz=0.1)
        assert got.multiplicity == name and got.j_Hz == pytest.approx((j_large, j_small), abs=0.1)


def test_the_convolution_of_two_pascal_rows():
    # a dt is a 1:2:1 triplet in each half of a doublet; a tt the row (1 2 1) convolved with itself, 9 lines
    from server.analysis.nmr_spectrum import tree_lines

    pos, w, _, _ = tree_lines(1, 15.0, 2, 5.0)
    assert list(w) == [1, 2, 1, 1, 2, 1] and list(pos) == [-12.5, -7.5, -2.5, 2.5, 7.5, 12.5]
    _, w, _, _ = tree_lines(2, 12.0, 2, 3.0)
    assert list(w) == [1, 2, 1, 2, 4, 2, 1, 2, 1]
    # J_large = 2 J_small: the middle lines of a dt coincide and stand as one of intensity 2
    pos, w, _, _ = tree_lines(1, 10.0, 2, 5.0, merge_Hz=0.5)
    assert list(w) == [1, 2, 2, 2, 1] and list(pos) == [-10, -5, 0, 5, 10]


def test_overlapping_and_second_order_patterns_stay_m():
    # a 2H triplet (6.6 Hz) and a 1H doublet (8.0 Hz) 4 Hz apart: their lines partly coincide, in no tree
    overlap = [Signal(3.50, 2, 2, 6.6), Signal(3.51, 1, 1, 8.0)]
    # a dt whose lines lean towards a partner (a roof from 0.5 to 1.5 across the pattern, far past the first-
    # order limit): the second-order look of a pair with Δν/J near 1 (Friebolin ch. 4)
    dt = Signal(6.00, 1, 1, 15.6, ((2, 6.8),)).lines_Hz(400.0)
    lean = [(x / 400.0, w * (0.5 + (x - dt[0][0]) / (dt[-1][0] - dt[0][0]))) for x, w in dt]
    for seed in (1, 2, 3):
        r = _analyse(overlap, seed=seed, noise=0.01, fwhm=1.0, lines=lean)
        for at in (3.505, 6.00):
            got = next(s for s in r.signals if abs(s.shift_ppm - at) < 0.02)
            assert got.multiplicity == "m" and got.j_Hz == () and got.pattern, (at, got)


def test_a_multiplet_prints_as_its_range_high_to_low_the_others_at_their_centre():
    # ACS author guidelines (common practice): "7.35–7.28 (m, 2H)", first-order patterns at their centre.
    # The second-order-looking dt of the test above spans ±(15.6/2 + 6.8) Hz = ±0.0365 ppm at 400 MHz.
    dt = Signal(6.0035, 1, 1, 15.6, ((2, 6.8),)).lines_Hz(400.0)
    lean = [(x / 400.0, w * (0.5 + (x - dt[0][0]) / (dt[-1][0] - dt[0][0]))) for x, w in dt]
    r = _analyse([Signal(2.05, 1), Signal(1.26, 3, 2, 7.1)], seed=2, noise=0.003, fwhm=1.0, lines=lean)
    m = next(s for s in r.signals if abs(s.shift_ppm - 6.0) < 0.02)
    assert m.multiplicity == "m"
    assert (m.high_ppm, m.low_ppm) == pytest.approx((6.0035 + 0.0365, 6.0035 - 0.0365), abs=0.001)
    line = nmr_line(r.to_dict())
    # areas 1 : 1 : 3, integrated within a few per cent
    assert re.fullmatch(r"1H NMR \(400 MHz, CDCl3\): δ 6\.04–5\.97 \(m, (19|20|21) %\), 2\.05 \(s, (19|20|21) %\), "
                        r"1\.26 \(t, J = 7\.1 Hz, (59|60|61) %\)\.", line), line


def test_range_digits_and_results_stored_before_ranges():
    base = {"nucleus": "1H", "j_err_Hz": 0.03, "signals": []}
    row = {"shift_ppm": 3.4012, "multiplicity": "m", "n_H": 4.0, "assigned": "", "j_Hz": []}
    ranged = {**base, "signals": [{**row, "high_ppm": 3.4311, "low_ppm": 3.3702}]}
    assert nmr_line(ranged) == "1H NMR: δ 3.43–3.37 (m, 4H)."
    narrow = {**base, "signals": [{**row, "high_ppm": 3.4031, "low_ppm": 3.3982}]}  # one value at 2 decimals
    assert nmr_line(narrow) == "1H NMR: δ 3.40 (m, 4H)."
    assert nmr_line({**base, "signals": [row]}) == "1H NMR: δ 3.40 (m, 4H)."  # stored before: the centre
    doublet = {**base, "signals": [{**row, "multiplicity": "d", "j_Hz": [8.43], "high_ppm": 3.41, "low_ppm": 3.39}]}
    assert nmr_line(doublet) == "1H NMR: δ 3.40 (d, J = 8.4 Hz, 4H)."


def test_the_resolution_note_says_what_the_j_digits_rest_on():
    fine = _analyse(EA, seed=3, smiles="CC(=O)OCC").to_dict()  # 65536 points: 0.079 Hz per point
    coarse = _analyse(EA, seed=3, points=8192, fwhm=1.5, noise=0.005, smiles="CC(=O)OCC").to_dict()  # 0.63 Hz
    assert nmr_resolution_note(fine) == ("Digital resolution 0.079 Hz per point (65536 points); a J from two line "
                                         "positions is known to 0.032 Hz, so J is printed to 0.1 Hz.")
    assert nmr_resolution_note(coarse).endswith("known to 0.26 Hz, so J is printed in whole hertz.")
    assert "too coarse" in nmr_resolution_note({"resolution_Hz": 4.0, "j_err_Hz": 1.6, "points": 2048})
    assert nmr_resolution_note({"resolution_Hz": None, "j_err_Hz": None}).startswith("No spectrometer frequency")


# The J uncertainty from the line fit. A noisy dd (3 % noise of the tallest point, 1.2 Hz lines): the fit's
# covariance, propagated to each J and combined with the resolution's 0.032 Hz, must cover the model's J.
# The check outside the project is the normal distribution: 95 % of draws fall within 2 standard
# uncertainties, so at least 80 % of 20 must (a binomial tail of about 1e-3 if the uncertainty were right).
NOISY_DD = [Signal(7.50, 1, 1, 8.4, ((1, 2.1),)), Signal(3.80, 1)]


def test_the_stated_j_uncertainty_covers_the_true_j_under_noise():
    within = within_resolution_only = called = 0
    for seed in range(100, 120):
        r = _analyse(NOISY_DD, seed=seed, noise=0.03, fwhm=1.2)
        dd = next(s for s in r.signals if abs(s.shift_ppm - 7.50) < 0.01)
        if dd.multiplicity != "dd":
            continue
        called += 1
        assert len(dd.j_err_Hz) == 2 and all(u > r.j_err_Hz for u in dd.j_err_Hz)  # the fit adds to the resolution
        within += all(abs(j - t) <= 2 * u for j, t, u in zip(dd.j_Hz, (8.4, 2.1), dd.j_err_Hz))
        within_resolution_only += all(abs(j - t) <= 2 * r.j_err_Hz for j, t in zip(dd.j_Hz, (8.4, 2.1)))
    assert called >= 16
    assert within >= 0.8 * called
    # the resolution alone claims too much at this noise: it covers the J less often
    assert within_resolution_only < within


def test_noisy_lines_print_j_with_the_digits_the_fit_allows_a_clean_spectrum_with_0_1_hz():
    clean = _analyse(EA, seed=3, noise=0.002, smiles="CC(=O)OCC")
    q = _sample(clean)[0]
    assert q.j_err_Hz[0] < 0.1 and "4.12 (q, J = 7.1 Hz, 2H)" in nmr_line(clean.to_dict())
    # 24 000 points over 13 ppm (0.22 Hz per point: the resolution alone allows 0.1 Hz, u = 0.089 Hz), a
    # doublet under 6 % noise on 2.5 Hz lines: the line fit adds enough that J prints in whole hertz
    d = [Signal(7.50, 1, 1, 8.4), Signal(3.80, 1)]
    for seed in range(200, 205):
        noisy = _analyse(d, seed=seed, noise=0.06, fwhm=2.5, points=24000)
        got = next(s for s in noisy.signals if abs(s.shift_ppm - 7.50) < 0.01)
        if got.multiplicity != "d":
            continue
        assert decimals_within(noisy.j_err_Hz) == 1 and 0.1 < got.j_err_Hz[0] <= 1.0
        assert abs(got.j_Hz[0] - 8.4) <= 2 * got.j_err_Hz[0]
        assert "7.50 (d, J = 8 Hz" in nmr_line(noisy.to_dict()), nmr_line(noisy.to_dict())
        assert "less sure for 1 signal" in nmr_resolution_note(noisy.to_dict())
        # a J a person entered has no fit: the resolution's uncertainty alone sets its digits
        edited = {**noisy.to_dict(), "signals": [{**got.to_dict(), "j_Hz": [8.4], "j_err_Hz": []}]}
        assert "(d, J = 8.4 Hz" in nmr_line(edited)
        break
    else:
        pytest.fail("no draw gave a doublet")


# Three distinct couplings (T. R. Hoye, P. R. Hanson and J. R. Vos, J. Org. Chem. 59, 4096 (1994); Friebolin
# 2010 ch. 4; named largest J first; recalled from memory). Real-world J (common textbook values, from
# memory): a ddd of an H with a trans (10.2 Hz), a cis-type (6.5 Hz) and a long-range (2.1 Hz) neighbour; a
# ddt of a vinyl H (trans 15.8, 6.5 to one H and 2.5 Hz allylic to a CH2); a dtd (13.5 Hz geminal-size
# coupling, 4.2 Hz to two equivalent H, 1.8 Hz long-range).
TREES_3 = [("ddd", Signal(5.50, 1, 1, 10.2, ((1, 6.5), (1, 2.1))), (10.2, 6.5, 2.1)),
           ("ddt", Signal(4.50, 1, 1, 15.8, ((1, 6.5), (2, 2.5))), (15.8, 6.5, 2.5)),
           ("dtd", Signal(6.50, 1, 1, 13.5, ((2, 4.2), (1, 1.8))), (13.5, 4.2, 1.8))]


def test_three_coupling_trees_are_named_with_three_j():
    # 0.5 % noise of a 1H singlet (a signal-to-noise of 200, a routine 1H spectrum), 1 Hz lines, eight draws:
    # the weakest line of a ddt is 1/16 of the proton; each tree is named with its J within 0.15 Hz
    right = 0
    for seed in range(1, 9):
        r = _analyse([s for _, s, _ in TREES_3] + [Signal(3.80, 1)], seed=seed, noise=0.005, fwhm=1.0, points=32768)
        for name, sig, j in TREES_3:
            got = next(s for s in r.signals if abs(s.shift_ppm - sig.shift_ppm) < 0.01)
            assert got.multiplicity in (name, "m"), (name, got)
            if got.multiplicity == name:
                right += 1
                assert got.j_Hz == pytest.approx(j, abs=0.15) and len(got.j_err_Hz) == 3
                assert all(abs(a - b) <= 3 * u for a, b, u in zip(got.j_Hz, j, got.j_err_Hz))
    assert right >= 0.85 * 8 * len(TREES_3)
    line = nmr_line(r.to_dict())
    assert "5.50 (ddd, J = 10.2, 6.5, 2.1 Hz" in line or "5.50 (m" in line, line


def test_an_unresolved_third_coupling_stays_m_never_a_dd():
    # a ddt whose triplet splitting (1.2 Hz) is under the 1 Hz lines' resolution limit: each dd line is a
    # broad unresolved triplet, so the pattern is m, not a dd of broad lines; and a ddd leaning towards a
    # partner (a roof from 0.5 to 1.5, second order) is m too
    ddd = Signal(6.2, 1, 1, 10.2, ((1, 6.5), (1, 2.1))).lines_Hz(400.0)
    lean = [(x / 400.0, w * (0.5 + (x - ddd[0][0]) / (ddd[-1][0] - ddd[0][0]))) for x, w in ddd]
    for seed in (1, 2, 3, 4):
        r = _analyse([Signal(3.00, 1, 1, 15.8, ((1, 6.5), (2, 1.2))), Signal(3.80, 1)], seed=seed, noise=0.005,
                     fwhm=1.0, points=32768, lines=lean)
        for at in (3.00, 6.20):
            got = next(s for s in r.signals if abs(s.shift_ppm - at) < 0.02)
            assert got.multiplicity == "m" and got.j_Hz == () and got.pattern, (at, got)


@pytest.mark.parametrize("name", [t[0] for t in __import__("server.analysis.nmr_spectrum", fromlist=["TREES3"]).TREES3])
def test_three_coupling_trees_from_their_stick_lines(name):
    from server.analysis.nmr_spectrum import TREES3, coupling_tree

    ns = next(t[1:] for t in TREES3 if t[0] == name)
    rng = np.random.default_rng(41)
    pos, w, _ = coupling_tree(tuple(zip(ns, (12.0, 5.3, 1.9))), merge_Hz=0.9)
    for _ in range(10):
        got = multiplet(pos + rng.normal(0, 0.03, pos.size), w * (1 + rng.normal(0, 0.04, w.size)), 0.9,
                        resolution_Hz=0.1)
        assert got.multiplicity == name and got.j_Hz == pytest.approx((12.0, 5.3, 1.9), abs=0.1)
    # a ddd is eight equal lines: with the same positions but 1:3:3:1-like heights it is no first-order tree
    if name == "ddd":
        assert multiplet(pos, [1, 3, 3, 1, 1, 3, 3, 1], 0.9, resolution_Hz=0.1).multiplicity == "m"
