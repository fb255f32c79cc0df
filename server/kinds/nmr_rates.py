"""Variable-temperature NMR rate tables: an Eyring fit gives the inversion barrier."""

from __future__ import annotations

import numpy as np

from ..analysis import kinetics
from ..analysis.constants import CAL_J
from ..plots.kinetics import eyring_figure
from ..synth.nmr import rate_table
from .base import Example, Kind, Need, ResultKey, example_csv, rng_for

# The example: dH = 78.5 kJ/mol and dS = -6 J/(mol K) (dG(298 K) about 19.2 kcal/mol), eight rates
# across the line-shape window from 364 K to 439 K, 5 % relative noise.
_EX = {"dh_kJ_mol": 78.5, "ds_J_molK": -6.0, "t_min_K": 364.0, "t_max_K": 439.0}
_EX["dg298_kcal_mol"] = (_EX["dh_kJ_mol"] - 298.15 * _EX["ds_J_molK"] / 1000.0) / CAL_J


def _analyse(parsed, c, ctx):
    return kinetics.analyse_rate_table(parsed.frame, first_data_line=parsed.first_data_line,
                                       source_columns=parsed.source_columns)


def _figure(parsed, result):
    return eyring_figure(result)


def _derive(session, *, compound, batch, measurement, actor):
    """The BarrierEstimate row of this table (services.barriers keeps barrier rows)."""
    from ..services.barriers import sync_rate_table_barrier  # services import the kinds

    sync_rate_table_barrier(session, compound=compound, measurement=measurement, actor=actor)


def _example() -> Example:
    e = _EX
    temps = np.round(np.linspace(e["t_min_K"], e["t_max_K"], 8), 1)
    frame = rate_table(e["dh_kJ_mol"], e["ds_J_molK"], temps, noise_rel=0.05, rng=rng_for("nmr_rates"))
    raw = example_csv(frame, {}, {"solvent": "toluene-d8", "method": "line-shape fit"})
    return Example("nmr_rates.csv", raw, dict(e))


KIND = Kind(
    name="nmr_rates",
    label="Variable-temperature NMR rates",
    analysis=kinetics,
    analyse=_analyse,
    column_sets=(("T_K", "k_per_s"),),
    needs=(Need(("spectrometer", "nucleus", "solvent"), "(optional; stored with the barrier)"),),
    results=(
        ResultKey("dg298_kcal_mol", "ΔG‡(298 K)", "kcal/mol", 3),
        ResultKey("dg298_err_kcal_mol", "ΔG‡(298 K) error", "kcal/mol", 2),
        ResultKey("dh_kcal_mol", "ΔH‡", "kcal/mol", 3),
        ResultKey("dh_err_kcal_mol", "ΔH‡ error", "kcal/mol", 2),
        ResultKey("ds_cal_molK", "ΔS‡", "cal/(mol K)", 3),
        ResultKey("ds_err_cal_molK", "ΔS‡ error", "cal/(mol K)", 2),
        ResultKey("ea_kJ_mol", "Ea (Arrhenius)", "kJ/mol", 3),
        ResultKey("ea_err_kJ_mol", "Ea error", "kJ/mol", 2),
        ResultKey("ln_a", "ln A", "", 4),
        ResultKey("ln_a_err", "ln A error", "", 2),
        ResultKey("r2", "fit R²", "", 4),
        ResultKey("points", "points"),
        ResultKey("t_min_K", "from", "K", 4),
        ResultKey("t_max_K", "to", "K", 4),
        ResultKey("weighted", "weighted fit"),
        ResultKey("kappa", "transmission coefficient κ", "", 2),
    ),
    summary_keys=("dg298_kcal_mol",),
    figure=_figure,
    derive=_derive,
    example=_example,
)
