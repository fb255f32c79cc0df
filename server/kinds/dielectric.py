"""Permittivity versus temperature at fixed frequencies: the maximum, its dispersion, loss and a Curie-Weiss fit.

Not dielectric spectroscopy (permittivity against frequency, fitted by server/analysis/relaxation.py)."""

from __future__ import annotations

from typing import Any, Optional, Sequence

from ..analysis import dielectric
from ..plots.dielectric import permittivity_figure
from ..synth.dielectric import curie_weiss_scan
from .base import Evidence, Example, Kind, Need, ResultKey, example_csv, rng_for

# The example: an order-disorder transition at 432 K (Curie constant about 1.1e3 K), three frequencies.
_EX = {"tc_K": 432.0, "curie_constant_K": 1100.0, "eps_inf": 4.0, "area_cm2": 0.2, "thickness_um": 300.0}


def _analyse(parsed, c, ctx):
    return dielectric.analyse_dielectric(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um,
                                         frequency_Hz=c.frequency_Hz)


def _figure(parsed, result):
    return permittivity_figure(result)


def _evidence(results: dict[str, Any], temperature_K: Optional[float]) -> Evidence:
    """The maximum, whether it moves with frequency (``dispersion_K`` above the analysis threshold shows
    as the ``frequency_dispersion`` flag, read by the verdict) and the scanned range."""
    details: dict[str, Any] = {"t_min_K": results.get("t_min_K"), "t_max_K": results.get("t_max_K")}
    if results.get("t_peak_K") is not None:
        details["t_peak_K"] = results["t_peak_K"]
    return Evidence(temperature_K, details)


def _stats(ms: Sequence[Any]) -> dict[str, Any]:
    """The latest scan with a peak (by measurement id): its peak and Curie constant."""
    with_peak = [m.results for m in ms if m.results.get("t_peak_K") is not None]
    last = with_peak[-1] if with_peak else {}
    return {"t_peak_K": last.get("t_peak_K"), "eps_peak": last.get("eps_peak"),
            "curie_constant_K": last.get("curie_constant_K")}


def _example() -> Example:
    e = _EX
    frame = curie_weiss_scan(e["curie_constant_K"], e["tc_K"], e["tc_K"], e["eps_inf"], t_min_K=e["tc_K"] - 60,
                             t_max_K=e["tc_K"] + 60, step_K=1.0, frequencies_Hz=(1e3, 1e4, 1e5),
                             area_cm2=e["area_cm2"], thickness_um=e["thickness_um"], noise_rel=0.003,
                             rng=rng_for("dielectric"), tan_delta=0.012, rounding_K=4.0)
    conditions = {"area": f"{e['area_cm2']} cm^2", "thickness": f"{e['thickness_um']:g} um"}
    return Example("dielectric.csv", example_csv(frame, conditions), dict(e))


KIND = Kind(
    name="dielectric",
    label="Permittivity versus temperature",
    analysis=dielectric,
    analyse=_analyse,
    column_sets=(("T_K", "f_Hz", "C_F", "tan_delta"), ("T_K", "f_Hz", "eps_r", "eps_i")),
    needs=(Need(("area", "thickness"), "when capacitance is given"),),
    results=(
        ResultKey("t_peak_K", "T peak", "K", 4),
        ResultKey("eps_peak", "ε′ peak", "", 4),
        ResultKey("dispersion_K", "peak shift over frequency", "K", 3),
        ResultKey("curie_constant_K", "Curie constant C", "K", 4),
        ResultKey("curie_constant_err_K", "Curie constant error", "K", 2),
        ResultKey("t0_K", "T0 (Curie-Weiss)", "K", 4),
        ResultKey("t0_err_K", "T0 error", "K", 2),
        ResultKey("eps_inf", "ε∞", "", 3),
        ResultKey("eps_inf_err", "ε∞ error", "", 2),
        ResultKey("fit_r2", "fit R²", "", 4),
        ResultKey("fit_t_min_K", "fit from", "K", 4),
        ResultKey("fit_t_max_K", "fit to", "K", 4),
        ResultKey("fit_points", "fit points"),
        ResultKey("landau_slope_ratio", "Landau slope ratio", "", 3),
        ResultKey("transition_hint", "transition hint (Curie constant)"),
        ResultKey("points", "points"),
        ResultKey("peaks", "peaks"),
        ResultKey("frequencies", "frequencies"),
        ResultKey("f_Hz", "f", "Hz", 4),
        ResultKey("at_edge", "at the edge of the range"),
        ResultKey("n_points", "points"),
        ResultKey("tan_delta_peak", "tan δ at the peak", "", 3),
        ResultKey("cw_frequency_Hz", "Curie-Weiss fitted at", "Hz", 4),
        ResultKey("vf_ea_kJ_mol", "Ea (Vogel-Fulcher)", "kJ/mol", 3),
        ResultKey("vf_ea_err_kJ_mol", "Ea (Vogel-Fulcher) error", "kJ/mol", 2),
        ResultKey("vf_t_K", "T_VF", "K", 4),
        ResultKey("vf_t_err_K", "T_VF error", "K", 2),
        ResultKey("vf_f0_Hz", "f₀ (Vogel-Fulcher)", "Hz", 3),
        ResultKey("vf_log10_f0_err", "log₁₀ f₀ error", "", 2),
        ResultKey("t_min_K", "scanned from", "K", 4),
        ResultKey("t_max_K", "scanned to", "K", 4),
    ),
    summary_keys=("t_peak_K", "curie_constant_K"),
    figure=_figure,
    evidence=_evidence,
    stats=_stats,
    example=_example,
)
