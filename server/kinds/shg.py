"""Second-harmonic generation: signal over a named reference, one point or a temperature run.

The reference material is file metadata, ``# reference: alpha-quartz powder 45-63 um`` (required), and the
detection limit of the set-up may be given as ``# detection limit: 0.005`` (a ratio to the reference).
SHG shows the absence of an inversion centre, not polarity (see :mod:`server.analysis.shg`).
"""

from __future__ import annotations

import numpy as np

from ..analysis import shg
from ..errors import AnalysisError
from ..plots.shg import shg_figure
from ..synth.shg import shg_run
from .base import Evidence, Example, Kind, Need, ResultKey, example_csv, rng_for

# The example: a signal 0.8 times the reference's at 300 K vanishing at Tc = 432 K (the DSC example's
# order-disorder transition), heated in 10 K steps, against quartz powder.
_EX = {"tc_K": 432.0, "ratio_at_first": 0.8, "reference": "alpha-quartz powder, 45-63 um", "beta": 0.5}


def _extra(c, *names: str) -> tuple[str, str] | None:
    for key, value in c.extra.items():
        if " ".join(str(key).replace("_", " ").lower().split()) in names:
            return key, str(value).strip()
    return None


def _detection_limit(c) -> float | None:
    got = _extra(c, "detection limit", "limit of detection", "lod")
    if got is None:
        return None
    key, text = got
    try:
        value = float(text)
    except ValueError:
        raise AnalysisError(f"'# {key}: {text}' is not a number (a ratio to the reference, e.g. 0.005)",
                            field="detection limit") from None
    if not (0 < value < 1e3):
        raise AnalysisError(f"'# {key}: {text}' must be a positive ratio", field="detection limit")
    return value


def _analyse(parsed, c, ctx):
    ref = _extra(c, "reference", "reference material", "shg reference")
    return shg.analyse_shg(parsed.frame, reference=ref[1] if ref else None, temperature_K=c.temperature_K,
                           detection_limit=_detection_limit(c), sweep=c.sweep)


def _figure(parsed, result):
    return shg_figure(result)


def _example() -> Example:
    e = _EX
    frame = shg_run(np.arange(300.0, 471.0, 10.0), tc_K=e["tc_K"], ratio_at_first=e["ratio_at_first"],
                    rng=rng_for("shg"), beta=e["beta"])
    meta = {"reference": e["reference"], "detection limit": "0.01", "laser": "1064 nm, 10 ns pulses"}
    return Example("shg.csv", example_csv(frame, {"sweep": "heating"}, meta), dict(e))


def _evidence(results, temperature_K):  # noqa: ANN001
    """Every point's activity and where the signal vanishes, for the verdict's SHG criteria."""
    return Evidence(results.get("temperature_K") or temperature_K,
                    {"points": [{"T_K": p.get("T_K"), "active": p.get("active")} for p in results.get("points") or []],
                     "t_vanish_K": results.get("t_vanish_K"), "t_vanish_resolution_K": results.get("t_vanish_resolution_K")})


KIND = Kind(
    name="shg",
    label="Second-harmonic generation",
    analysis=shg,
    analyse=_analyse,
    column_sets=(("T_K", "shg_ratio"), ("shg_ratio",)),
    needs=(Need(("temperature",), "without a T column (and '# reference: <material>' in the file)"),
           Need(("sweep",), "(optional)")),
    results=(
        ResultKey("verdict", "SHG"),
        ResultKey("meaning", "what SHG shows"),
        ResultKey("reference_material", "reference"),
        ResultKey("detection_limit", "detection limit (ratio)", "", 2),
        ResultKey("detection_limit_source", "detection limit from"),
        ResultKey("active", "SHG active"),
        ResultKey("ratio_max", "largest ratio to the reference", "", 3),
        ResultKey("t_ratio_max_K", "at", "K", 4),
        ResultKey("active_from_K", "active from", "K", 4),
        ResultKey("active_to_K", "active to", "K", 4),
        ResultKey("t_vanish_K", "signal vanishes at", "K", 4),
        ResultKey("t_vanish_resolution_K", "± (half the step)", "K", 2),
        ResultKey("scan", "run"),
        ResultKey("temperature_K", "temperature", "K", 4),
        ResultKey("points", "points"),
        ResultKey("T_K", "T", "K", 4),
        ResultKey("ratio", "ratio to the reference", "", 3),
    ),
    summary_keys=("verdict", "ratio_max", "t_vanish_K"),
    figure=_figure,
    evidence=_evidence,
    example=_example,
)
