"""PUND analysis against the PUND definition (Scott, Ferroelectric Memories, 2000; docs/methods.md).

The ferroelectric trains come from the Miller tanh hysteron (Miller et al. 1990), so the
pulse values follow from the branch formulas by hand: with the preset negative, P starts
at P_asc(0) = -Pr and reaches P_desc(Ep) + eps0 eps_r Ep; U starts at P_desc(0) = +Pr and
reaches the same value. Hence P* - U^ = 2 Pr exactly, whatever the background.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from server.analysis import pund
from server.analysis.pund import analyse_pund
from server.errors import AnalysisError
from server.synth.ferro import pund_train

EPS0 = 8.8541878128e-12  # F/m, CODATA 2018
CANON = {"E (kV/cm)": "E_kV_cm", "P (uC/cm^2)": "P_uC_cm2", "t (s)": "t_s", "V (V)": "V_V", "Q (uC)": "Q_uC"}


def canon(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.rename(columns=CANON)


def codes(result) -> set[str]:
    return {f.code for f in result.flags}


def test_ferroelectric_train_switches_with_dp_about_2pr():
    # Pr 8, Ps 10, Ec 50, pulses of 200 kV/cm, eps_r 100 background, noise 0.1 uC/cm^2.
    r = analyse_pund(canon(pund_train(8, 10, 50, 200, eps_r_background=100, noise_uC_cm2=0.1,
                                      rng=np.random.default_rng(11))))
    assert r.verdict == "switching"
    assert r.p_switched_uC_cm2 == pytest.approx(2 * 8, rel=0.05)  # brief: dP ~ 2 Pr within 5 %
    assert r.p_switched_neg_uC_cm2 == pytest.approx(2 * 8, rel=0.05)
    assert r.pr_pund_uC_cm2 == pytest.approx(8, rel=0.05)
    assert r.pulse_count == 5


def test_pulse_values_follow_the_branch_formulas():
    # By hand (noise-free): delta = 50 / ln(9) = 22.756 kV/cm; P_desc(200) = 10 tanh(250 / 45.512)
    # = 9.99966; eps0 eps_r Ep = 8.8542e-12 * 100 * 2e7 V/m = 1.77084e-2 C/m^2 = 1.77084 uC/cm^2.
    # P* = 9.99966 + 8 + 1.77084 = 19.7705; U^ = 9.99966 - 8 + 1.77084 = 3.7705.
    r = analyse_pund(canon(pund_train(8, 10, 50, 200, eps_r_background=100)))
    delta = 50 / math.log(9)
    top = 10 * math.tanh(250 / (2 * delta)) + EPS0 * 100 * 2e7 * 100
    assert r.p_star_uC_cm2 == pytest.approx(top + 8, rel=1e-4)
    assert r.p_hat_uC_cm2 == pytest.approx(top - 8, rel=1e-4)
    assert r.p_nonswitched_uC_cm2 == pytest.approx(top - 8, rel=1e-4)
    assert r.n_star_uC_cm2 == pytest.approx(top + 8, rel=1e-4)
    assert r.d_hat_uC_cm2 == pytest.approx(top - 8, rel=1e-4)
    assert r.dpr_remanent_uC_cm2 == pytest.approx(16.0, rel=1e-4)
    # trapezoid pulses 1 ms wide with 50 us edges: width at half height = 1 ms - 50 us
    assert r.pulse_width_s == pytest.approx(0.95e-3, rel=0.01)
    assert r.e_pulse_kV_cm == pytest.approx(200.0)


def test_lossy_capacitor_train_does_not_switch():
    # A lossy dielectric gives P* = U^, dP = 0 (docs/methods.md, Scott 2000): here an ohmic leak
    # of 1e-6 S/m adds sigma E tau = 1e-6 * 2e7 V/m * ~1e-3 s = 2e-2 C/m^2 = 2 uC/cm^2 per pulse.
    r = analyse_pund(canon(pund_train(8, 10, 50, 200, eps_r_background=100, leak_sigma_S_m=1e-6,
                                      noise_uC_cm2=0.05, rng=np.random.default_rng(4), switching=False)))
    assert r.verdict == "no_switching"
    assert abs(r.p_switched_uC_cm2) < 0.1
    assert abs(r.p_switched_neg_uC_cm2) < 0.1
    assert r.p_star_uC_cm2 == pytest.approx(r.p_hat_uC_cm2, abs=0.1)
    assert r.p_star_uC_cm2 > 3.0  # large apparent charge, none of it switched
    assert "leaky" in codes(r)


def test_leaky_ferroelectric_still_gives_2pr():
    r = analyse_pund(canon(pund_train(8, 10, 50, 200, eps_r_background=100, leak_sigma_S_m=1e-6)))
    assert r.verdict == "switching"
    assert r.p_switched_uC_cm2 == pytest.approx(16.0, rel=0.01)
    assert "leaky" in codes(r)


def test_raw_charge_and_current_inputs():
    # By hand: area 0.01 cm^2, 1.5 um: Q = P * 0.01 uC, V = E * 0.15 V (200 kV/cm -> 30 V).
    raw = canon(pund_train(8, 10, 50, 200, eps_r_background=100, area_cm2=0.01, thickness_um=1.5))
    assert raw["V_V"].abs().max() == pytest.approx(30.0)
    r = analyse_pund(raw, area_cm2=0.01, thickness_um=1.5)
    assert r.source == "V/Q"
    assert r.p_switched_uC_cm2 == pytest.approx(16.0, rel=1e-4)
    assert r.pulse_amplitude == pytest.approx(30.0) and r.pulse_amplitude_unit == "V"
    assert r.e_pulse_kV_cm == pytest.approx(200.0)
    # current: I = dQ/dt (uC -> C), numerical derivative made here
    t = raw["t_s"].to_numpy()
    current = pd.DataFrame({"t_s": t, "V_V": raw["V_V"], "I_A": np.gradient(raw["Q_uC"].to_numpy() * 1e-6, t)})
    ri = analyse_pund(current, area_cm2=0.01)
    assert ri.source == "V/I/t"
    assert ri.p_switched_uC_cm2 == pytest.approx(16.0, rel=0.01)
    assert ri.e_pulse_kV_cm is None  # no thickness given
    with pytest.raises(AnalysisError) as err:
        analyse_pund(raw)
    assert err.value.field == "area"


def test_wrong_pulse_count_is_refused():
    frame = canon(pund_train(8, 10, 50, 200))
    four = frame[frame["t_s"] < 4 * 2e-3 + 0.5e-3]  # stop after the N pulse
    with pytest.raises(AnalysisError, match="found 4 pulse"):
        analyse_pund(four)
    doubled = pd.concat([frame, frame.assign(t_s=frame["t_s"] + frame["t_s"].iloc[-1] + 1e-6)], ignore_index=True)
    with pytest.raises(AnalysisError, match="found 10 pulse"):
        analyse_pund(doubled)


def test_wrong_polarity_order_is_refused():
    frame = canon(pund_train(8, 10, 50, 200))
    flipped = frame.copy()
    in_u = (frame["t_s"] > 3 * 2e-3 - 1e-3) & (frame["t_s"] < 3 * 2e-3)  # the U pulse (third)
    flipped.loc[in_u, "E_kV_cm"] = -flipped.loc[in_u, "E_kV_cm"]
    with pytest.raises(AnalysisError, match="polarities"):
        analyse_pund(flipped)


def test_missing_time_is_refused():
    frame = canon(pund_train(8, 10, 50, 200)).drop(columns="t_s")
    with pytest.raises(AnalysisError, match="time"):
        analyse_pund(frame)


def test_to_dict_is_json_with_contract_keys():
    r = analyse_pund(canon(pund_train(8, 10, 50, 200)))
    d = r.to_dict()
    for key in ("p_switched_uC_cm2", "p_switched_neg_uC_cm2", "p_nonswitched_uC_cm2", "p_star_uC_cm2",
                "p_hat_uC_cm2", "pr_pund_uC_cm2", "pulse_count", "pulse_width_s", "verdict", "flags"):  # fmt: skip
        assert key in d
    assert d["verdict"] in ("switching", "no_switching")
    json.dumps(d, allow_nan=False)
    assert [p.name for p in r.pulses] == ["preset", "P", "U", "N", "D"]
    assert pund.VERSION.startswith("pund/")
