"""Dielectric relaxation fits against analytic models with noise.

The data are generated from the Debye, Cole-Cole and Havriliak-Negami functions (Debye 1929; Cole and
Cole, J. Chem. Phys. 9, 341 (1941); Havriliak and Negami, Polymer 8, 161 (1967); forms as in Kremer and
Schoenhals, Broadband Dielectric Spectroscopy, Springer 2003, ch. 1) with relaxation times from an
Arrhenius law (tau0 = 1e-13 s, Ea = 45 kJ/mol) or a Vogel-Fulcher law (Vogel 1921; Fulcher 1925), and
2 % multiplicative noise on eps' and eps''. The fits must return the parameters within their errors.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from server.analysis.constants import CAL_J, R_J_MOLK
from server.analysis.relaxation import analyse, fit_isotherm, havriliak_negami, loss_peak_tau_s

F_HZ = np.logspace(-1, 6, 43)
TAU0_S, EA_J = 1e-13, 45e3


def _isotherm(rng, t_K, tau_s, *, alpha=1.0, beta=1.0, sigma=0.0, d_eps=8.0, eps_inf=3.0, noise=0.02):
    eps = havriliak_negami(F_HZ, eps_inf, d_eps, tau_s, alpha, beta, sigma)
    er = eps.real * (1 + noise * rng.standard_normal(F_HZ.size))
    ei = -eps.imag * (1 + noise * rng.standard_normal(F_HZ.size))
    return t_K, F_HZ, er, ei


def test_debye_relaxation_recovers_tau0_and_ea():
    rng = np.random.default_rng(1)
    temps = [230.0, 245.0, 260.0, 275.0, 290.0, 305.0]
    data = [_isotherm(rng, t, TAU0_S * math.exp(EA_J / (R_J_MOLK * t))) for t in temps]
    r = analyse(data, model="debye")
    for iso, t in zip(r.isotherms, temps):
        tau = TAU0_S * math.exp(EA_J / (R_J_MOLK * t))
        assert iso.peak_in_window
        assert abs(iso.tau_s - tau) < 4 * iso.tau_err_s + 0.01 * tau, (t, iso.tau_s, tau)
        assert iso.d_eps == pytest.approx(8.0, rel=0.03) and iso.eps_inf == pytest.approx(3.0, rel=0.05)
    a = r.arrhenius
    assert abs(a.ea_kJ_mol - 45.0) < 3 * a.ea_err_kJ_mol + 0.2
    assert r.ea_kcal_mol == pytest.approx(r.ea_kJ_mol / CAL_J)
    assert abs(math.log(r.tau0_s) - math.log(TAU0_S)) < 3 * a.ln_tau0_err + 0.1
    assert not a.curved  # an Arrhenius law is straight in 1/T


def test_cole_cole_with_conductivity():
    # Cole-Cole alpha = 0.7 and a dc conductivity that dominates eps'' at the lowest frequencies.
    rng = np.random.default_rng(2)
    t, tau = 260.0, 1e-4
    iso = fit_isotherm(*_isotherm(rng, t, tau, alpha=0.7, sigma=2e-10), model="cole_cole", conductivity=True)
    assert abs(iso.alpha - 0.7) < 4 * iso.alpha_err + 0.01
    assert abs(math.log(iso.tau_s / tau)) < 0.05
    assert abs(iso.sigma_S_m - 2e-10) < 4 * iso.sigma_err_S_m + 0.05 * 2e-10
    assert iso.beta == 1.0 and iso.beta_err is None


def test_havriliak_negami_shape_and_loss_peak_time():
    rng = np.random.default_rng(3)
    tau = 3e-3
    iso = fit_isotherm(*_isotherm(rng, 250.0, tau, alpha=0.8, beta=0.5), model="havriliak_negami")
    assert abs(iso.alpha - 0.8) < 4 * iso.alpha_err + 0.01 and abs(iso.beta - 0.5) < 4 * iso.beta_err + 0.01
    # tau_peak from the closed form (Kremer and Schoenhals eq. 1.58) against a numerical loss maximum
    f = np.logspace(-2, 5, 20001)
    loss = -havriliak_negami(f, 3.0, 8.0, tau, 0.8, 0.5).imag
    tau_num = 1.0 / (2 * math.pi * f[np.argmax(loss)])
    assert loss_peak_tau_s(tau, 0.8, 0.5) == pytest.approx(tau_num, rel=2e-3)
    assert iso.tau_peak_s == pytest.approx(loss_peak_tau_s(iso.tau_s, iso.alpha, iso.beta))


def test_vogel_fulcher_curvature_is_found():
    # tau = 1e-12 s exp(1200 K / (T - 160 K)): curved in 1/T; the F test keeps the VF fit.
    rng = np.random.default_rng(4)
    temps = [205.0, 215.0, 225.0, 240.0, 255.0, 270.0, 290.0]
    data = [_isotherm(rng, t, 1e-12 * math.exp(1200.0 / (t - 160.0)), alpha=0.85) for t in temps]
    r = analyse(data, model="cole_cole")
    a = r.arrhenius
    assert a.curved and a.f_test_p < 0.05
    assert abs(a.t_vf_K - 160.0) < 4 * a.t_vf_err_K + 2.0
    assert abs(a.vf_b_K - 1200.0) < 4 * a.vf_b_err_K + 30.0
    assert "curved" in {f.code for f in r.flags}


def test_a_peak_outside_the_window_is_left_out_of_the_map():
    rng = np.random.default_rng(5)
    data = [_isotherm(rng, 200.0, 1e3), *(_isotherm(rng, t, TAU0_S * math.exp(EA_J / (R_J_MOLK * t)))
                                          for t in (250.0, 270.0, 290.0))]
    r = analyse(data, model="debye")
    assert not r.isotherms[0].peak_in_window
    assert "peak_outside_window" in {f.code for f in r.flags}
    assert r.arrhenius.temperatures == 3


# --- a spectrum file: long table, C and D with geometry, cryostat drift -----------------------------------------

def _spectrum_frame(**kw):
    import pandas as pd

    from server.ingest.table import read_table, to_csv_bytes
    from server.synth.relaxation import relaxation_spectra

    frame = relaxation_spectra((220.0, 235.0, 250.0, 265.0, 280.0), tau0_s=1e-13, ea_kJ_mol=45.0, d_eps=8.0,
                               eps_inf=3.0, noise_rel=0.02, drift_K=0.2, rng=np.random.default_rng(7), **kw)
    assert isinstance(frame, pd.DataFrame)
    return read_table(to_csv_bytes(frame, {}), filename="s.csv").frame


def test_spectrum_from_capacitance_and_loss_tangent_recovers_the_arrhenius_law():
    # Debye relaxation with Arrhenius tau (tau0 1e-13 s, Ea 45 kJ/mol = 10.755 kcal/mol, computed with
    # 1 cal = 4.184 J), written as C (pF) and D () of a 0.2 cm^2, 300 um pellet: eps' = C d / (eps0 A).
    from server.analysis.relaxation import analyse_spectrum, isotherms_from_frame

    frame = _spectrum_frame(as_capacitance=True, area_cm2=0.2, thickness_um=300.0)
    iso = isotherms_from_frame(frame, area_cm2=0.2, thickness_um=300.0)
    assert [round(t) for t, *_ in iso] == [220, 235, 250, 265, 280]  # drift of 0.2 K stays within one isotherm
    r = analyse_spectrum(frame, area_cm2=0.2, thickness_um=300.0, model="debye")
    a = r.arrhenius
    assert abs(a.ea_kJ_mol - 45.0) < 3 * a.ea_err_kJ_mol + 0.3
    assert r.ea_kcal_mol == pytest.approx(45.0 / 4.184, abs=3 * a.ea_err_kcal_mol + 0.08)
    for i in r.isotherms:
        assert i.d_eps == pytest.approx(8.0, rel=0.04) and i.eps_inf == pytest.approx(3.0, rel=0.06)
    assert r.spectra is not None and "spectra" not in r.to_dict()


def test_spectrum_with_capacitance_but_no_geometry_is_refused():
    from server.analysis.relaxation import analyse_spectrum
    from server.errors import AnalysisError

    with pytest.raises(AnalysisError, match="area"):
        analyse_spectrum(_spectrum_frame(as_capacitance=True))


def test_debye_loss_peak_sits_at_omega_tau_one():
    # Debye: eps'' = d_eps w tau / (1 + w^2 tau^2) has its maximum d_eps / 2 at w tau = 1 (Debye 1929).
    tau = 1e-3
    f = np.logspace(0, 4, 4001)
    loss = -havriliak_negami(f, 3.0, 8.0, tau).imag
    f_max = f[int(np.argmax(loss))]
    assert 2 * math.pi * f_max * tau == pytest.approx(1.0, rel=2e-3)
    assert loss.max() == pytest.approx(4.0, rel=1e-5)
