"""SAXS/WAXS curves of mesophases: columnar (or lamellar) lattice, its parameters, pi-stacking and chain halo.

Columns ``q (1/nm)`` and ``I ()``, or ``2theta (deg)`` and ``I ()`` with ``# wavelength:`` in the file (a number
with a unit or a named anode line, as for ``pxrd``).
"""

from __future__ import annotations

from ..analysis import saxs
from ..plots.saxs import saxs_figure
from ..synth.saxs import mesophase_curve
from .base import Evidence, Example, Kind, Need, ResultKey, example_csv, rng_for
from .pxrd import wavelength_A

# The example: a hexagonal columnar mesophase, a = 3.2 nm, pi-stacking at 3.5 A and the chain halo at 4.5 A,
# measured at 350 K.
_EX = {"lattice": "hexagonal", "a_nm": 3.2, "stacking_A": 3.5, "halo_A": 4.5, "temperature_K": 350.0}


def _analyse(parsed, c, ctx):
    wl = wavelength_A(c) if "two_theta_deg" in parsed.frame else None
    return saxs.analyse_saxs(parsed.frame, wavelength_A=wl, temperature_K=c.temperature_K)


def _figure(parsed, result):
    return saxs_figure(result, result.q, result.y)


def _example() -> Example:
    e = _EX
    frame = mesophase_curve(e["lattice"], e["a_nm"], rng=rng_for("saxs"), stacking_A=e["stacking_A"],
                            halo_A=e["halo_A"])
    return Example("saxs.csv", example_csv(frame, {"temperature": f"{e['temperature_K']:g} K"},
                                           {"geometry": "transmission, 1.5 mm capillary"}), dict(e))


def _evidence(results, temperature_K):  # noqa: ANN001
    """The lattice at the measurement's temperature: a mesophase for the verdict (:mod:`server.analysis.verdict_phase_id`)."""
    return Evidence(results.get("temperature_K") or temperature_K,
                    {k: results.get(k) for k in ("lattice", "a_nm", "b_nm", "stacking_A")})


KIND = Kind(
    name="saxs",
    label="Small- and wide-angle X-ray scattering",
    analysis=saxs,
    analyse=_analyse,
    column_sets=(("q_per_nm", "intensity"), ("two_theta_deg", "intensity")),
    needs=(Need(("temperature",), "(and '# wavelength:' in the file for 2theta data)"),),
    results=(
        ResultKey("verdict", "mesophase"),
        ResultKey("lattice", "lattice"),
        ResultKey("a_nm", "a", "nm", 3),
        ResultKey("b_nm", "b", "nm", 3),
        ResultKey("gamma_deg", "γ", "deg", 3),
        ResultKey("column_area_nm2", "area per column", "nm²", 3),
        ResultKey("rms_residual_pct", "rms residual of the indexing (d)", "%", 2),
        ResultKey("stacking_A", "π-stacking distance", "Å", 3),
        ResultKey("chain_halo_A", "alkyl-chain halo", "Å", 2),
        ResultKey("temperature_K", "temperature", "K", 4),
        ResultKey("q_min_per_nm", "q from", "1/nm", 3),
        ResultKey("q_max_per_nm", "q to", "1/nm", 3),
        ResultKey("indexed_peaks", "indexed peaks"),
        ResultKey("peaks", "small-angle peaks"),
        ResultKey("q_per_nm", "q", "1/nm", 4),
        ResultKey("d_nm", "d", "nm", 4),
        ResultKey("d_calc_nm", "d calculated", "nm", 4),
        ResultKey("residual_pct", "residual", "%", 2),
        ResultKey("hk", "hk"),
        ResultKey("intensity", "intensity", "", 3),
    ),
    summary_keys=("verdict", "a_nm", "stacking_A"),
    figure=_figure,
    evidence=_evidence,
    example=_example,
)
