"""PUND pulse trains: switched and non-switched polarization from five pulses."""

from __future__ import annotations

from ..analysis import pund
from ..plots.ferro import pund_figure
from ..synth.ferro import pund_train
from .base import (EXAMPLE_AREA_CM2, EXAMPLE_THICKNESS_UM, Example, Kind, Need, ResultKey,
                   evidence_at_measured_temperature, example_csv, rng_for)

_EX = {"pr_uC_cm2": 0.71, "ps_uC_cm2": 0.79, "ec_kV_cm": 19.0, "e_pulse_kV_cm": 87.9, "temperature_K": 346.0}


def _analyse(parsed, c, ctx):
    return pund.analyse_pund(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um)


def _figure(parsed, result):
    return pund_figure(parsed.frame, result)


def _example() -> Example:
    e = _EX
    frame = pund_train(e["pr_uC_cm2"], e["ps_uC_cm2"], e["ec_kV_cm"], e["e_pulse_kV_cm"], eps_r_background=6.0,
                       pulse_width_s=1e-3, delay_s=1e-3, points=3000, rng=rng_for("pund"),
                       noise_uC_cm2=0.004 * e["pr_uC_cm2"], area_cm2=EXAMPLE_AREA_CM2,
                       thickness_um=EXAMPLE_THICKNESS_UM)
    conditions = {"area": f"{EXAMPLE_AREA_CM2} cm^2", "thickness": f"{EXAMPLE_THICKNESS_UM:g} um",
                  "temperature": f"{e['temperature_K']:g} K"}
    return Example("pund.csv", example_csv(frame, conditions, {"mode": "PUND"}), dict(e))


KIND = Kind(
    name="pund",
    label="PUND pulse train",
    analysis=pund,
    analyse=_analyse,
    column_sets=(("t_s", "V_V", "Q_uC"), ("t_s", "V_V", "I_A"), ("t_s", "E_kV_cm", "P_uC_cm2")),
    needs=(Need(("area", "thickness"), "for raw V/Q or V/I data"), Need(("temperature",), "(for the verdict)")),
    results=(
        ResultKey("p_switched_uC_cm2", "ΔP = P* − P^ (switched)", "µC/cm²", 3),
        ResultKey("p_switched_neg_uC_cm2", "ΔP = N* − N^ (switched, negative)", "µC/cm²", 3),
        ResultKey("p_nonswitched_uC_cm2", "P^ (non-switched)", "µC/cm²", 3),
        ResultKey("p_star_uC_cm2", "P*", "µC/cm²", 3),
        ResultKey("p_hat_uC_cm2", "P^ (U pulse)", "µC/cm²", 3),
        ResultKey("n_star_uC_cm2", "N*", "µC/cm²", 3),
        ResultKey("d_hat_uC_cm2", "N^ (D pulse)", "µC/cm²", 3),
        ResultKey("pr_pund_uC_cm2", "Pr (PUND)", "µC/cm²", 3),
        ResultKey("dpr_remanent_uC_cm2", "remanent ΔP", "µC/cm²", 3),
        ResultKey("pulse_count", "pulses"),
        ResultKey("pulse_width_s", "pulse width", "s", 3),
        ResultKey("pulse_amplitude", "pulse amplitude", "", 4),
        ResultKey("pulse_amplitude_unit", "pulse amplitude unit"),
        ResultKey("e_pulse_kV_cm", "pulse field", "kV/cm", 3),
        ResultKey("noise_uC_cm2", "noise", "µC/cm²", 3),
        ResultKey("source", "columns read"),
    ),
    summary_keys=("p_switched_uC_cm2",),
    figure=_figure,
    evidence=evidence_at_measured_temperature,
    example=_example,
)
