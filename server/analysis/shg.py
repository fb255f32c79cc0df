"""Second-harmonic generation: is a phase non-centrosymmetric, and where does the signal vanish?

A second-harmonic signal needs a non-zero second-order susceptibility chi(2), which an inversion centre
forbids: SHG shows the absence of an inversion centre, not polarity. Of the 21 non-centrosymmetric crystal
classes only 10 are polar (International Tables for Crystallography Vol. A, section 3.2), so an SHG-active
phase is *consistent with* a polar phase (a necessary condition) and an SHG-silent phase is evidence *against*
one (below the detection limit: a weak chi(2) or phase matching can hide a small signal). Powder signals are
given relative to a reference powder measured under the same beam (Kurtz and Perry, J. Appl. Phys. 39, 3798
(1968)); the reference material is named by the user.

A temperature run is read point by point: a point is active when its ratio exceeds the detection limit. Where
the run passes from active to silent the signal vanishes, placed midway between the two points (the
resolution is half the step); that temperature, set beside Pr -> 0 and the permittivity peak, is what the
phase identification compares.

References
----------
R. W. Boyd, *Nonlinear Optics*, 3rd ed., Academic Press 2008, ch. 1.5 (chi(2) vanishes with inversion symmetry).
S. K. Kurtz and T. T. Perry, J. Appl. Phys. 39, 3798 (1968) (the powder SHG method against a reference).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Optional

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from .results import Flag, Result

METHOD = (
    "Powder second-harmonic signal against a named reference (Kurtz and Perry, J. Appl. Phys. 1968); "
    "active above the detection limit means no inversion centre (necessary, not sufficient, for polarity)"
)
VERSION = "shg/1.0"

#: Ratio to the reference below which a point is silent when the file gives no detection limit (our default:
#: one hundredth of the reference signal; state the limit of your set-up with '# detection limit: 0.005').
DEFAULT_DETECTION_LIMIT = 0.01

MEANING = ("SHG shows the absence of an inversion centre, not polarity: an active phase is consistent with a "
           "polar phase (a necessary condition), a silent phase is evidence against one.")


@dataclass(frozen=True)
class ShgResult(Result):
    """Activity of each point, the strongest ratio and the temperature where the signal vanishes."""

    reference_material: str
    detection_limit: float
    detection_limit_source: str
    points: tuple[dict[str, Any], ...]
    active: bool
    ratio_max: float
    t_ratio_max_K: Optional[float]
    active_from_K: Optional[float]
    active_to_K: Optional[float]
    t_vanish_K: Optional[float]
    t_vanish_resolution_K: Optional[float]
    scan: str
    temperature_K: Optional[float]
    verdict: str
    meaning: str
    flags: tuple[Flag, ...] = ()


def analyse_shg(frame: pd.DataFrame, *, reference: Optional[str], temperature_K: Optional[float] = None,
                detection_limit: Optional[float] = None, sweep: Optional[str] = None) -> ShgResult:
    """Read an SHG point or temperature run.

    Parameters
    ----------
    frame : DataFrame
        ``shg_ratio`` (signal over the reference's), and ``T_K`` for a temperature run.
    reference : str
        The reference material as the user names it (e.g. "alpha-quartz powder, 45-63 um").
    temperature_K : float, optional
        The temperature of a file without a T column.
    detection_limit : float, optional
        Ratio below which a point is silent (default :data:`DEFAULT_DETECTION_LIMIT`, flagged).
    sweep : str, optional
        "heating" or "cooling"; else from the order of the temperatures.

    Returns
    -------
    ShgResult
        ``verdict``: ``active``, ``silent``, or ``vanishes`` (active, then silent along the run).

    Raises
    ------
    AnalysisError
        No reference named, no temperature, a negative ratio.
    """
    if not reference or not reference.strip():
        raise AnalysisError("name the reference material, e.g. '# reference: alpha-quartz powder 45-63 um'",
                            field="reference")
    if "shg_ratio" not in frame:
        raise AnalysisError("the file has no SHG ratio column", field="file")
    ratio = frame["shg_ratio"].to_numpy(float)
    if "T_K" in frame:
        t = frame["T_K"].to_numpy(float)
    elif temperature_K is not None:
        t = np.full(len(ratio), float(temperature_K))
    else:
        raise AnalysisError("give the temperature ('# temperature: 295 K') or a T column", field="temperature")
    if len(ratio) == 0:
        raise AnalysisError("the file has no data rows", field="file")
    bad = np.flatnonzero(ratio < 0)
    if bad.size:
        raise AnalysisError(f"row {bad[0] + 1}: an intensity ratio cannot be negative ({ratio[bad[0]]:g})",
                            column="SHG/ref")
    flags: list[Flag] = []
    if detection_limit is None:
        limit, source = DEFAULT_DETECTION_LIMIT, "default"
        flags.append(Flag("default_detection_limit", f"no detection limit given; points below {limit:g} of the "
                                                     "reference are read as silent (our default)"))
    else:
        limit, source = float(detection_limit), "file"
    if sweep in ("heating", "cooling"):
        scan = sweep
    elif len(t) > 1:
        scan = "heating" if t[-1] >= t[0] else "cooling"
    else:
        scan = ""
    order = np.argsort(t, kind="stable")
    if scan == "cooling":
        order = order[::-1]
    t_run, r_run = t[order], ratio[order]
    act = r_run > limit
    points = tuple({"T_K": float(a), "ratio": float(b), "active": bool(c)} for a, b, c in zip(t_run, r_run, act))
    t_vanish = res = None
    if len(t_run) > 1 and act.any() and not act.all():
        # high-temperature side silent, low side active: the signal vanishes on heating at the boundary
        hot_first = scan == "cooling"
        ts, acts = (t_run[::-1], act[::-1]) if hot_first else (t_run, act)
        for i in range(len(ts) - 1):
            if acts[i] and not acts[i + 1] and acts[: i + 1].all() and not acts[i + 1:].any():
                t_vanish = 0.5 * (ts[i] + ts[i + 1])
                res = 0.5 * abs(ts[i + 1] - ts[i])
        if t_vanish is None:
            flags.append(Flag("activity_not_monotonic", "the signal does not go once from active (colder) to "
                                                        "silent (hotter) along the run; no temperature where it "
                                                        "vanishes is reported"))
    active_t = t_run[act]
    i_max = int(np.argmax(ratio))
    verdict = "vanishes" if t_vanish is not None else ("active" if act.any() else "silent")
    return ShgResult(
        reference_material=reference.strip(), detection_limit=limit, detection_limit_source=source, points=points,
        active=bool(act.any()), ratio_max=float(ratio[i_max]), t_ratio_max_K=float(t[i_max]),
        active_from_K=float(active_t.min()) if active_t.size else None,
        active_to_K=float(active_t.max()) if active_t.size else None,
        t_vanish_K=t_vanish, t_vanish_resolution_K=res, scan=scan,
        temperature_K=float(temperature_K) if temperature_K is not None else (float(t[0]) if len(t) == 1 else None),
        verdict=verdict, meaning=MEANING, flags=tuple(flags))
