"""Dielectric spectra: permittivity against frequency at several temperatures, one relaxation per isotherm.

Columns ``T (K)``, ``f (Hz)`` and ``eps_r ()``, ``eps_i ()``, or ``C (pF)`` and ``D ()`` with the electrode area
and sample thickness. Each isotherm is fitted with a Havriliak-Negami function (``# model: cole_cole`` or
``debye`` in the file fixes the shape; ``# conductivity: yes`` adds a dc-conductivity term), then tau(T) with
Arrhenius and, where curved, Vogel-Fulcher laws (:mod:`server.analysis.relaxation`, which cites the methods).
"""

from __future__ import annotations

from typing import Any, Sequence

from ..analysis import relaxation
from ..errors import AnalysisError
from ..plots.relaxation import spectrum_figure
from ..synth.relaxation import relaxation_spectra
from .base import Example, Kind, Need, ResultKey, example_csv, rng_for

# The example: a Cole-Cole relaxation (alpha 0.85) of the bowl's turning dipole, Ea 40 kJ/mol, tau0 1e-13 s,
# seven isotherms from 200 to 260 K, 0.1 Hz - 1 MHz, 2 % noise and 0.1 K drift.
_EX = {"tau0_s": 1e-13, "ea_kJ_mol": 40.0, "d_eps": 6.0, "eps_inf": 3.2, "alpha": 0.85,
       "temperatures_K": (200.0, 210.0, 220.0, 230.0, 240.0, 250.0, 260.0), "noise_rel": 0.02}
_YES = {"yes", "true", "1", "on"}


def _analyse(parsed, c, ctx):
    model = (c.extra.get("model") or "havriliak_negami").strip().lower().replace("-", "_")
    if model not in relaxation.MODELS:
        raise AnalysisError(f"'# model: {model}' is not one of {', '.join(relaxation.MODELS)}", field="model")
    conductivity = (c.extra.get("conductivity") or "no").strip().lower() in _YES
    return relaxation.analyse_spectrum(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um,
                                       model=model, conductivity=conductivity)


def _figure(parsed, result):
    return spectrum_figure(list(result.spectra or ()), result)


def _stats(ms: Sequence[Any]) -> dict[str, Any]:
    """The latest spectrum (by measurement id) with an Arrhenius Ea: Ea and its standard error in kcal/mol,
    the spectrum, and whether Ea is apparent (ln tau curved in 1/T, so the Arrhenius slope is a mean over
    the range; :func:`server.analysis.relaxation.fit_temperature`). The compound page sets it beside the
    solution Delta H++ of the NMR rates."""
    with_ea = [m for m in ms if m.results.get("ea_kcal_mol") is not None]
    if not with_ea:
        return {"relax_ea_kcal_mol": None, "relax_ea_err_kcal_mol": None, "relax_ea_apparent": None,
                "relax_ea_measurement_id": None}
    m = with_ea[-1]
    fit = m.results.get("arrhenius") or {}
    return {"relax_ea_kcal_mol": m.results["ea_kcal_mol"], "relax_ea_err_kcal_mol": fit.get("ea_err_kcal_mol"),
            "relax_ea_apparent": bool(fit.get("curved")) or "ea_kcal_mol" in (m.results.get("apparent") or ()),
            "relax_ea_measurement_id": m.id}


def _example() -> Example:
    e = _EX
    frame = relaxation_spectra(e["temperatures_K"], tau0_s=e["tau0_s"], ea_kJ_mol=e["ea_kJ_mol"], d_eps=e["d_eps"],
                               eps_inf=e["eps_inf"], alpha=e["alpha"], noise_rel=e["noise_rel"], drift_K=0.1,
                               rng=rng_for("dielectric_spectrum"))
    return Example("dielectric_spectrum.csv", example_csv(frame, {}, {"model": "cole_cole"}), dict(e))


KIND = Kind(
    name="dielectric_spectrum",
    label="Dielectric spectrum (permittivity versus frequency)",
    analysis=relaxation,
    analyse=_analyse,
    column_sets=(("T_K", "f_Hz", "eps_r", "eps_i"), ("T_K", "f_Hz", "C_F", "tan_delta")),
    needs=(Need(("area", "thickness"), "when capacitance is given"),),
    results=(
        ResultKey("model", "fitted function"),
        ResultKey("ea_kJ_mol", "Ea (Arrhenius)", "kJ/mol", 3),
        ResultKey("ea_kcal_mol", "Ea (Arrhenius)", "kcal/mol", 3),
        ResultKey("tau0_s", "τ₀ (Arrhenius)", "s", 2),
        ResultKey("isotherms", "isotherms"),
        ResultKey("arrhenius", "relaxation time against temperature"),
        # per-isotherm table
        ResultKey("t_K", "T", "K", 4),
        ResultKey("points", "points"),
        ResultKey("tau_s", "τ (HN)", "s", 3),
        ResultKey("tau_err_s", "τ error", "s", 2),
        ResultKey("tau_peak_s", "τ at the loss peak", "s", 3),
        ResultKey("d_eps", "Δε", "", 3),
        ResultKey("d_eps_err", "Δε error", "", 2),
        ResultKey("eps_inf", "ε∞", "", 3),
        ResultKey("eps_inf_err", "ε∞ error", "", 2),
        ResultKey("alpha", "α (width)", "", 3),
        ResultKey("alpha_err", "α error", "", 2),
        ResultKey("beta", "β (asymmetry)", "", 3),
        ResultKey("beta_err", "β error", "", 2),
        ResultKey("sigma_S_m", "σ dc", "S/m", 3),
        ResultKey("sigma_err_S_m", "σ dc error", "S/m", 2),
        ResultKey("rms_rel", "rms relative residual", "", 2),
        ResultKey("peak_in_window", "loss peak inside the window"),
        # tau(T)
        ResultKey("temperatures", "temperatures fitted"),
        ResultKey("ea_err_kJ_mol", "Ea error", "kJ/mol", 2),
        ResultKey("ea_err_kcal_mol", "Ea error", "kcal/mol", 2),
        ResultKey("ln_tau0_err", "ln τ₀ error", "", 2),
        ResultKey("curved", "curved in 1/T (F test)"),
        ResultKey("vf_b_K", "B (Vogel-Fulcher)", "K", 3),
        ResultKey("vf_b_err_K", "B error", "K", 2),
        ResultKey("t_vf_K", "T_VF", "K", 4),
        ResultKey("t_vf_err_K", "T_VF error", "K", 2),
        ResultKey("vf_tau0_s", "τ₀ (Vogel-Fulcher)", "s", 2),
        ResultKey("vf_ln_tau0_err", "ln τ₀ (Vogel-Fulcher) error", "", 2),
        ResultKey("f_test_p", "F test p", "", 2),
    ),
    summary_keys=("ea_kJ_mol", "tau0_s"),
    figure=_figure,
    stats=_stats,
    example=_example,
)
