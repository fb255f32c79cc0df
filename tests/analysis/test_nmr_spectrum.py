"""1D NMR spectra: peak list, signals, relative integrals and the expected count of environments.

Outside references:
* topological H and C environment counts of small molecules as every spectroscopy textbook tabulates them
  (ethanol 3 H; toluene 4 H, 5 C; p-xylene 2 H; benzene 1 H; ethyl acetate 3 H; e.g. Pavia, Lampman and
  Kriz, *Introduction to Spectroscopy*, ch. 3 and 5; counts recalled from memory, each checked by hand);
* ethyl acetate in CDCl3: CH3CO 2.05 (s), OCH2 4.12 (q), CH3 1.26 (t) ppm, CHCl3 residual 7.26 ppm
  (Gottlieb, Kotlyar and Nudelman, J. Org. Chem. 62, 7512 (1997), table 1; recalled from memory);
* the analytic model: first-order multiplets (n + 1 lines, binomial intensities) of Lorentzian lines whose
  areas are the proton counts 3 : 2 : 3, with 1 % Gaussian noise.
"""

from __future__ import annotations

import numpy as np
import pytest

from server.analysis.nmr_spectrum import (analyse_nmr_spectrum, element_of, expected_environments, noise_sd,
                                          to_ppm)
from server.errors import AnalysisError
from server.synth.nmr_spectrum import Signal, signals_for, spectrum

ETHYL_ACETATE = "CC(=O)OCC"
# Gottlieb et al. (1997): ethyl acetate in CDCl3, with J(CH2-CH3) = 7.1 Hz (typical vicinal coupling)
EA_SIGNALS = [Signal(2.05, 3), Signal(4.12, 2, 3, 7.1), Signal(1.26, 3, 2, 7.1)]


@pytest.mark.parametrize("smiles, element, expected", [
    ("CCO", "H", 3), ("Cc1ccccc1", "H", 4), ("Cc1ccccc1", "C", 5), ("Cc1ccc(C)cc1", "H", 2),
    ("c1ccccc1", "H", 1), (ETHYL_ACETATE, "H", 3), (ETHYL_ACETATE, "C", 4),
])
def test_expected_environments_are_the_textbook_counts(smiles, element, expected):
    assert expected_environments(smiles, element)[0] == expected


def test_atom_counts_come_with_the_environments():
    assert expected_environments(ETHYL_ACETATE, "H") == (3, 8)  # C4H8O2


@pytest.mark.parametrize("text, element", [("^1H", "H"), ("1H", "H"), ("13C", "C"), ("^19F", "F"), (None, "H")])
def test_nucleus_names(text, element):
    assert element_of(text) == element


def _ethyl_acetate(noise=0.01, mhz=400.0, extra=()):
    return spectrum(EA_SIGNALS + list(extra), rng=np.random.default_rng(3), mhz=mhz, noise_rel=noise)


def test_ethyl_acetate_signals_integrals_and_multiplets():
    ppm, y = _ethyl_acetate(extra=[Signal(7.26, 0.5), Signal(0.0, 1.0)])
    r = analyse_nmr_spectrum(ppm, y, nucleus="1H", solvent="CDCl3", spectrometer_MHz=400.0, smiles=ETHYL_ACETATE)
    sample = [s for s in r.signals if not s.assigned]
    assert [round(s.shift_ppm, 2) for s in sample] == [4.12, 2.05, 1.26]  # downfield first, as printed
    assert [s.lines for s in sample] == [4, 1, 3]  # quartet, singlet, triplet (n + 1 rule)
    # areas 2 : 3 : 3 of 8 H (the model), within 3 %
    assert [s.n_H for s in sample] == pytest.approx([2.0, 3.0, 3.0], rel=0.03)
    assert sum(s.integral_rel for s in sample) == pytest.approx(1.0)
    assert {s.assigned for s in r.signals if s.assigned} == {"solvent residual", "TMS"}
    assert r.signals_found == 3 and r.environments_expected == 3 and r.environments_check == "as expected"
    assert not [f for f in r.flags if f.code == "environments_differ"]
    # every line of the model is in the peak list (4 + 1 + 3, the residual and TMS)
    assert len(r.peaks_ppm) == 10 and r.peaks_ppm == tuple(sorted(r.peaks_ppm, reverse=True))


def test_noise_estimate_is_the_added_noise():
    rng = np.random.default_rng(5)
    y = rng.normal(0, 0.02, 20000)
    assert noise_sd(y) == pytest.approx(0.02, rel=0.05)


def test_a_bowl_shows_its_diastereotopic_bridge_protons_as_a_difference_not_an_error():
    """The CH2 bridge's exo and endo H are one topological class but two doublets while inversion is slow."""
    smiles = "COc1c(OC)c2c3c4c1Cc1c(OC)c(OC)c5c(c14)c1c(c(OC)c(OC)c(c31)C2)C5"
    ppm, y = spectrum(signals_for(smiles), rng=np.random.default_rng(8), mhz=400.0)
    r = analyse_nmr_spectrum(ppm, y, nucleus="1H", solvent="CDCl3", spectrometer_MHz=400.0, smiles=smiles)
    assert (r.signals_found, r.environments_expected, r.element_count) == (3, 2, 24)
    assert r.environments_check == "more than expected"
    flag = next(f for f in r.flags if f.code == "environments_differ")
    assert "a check, not proof" in flag.message and "diastereotopic" in flag.message
    assert [round(s.n_H) for s in r.signals] == [3, 18, 3]


def test_hz_axis_needs_the_frequency_and_other_units_are_refused():
    assert to_ppm(np.array([400.13, 0.0]), "HZ", 400.13).tolist() == [1.0, 0.0]
    with pytest.raises(AnalysisError, match="spectrometer"):
        to_ppm(np.array([1.0]), "HZ", None)
    with pytest.raises(AnalysisError, match="XUNITS"):
        to_ppm(np.array([1.0]), "1/CM", 400.0)


def test_without_frequency_or_structure_it_says_so_and_reports_no_expected_count():
    ppm, y = _ethyl_acetate()
    r = analyse_nmr_spectrum(ppm, y, nucleus="1H", solvent="CDCl3")
    assert r.environments_expected is None and r.environments_check is None
    assert all(s.n_H is None for s in r.signals)
    assert "frequency_assumed" in {f.code for f in r.flags}


def test_noise_alone_is_refused():
    rng = np.random.default_rng(9)
    with pytest.raises(AnalysisError, match="no line"):
        analyse_nmr_spectrum(np.linspace(10, 0, 4096), rng.normal(0, 1, 4096))
