"""HRMS: ion m/z with the electron mass, isotope clusters, found-vs-calculated and the flags.

Outside values (independently checked, not produced by this code):
* PubChem "Monoisotopic Mass" entries: caffeine C8H10N4O2 194.08037557, D-glucose C6H12O6 180.06338810,
  cholesterol C27H46O 386.35486609 (PubChem compound records; values copied from memory of the records,
  which agree with the NIST atomic masses used below to 1e-7).
* NIST "Atomic Weights and Isotopic Compositions" masses: 1H 1.00782503223, 23Na 22.9897692820,
  35Cl 34.968852682; CODATA 2018 electron mass 5.48579909065e-4 u. The ion m/z below are computed by hand
  from these: [M+H]+ = M + m(1H) - m(e), [M+Na]+ = M + m(23Na) - m(e).
* IUPAC representative isotopic compositions (CIAAW 2013; from memory): 79Br 0.5069, 81Br 0.4931;
  35Cl 0.7576, 37Cl 0.2424; 32S 0.9499, 33S 0.0075, 34S 0.0425; 12C 0.9893, 13C 0.0107; 2H 0.000115.
  Cluster ratios are worked out by hand (binomial terms) from these; RDKit's table differs from them in
  the last digit (e.g. 32S 0.9493), so the checks allow 0.3 % relative.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from server.analysis.composition import ELECTRON_MASS_U, isotope_cluster, monoisotopic_mass_u
from server.analysis.crystal import parse_formula
from server.analysis.hrms import analyse_hrms, ion_mz, parse_ion
from server.errors import AnalysisError
from server.synth.identity import hrms_profile

M_H, M_NA, M_CL, M_E = 1.00782503223, 22.9897692820, 34.968852682, 5.48579909065e-4

PUBCHEM = {"C8H10N4O2": 194.08037557, "C6H12O6": 180.06338810, "C27H46O": 386.35486609}


def test_electron_mass_is_codata():
    assert ELECTRON_MASS_U == pytest.approx(M_E, abs=1e-12)


@pytest.mark.parametrize("formula, mono", PUBCHEM.items())
def test_monoisotopic_masses_and_adducts_match_pubchem_and_nist(formula, mono):
    assert monoisotopic_mass_u(parse_formula(formula)) == pytest.approx(mono, abs=2e-6)
    assert ion_mz(formula, "[M+H]+") == pytest.approx(mono + M_H - M_E, abs=2e-6)
    assert ion_mz(formula, "[M+Na]+") == pytest.approx(mono + M_NA - M_E, abs=2e-6)
    assert ion_mz(formula, "[M-H]-") == pytest.approx(mono - M_H + M_E, abs=2e-6)
    assert ion_mz(formula, "[M+Cl]-") == pytest.approx(mono + M_CL + M_E, abs=2e-6)
    assert ion_mz(formula, "M+.") == pytest.approx(mono - M_E, abs=2e-6)


def test_caffeine_protonated_by_hand():
    # 194.08037557 + 1.00782503223 - 0.00054857991 = 195.08765202 (by hand)
    assert ion_mz("C8H10N4O2", "[M+H]+") == pytest.approx(195.08765202, abs=2e-6)


def test_ion_spellings():
    assert parse_ion("[M+NH₄]⁺") == "[M+NH4]+"
    assert parse_ion("M⁺·") == "M+."
    assert parse_ion("[M − H]⁻") == "[M-H]-"
    with pytest.raises(AnalysisError):
        parse_ion("[M+Li]+")


def _rel(cluster):
    top = max(p for _, p in cluster)
    return [p / top for _, p in cluster]


def test_bromine_doublet():
    # CH3Br: M+2/M = 0.4931/0.5069 = 0.9728 (13C and 2H add nothing at +2 beyond 1e-4)
    rel = _rel(isotope_cluster(parse_formula("CH3Br")))
    assert rel[2] == pytest.approx(0.4931 / 0.5069, rel=3e-3)
    # M+1/M: one 13C, 0.0107/0.9893 = 0.01082, plus 3 x 2H
    assert rel[1] == pytest.approx(0.0107 / 0.9893 + 3 * 0.000115, rel=3e-2)


def test_dichloromethane_triplet():
    # CH2Cl2: M : M+2 : M+4 = 1 : 2r : r^2 with r = 0.2424/0.7576 (binomial)
    r = 0.2424 / 0.7576
    rel = _rel(isotope_cluster(parse_formula("CH2Cl2")))
    assert rel[2] == pytest.approx(2 * r, rel=3e-3)
    assert rel[4] == pytest.approx(r * r, rel=3e-3)


def test_dibenzothiophene_sulfur_m_plus_2():
    # C12H8S, by hand: M+2/M = 34S/32S + C(12,2)(13C/12C)^2 + 12 (13C/12C)(33S/32S) + 8(2H/1H)*... (small)
    c, s33, s34 = 0.0107 / 0.9893, 0.0075 / 0.9499, 0.0425 / 0.9499
    m1 = 12 * c + s33 + 8 * 0.000115
    m2 = s34 + 66 * c * c + 12 * c * s33
    rel = _rel(isotope_cluster(parse_formula("C12H8S")))
    assert rel[1] == pytest.approx(m1, rel=2e-2)
    assert rel[2] == pytest.approx(m2, rel=2e-2)


def test_cluster_sums_to_one_and_mean_mass_is_the_average_mass():
    cl = isotope_cluster(parse_formula("C27H24O6"))
    assert sum(p for _, p in cl) == pytest.approx(1.0, abs=1e-5)
    mean = sum(m * p for m, p in cl)
    # average mass from isotope masses is the molar mass in g/mol, 444.48 (IUPAC atomic weights, by hand)
    assert mean == pytest.approx(444.48, abs=0.01)


def _frame(df):
    return pd.DataFrame({"mz": df["m/z ()"], "intensity": df["intensity ()"]})


@pytest.mark.parametrize("seed, error", [(1, 1.2), (2, -2.5), (3, 0.0)])
def test_found_mz_recovers_the_calibration_error_of_a_noisy_profile(seed, error):
    frame = _frame(hrms_profile("C24H12S3", "[M+H]+", rng=np.random.default_rng(seed), error_ppm=error))
    r = analyse_hrms(frame, formula="C24H12S3", ion="[M+H]+")
    assert r.error_ppm == pytest.approx(error, abs=0.3)
    assert r.passed and r.to_dict()["pass"] is True
    assert r.isotope_score > 0.99
    # the three sulfurs: M+2 about 3 x 4.3 % + 13C2 terms, seen within noise
    assert r.cluster[2].found_rel_pct == pytest.approx(r.cluster[2].calc_rel_pct, rel=0.1)


def test_over_tolerance_fails_with_a_flag():
    frame = _frame(hrms_profile("C24H12S3", "[M+H]+", rng=np.random.default_rng(4), error_ppm=8.0))
    r = analyse_hrms(frame, formula="C24H12S3", ion="[M+H]+")
    assert not r.passed and "mass_error_over_tolerance" in {f.code for f in r.flags}
    assert analyse_hrms(frame, formula="C24H12S3", ion="[M+H]+", tolerance="10 ppm").passed


def test_a_missing_chalcogen_fails():
    # the sample lacks one S: its cluster sits 32 below; the registered formula's ion finds no peak
    frame = _frame(hrms_profile("C24H12S2", "[M+H]+", rng=np.random.default_rng(5), window=(-3, 36)))
    r = analyse_hrms(frame, formula="C24H12S3", ion="[M+H]+")
    assert not r.passed and r.found_mz is None and r.error_ppm is None
    assert "no_peak_at_ion" in {f.code for f in r.flags}


def test_a_wrong_chalcogen_count_shows_in_the_isotope_score():
    # the cluster of the Se3 analogue (Se: six isotopes, 74-82) moved onto the S3 ion's m/z: the mass matches,
    # the shape cannot (strong peaks two and four below the monoisotopic one)
    true = _frame(hrms_profile("C24H12S3", "[M+H]+", rng=np.random.default_rng(6)))
    wrong = _frame(hrms_profile("C24H12Se3", "[M+H]+", rng=np.random.default_rng(6), window=(-8.0, 5.0)))
    shift = ion_mz("C24H12S3", "[M+H]+") - ion_mz("C24H12Se3", "[M+H]+")
    wrong["mz"] = wrong["mz"] + shift  # the Se cluster moved onto the S ion's m/z
    assert analyse_hrms(true, formula="C24H12S3", ion="[M+H]+").isotope_score > 0.99
    r = analyse_hrms(wrong, formula="C24H12S3", ion="[M+H]+")
    assert r.isotope_score < 0.9 and "isotope_pattern_mismatch" in {f.code for f in r.flags}


def test_ion_outside_the_file_range_is_a_flag_not_a_crash():
    frame = _frame(hrms_profile("C27H24O6", "[M+H]+", rng=np.random.default_rng(7)))
    r = analyse_hrms(frame, formula="C27H24O6", ion="[M+K]+")
    assert not r.passed and "ion_out_of_range" in {f.code for f in r.flags}


def test_centroided_peak_list():
    mono = ion_mz("C8H10N4O2", "[M+Na]+")
    frame = pd.DataFrame({"mz": [mono * (1 + 0.8e-6), mono + 1.00335, mono + 2.0042, 300.1],
                          "intensity": [100.0, 9.6, 1.1, 4.0]})
    r = analyse_hrms(frame, formula="C8H10N4O2", ion="[M+Na]+")
    assert r.centroided and r.error_ppm == pytest.approx(0.8, abs=0.05) and r.passed


def test_missing_ion_and_bad_tolerance_are_refused():
    frame = pd.DataFrame({"mz": [100.0, 101.0], "intensity": [1.0, 2.0]})
    with pytest.raises(AnalysisError, match="ion"):
        analyse_hrms(frame, formula="C6H6", ion=None)
    with pytest.raises(AnalysisError, match="tolerance"):
        analyse_hrms(frame, formula="C6H6", ion="M+.", tolerance="five")
    assert math.isfinite(ion_mz("C6H6", "M+."))
