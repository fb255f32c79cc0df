"""High-resolution mass spectra: calculated against found m/z of the claimed ion, and its isotope cluster.

The ion is given in the file as ``# ion: [M+Na]+`` and the tolerance, if not 5 ppm, as
``# tolerance: 3 ppm`` (file metadata, kept in ``Conditions.extra``).
"""

from __future__ import annotations

from ..analysis import hrms
from ..plots.identity import hrms_figure
from ..synth.identity import hrms_profile
from .base import Example, Kind, ResultKey, example_csv, rng_for

# The example: [M+Na]+ of the example bowl C27H24O6, profile at resolving power 60 000, 1.2 ppm high.
_EX = {"formula": "C27H24O6", "ion": "[M+Na]+", "error_ppm": 1.2, "resolving_power": 60000.0}


def _analyse(parsed, c, ctx):
    return hrms.analyse_hrms(parsed.frame, formula=ctx.formula, ion=c.extra.get("ion"),
                             tolerance=c.extra.get("tolerance"))


def _figure(parsed, result):
    return hrms_figure(result, parsed.frame)


def _example() -> Example:
    e = _EX
    frame = hrms_profile(e["formula"], e["ion"], rng=rng_for("hrms"), error_ppm=e["error_ppm"],
                         resolving_power=e["resolving_power"])
    return Example("hrms.csv", example_csv(frame, {"ion": e["ion"]}, {"source": "ESI, positive"}), dict(e))


KIND = Kind(
    name="hrms",
    label="High-resolution mass spectrum",
    analysis=hrms,
    analyse=_analyse,
    column_sets=(("mz", "intensity"),),
    results=(
        ResultKey("ion", "ion"),
        ResultKey("ion_formula", "ion formula"),
        ResultKey("calc_mz", "m/z calculated", "", 8),
        ResultKey("found_mz", "m/z found", "", 8),
        ResultKey("error_ppm", "mass error", "ppm", 2),
        ResultKey("tolerance_ppm", "tolerance", "ppm", 2),
        ResultKey("pass", "within tolerance"),
        ResultKey("isotope_score", "isotope cluster score (cosine)", "", 3),
        ResultKey("cluster", "isotope cluster"),
        ResultKey("calc_rel_pct", "calculated", "%", 3),
        ResultKey("found_rel_pct", "found", "%", 3),
        ResultKey("centroided", "peak list (centroided)"),
        ResultKey("mz_min", "lowest m/z in file", "", 6),
        ResultKey("mz_max", "highest m/z in file", "", 6),
    ),
    summary_keys=("ion", "calc_mz", "found_mz", "error_ppm", "pass"),
    figure=_figure,
    example=_example,
)
