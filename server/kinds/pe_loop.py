"""P-E hysteresis loops: Pr, Ec and loop shape from a polarization-field record."""

from __future__ import annotations

from typing import Any, Sequence

from .. import merit
from ..analysis import hysteresis
from ..plots.ferro import loop_figure
from ..synth.ferro import miller_loop, raw_vq
from .base import (EXAMPLE_AREA_CM2, EXAMPLE_THICKNESS_UM, Example, Kind, Need, ResultKey,
                   evidence_at_measured_temperature, example_csv, rng_for)

# The example: a switching pellet below its Curie temperature, recorded by a charge-mode tracer (V, Q).
_EX = {"pr_uC_cm2": 0.79, "ps_uC_cm2": 0.87, "ec_kV_cm": 19.5, "emax_kV_cm": 87.9, "frequency_Hz": 100.0,
       "temperature_K": 324.0}


def _analyse(parsed, c, ctx):
    return hysteresis.analyse_loop(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um,
                                   frequency_Hz=c.frequency_Hz)


def _figure(parsed, result):
    return loop_figure(result)


def _stats(ms: Sequence[Any]) -> dict[str, Any]:
    """The strongest loop whose numbers are figures of merit (``server/merit.py``; the first of equals): its
    Pr, Ec and Ps, and the conditions it was measured at (temperature, field amplitude, the loop itself),
    because a maximum over temperatures, fields and specimens means little without them."""
    loops = [m for m in ms if merit.is_figure_of_merit(m)]
    best = max(loops, key=lambda m: m.results.get("pr_uC_cm2") or 0, default=None)
    r = best.results if best is not None else {}
    return {"pr_max_uC_cm2": r.get("pr_uC_cm2"), "ec_kV_cm": r.get("ec_kV_cm"), "ps_uC_cm2": r.get("ps_uC_cm2"),
            "pr_max_t_K": best.temperature_K if best is not None else None,
            "pr_max_emax_kV_cm": r.get("emax_kV_cm"),
            "pr_max_measurement_id": best.id if best is not None else None}


def _example() -> Example:
    rng = rng_for("pe_loop")
    e = _EX
    frame = miller_loop(e["ps_uC_cm2"], e["pr_uC_cm2"], e["ec_kV_cm"], e["emax_kV_cm"], cycles=2,
                        points_per_cycle=500, eps_r_background=6.0, noise_uC_cm2=0.004 * e["ps_uC_cm2"], rng=rng,
                        frequency_Hz=e["frequency_Hz"])
    conditions = {"area": f"{EXAMPLE_AREA_CM2} cm^2", "thickness": f"{EXAMPLE_THICKNESS_UM:g} um",
                  "temperature": f"{e['temperature_K']:g} K", "frequency": f"{e['frequency_Hz']:g} Hz"}
    raw = example_csv(raw_vq(frame, EXAMPLE_AREA_CM2, EXAMPLE_THICKNESS_UM), conditions,
                      {"drive": f"sine {e['frequency_Hz']:g} Hz, {e['emax_kV_cm']:g} kV/cm"})
    return Example("pe_loop.csv", raw, dict(e))


KIND = Kind(
    name="pe_loop",
    label="P-E hysteresis loop",
    analysis=hysteresis,
    analyse=_analyse,
    column_sets=(("E_kV_cm", "P_uC_cm2"), ("V_V", "Q_uC"), ("t_s", "V_V", "I_A")),
    needs=(Need(("area", "thickness"), "for raw V/Q or V/I data"), Need(("frequency",)), Need(("temperature",), "(for the verdict)")),
    results=(
        ResultKey("pr_uC_cm2", "Pr", "µC/cm²", 3),
        ResultKey("pr_pos_uC_cm2", "Pr+", "µC/cm²", 3),
        ResultKey("pr_neg_uC_cm2", "Pr−", "µC/cm²", 3),
        ResultKey("ec_kV_cm", "Ec", "kV/cm", 3),
        ResultKey("ec_pos_kV_cm", "Ec+", "kV/cm", 3),
        ResultKey("ec_neg_kV_cm", "Ec−", "kV/cm", 3),
        ResultKey("pmax_uC_cm2", "Pmax", "µC/cm²", 3),
        ResultKey("emax_kV_cm", "Emax", "kV/cm", 3),
        ResultKey("ps_uC_cm2", "Ps", "µC/cm²", 3),
        ResultKey("imprint_kV_cm", "imprint", "kV/cm", 3),
        ResultKey("loss_mJ_cm3", "loss per cycle", "mJ/cm³", 4),
        ResultKey("squareness", "squareness Pr/Ps", "", 3),
        ResultKey("p_offset_uC_cm2", "P offset removed", "µC/cm²", 3),
        ResultKey("apparent", "apparent values (not figures of merit)"),
        ResultKey("cycles_found", "cycles found"),
        ResultKey("cycle_used", "cycle used"),
        ResultKey("points", "points"),
        ResultKey("frequency_Hz", "frequency", "Hz"),
        ResultKey("source", "columns read"),
        ResultKey("shape", "loop shape"),
        ResultKey("ellipse_residual", "ellipse fit residual", "", 3),
        ResultKey("sin_delta_apparent", "apparent sin δ (ellipse)", "", 3),
        ResultKey("noise_uC_cm2", "noise", "µC/cm²", 3),
        ResultKey("remanence_ratio", "remanence ratio Pr/Pmax", "", 3),
        ResultKey("area_ratio", "loop area ratio", "", 3),
        ResultKey("high_field_slope_ratio_pos", "high-field slope ratio (+)", "", 3),
        ResultKey("high_field_slope_ratio_neg", "high-field slope ratio (−)", "", 3),
        ResultKey("tip_gap_ratio", "tip gap ratio", "", 3),
        ResultKey("tip_slope_rise_pos", "tip slope rise (+)", "", 3),
        ResultKey("tip_slope_rise_neg", "tip slope rise (−)", "", 3),
        ResultKey("open_gap_ratio", "open gap ratio", "", 3),
    ),
    summary_keys=("pr_uC_cm2", "ec_kV_cm"),
    figure=_figure,
    evidence=evidence_at_measured_temperature,
    stats=_stats,
    example=_example,
)
