"""DSC traces: transition peaks, enthalpies and entropies; melting is told apart from solid-solid transitions."""

from __future__ import annotations

import math
from typing import Any, Optional, Sequence

from scipy.constants import R as R_J_MOLK  # CODATA 2018

from ..analysis import dsc
from ..analysis.phases import MELTING_DS_J_MOLK
from ..plots.dsc import dsc_figure
from ..synth.dsc import dsc_trace
from .base import EXAMPLE_SMILES, Evidence, Example, Kind, Need, ResultKey, example_csv, rng_for

# A DSC peak above MELTING_DS_J_MOLK is taken as melting (rule and sources in server.analysis.phases).


# The example: 4.79 mg of the example bowl (C27H24O6, 444.48 g/mol), an order-disorder peak at
# 432 K with dS = R ln 2, and melting at 538 K with dS = 75 J/(mol K), heated at 10 K/min.
_MOLAR_MASS_G_MOL = 444.483
_EX = {"tc_K": 432.0, "ds_J_molK": R_J_MOLK * math.log(2.0), "tm_K": 538.0, "melting_ds_J_molK": 75.0,
       "mass_mg": 4.79, "rate_K_min": 10.0, "molar_mass_g_mol": _MOLAR_MASS_G_MOL, "smiles": EXAMPLE_SMILES}


def looks_like_melting(peak: dict[str, Any]) -> bool:
    """A peak whose entropy exceeds :data:`MELTING_DS_J_MOLK` is taken as melting."""
    ds = peak.get("ds_J_molK")
    return ds is not None and abs(ds) > MELTING_DS_J_MOLK


def _analyse(parsed, c, ctx):
    return dsc.analyse_dsc(parsed.frame, mass_mg=c.mass_mg, rate_K_min=c.rate_K_min, endo=c.endo,
                           molar_mass_g_mol=ctx.molar_mass_g_mol)


def _figure(parsed, result):
    return dsc_figure(result, parsed.frame)


def _evidence(results: dict[str, Any], temperature_K: Optional[float]) -> Evidence:
    """Every peak (melting included: it is a phase boundary) with its scan direction and entropy, and
    the temperature range of each heating or cooling segment, for the phase model."""
    peaks = [{"peak_K": p["peak_K"], "onset_K": p.get("onset_K"), "ds_J_molK": p.get("ds_J_molK"),
              "scan": p.get("segment_direction") or "heating", "endothermic": p.get("direction") != "exo"}
             for p in results.get("peaks") or [] if p.get("peak_K") is not None]
    segments = [{"t_from_K": s["t_start_K"], "t_to_K": s["t_end_K"], "scan": s.get("direction", "")}
                for s in results.get("segments") or [] if s.get("t_start_K") is not None]
    return Evidence(temperature_K, {"peaks": peaks, "segments": segments})


def _stats(ms: Sequence[Any]) -> dict[str, Any]:
    """The lowest-temperature peak that is not melting, over all live scans."""
    peaks = sorted((p for m in ms for p in m.results.get("peaks") or []
                    if p.get("peak_K") and not looks_like_melting(p)), key=lambda p: p["peak_K"])
    first: dict[str, Any] = peaks[0] if peaks else {}
    return {"dsc_t_K": first.get("peak_K"), "dsc_ds_J_molK": first.get("ds_J_molK"),
            "dsc_n_states": first.get("n_states")}


def _example() -> Example:
    e = _EX
    mm = e["molar_mass_g_mol"]
    transitions = [
        {"t_K": e["tc_K"], "dh_J_g": e["ds_J_molK"] * e["tc_K"] / mm, "width_K": 4.0, "kind": "gaussian"},
        {"t_K": e["tm_K"], "dh_J_g": e["melting_ds_J_molK"] * e["tm_K"] / mm, "width_K": 2.0, "kind": "melting"},
    ]
    frame = dsc_trace(transitions, t_start_K=240.0, t_end_K=e["tm_K"] + 25.0, rate_K_min=e["rate_K_min"],
                      mass_mg=e["mass_mg"], baseline_mW=0.1, baseline_slope=1e-3, noise_mW=0.002,
                      rng=rng_for("dsc"), sample_interval_s=1.0)
    conditions = {"mass": f"{e['mass_mg']} mg", "rate": f"{e['rate_K_min']:g} K/min", "endo": "up"}
    return Example("dsc.csv", example_csv(frame, conditions, {"purge": "N2 50 mL/min"}), dict(e))


KIND = Kind(
    name="dsc",
    label="DSC trace",
    analysis=dsc,
    analyse=_analyse,
    column_sets=(("T_K", "heat_flow_mW"), ("T_K", "heat_flow_W_g")),
    optional_columns=("t_s",),
    needs=(Need(("mass",), "for heat flow in mW"), Need(("rate",), "when there is no time column"),
           Need(("endo",), "(up or down)")),
    results=(
        ResultKey("peaks", "peaks"),
        ResultKey("segments", "scans"),
        ResultKey("rate_K_min", "rate", "K/min", 3),
        ResultKey("mass_mg", "mass", "mg", 3),
        ResultKey("endo", "endotherm direction"),
        ResultKey("molar_mass_g_mol", "molar mass", "g/mol", 5),
        ResultKey("segment", "scan"),
        ResultKey("segment_direction", "scan direction"),
        ResultKey("direction", "direction"),
        ResultKey("onset_K", "onset", "K", 4),
        ResultKey("peak_K", "peak", "K", 4),
        ResultKey("end_K", "end", "K", 4),
        ResultKey("start_K", "start", "K", 4),
        ResultKey("width_K", "width", "K", 3),
        ResultKey("dh_J_g", "ΔH", "J/g", 3),
        ResultKey("dh_kJ_mol", "ΔH", "kJ/mol", 3),
        ResultKey("ds_J_molK", "ΔS", "J/(mol K)", 3),
        ResultKey("n_states", "N in ΔS = R ln N (orientational states)", "", 3),
        ResultKey("index", "scan"),
        ResultKey("t_start_K", "from", "K", 4),
        ResultKey("t_end_K", "to", "K", 4),
        ResultKey("n_points", "points"),
        ResultKey("integrated_over", "integrated over"),
    ),
    summary_keys=("peaks",),
    figure=_figure,
    evidence=_evidence,
    stats=_stats,
    example=_example,
)
