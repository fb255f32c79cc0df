"""DSC traces: transition peaks, enthalpies and entropies; melting is told apart from solid-solid transitions."""

from __future__ import annotations

import math
from typing import Any, Mapping, Optional, Sequence

from scipy.constants import R as R_J_MOLK  # CODATA 2018

from ..analysis import dsc
from ..analysis.phases import MELTING_DS_J_MOLK, PAIR_MAX_HYSTERESIS_K, ThermalPeak, pair_dsc
from ..plots.dsc import dsc_figure
from ..precision import error_key
from ..synth.dsc import dsc_trace
from .base import EXAMPLE_SMILES, CompactTable, Evidence, Example, Kind, Line, Need, ResultKey, example_csv, rng_for

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


def _digits(key: str) -> int:
    rk = KIND.result_key(key)
    return rk.digits if rk is not None else 4


def _label(key: str) -> str:
    rk = KIND.result_key(key)
    return rk.label if rk is not None else key


def _difference_digits(dt_K: float, step_K: float = 0.1) -> int:
    """Significant digits that print a temperature difference to ``step_K``, the last digit of the peak
    temperatures it is taken from (four significant digits at a few hundred kelvin)."""
    if not math.isfinite(dt_K) or dt_K == 0:
        return 1
    return max(1, math.floor(math.log10(abs(dt_K))) - math.floor(math.log10(step_K)) + 1)


def _partner_lines(main: dict[str, Any], partner: list[dict[str, Any]], dh_key: str, dh_unit: str,
                   heating_main: bool, cooled: bool) -> tuple[Line, ...]:
    if not heating_main:
        return (Line("on cooling; no heating peak pairs with it"),)
    if not partner:
        return (Line(f"none within {PAIR_MAX_HYSTERESIS_K:g} K below") if cooled else Line("no cooling scan"),)
    lines: list[Line] = []
    for c in partner:
        scan = f" (scan {c.get('segment')})" if len(partner) > 1 else ""
        dt = main["peak_K"] - c["peak_K"]
        lines += [Line(f"peak{scan}", c["peak_K"], _digits("peak_K"), "K"),
                  Line(_label(dh_key), c.get(dh_key), _digits(dh_key), dh_unit, c.get(error_key(dh_key, c) or "")),
                  Line("hysteresis", dt, _difference_digits(dt), "K")]
    return tuple(lines)


def _transition_row(p: dict[str, Any], partner: list[dict[str, Any]], heating_main: bool, dh_key: str,
                    cooled: bool) -> tuple[tuple[Line, ...], ...]:
    dh_unit = KIND.result_key(dh_key).unit
    head = [Line("scan", p.get("segment")),
            Line(f"{p.get('segment_direction') or 'heating'}, {'exo' if p.get('direction') == 'exo' else 'endo'}thermic")]
    if looks_like_melting(p):
        head.append(Line("taken as melting"))
    dh = [Line("", p.get(dh_key), _digits(dh_key), err=p.get(error_key(dh_key, p) or ""))]
    if dh_key != "dh_J_g":
        dh.append(Line("", p.get("dh_J_g"), _digits("dh_J_g"), "J/g", p.get("dh_err_J_g")))
    ds = [Line("", p.get("ds_J_molK"), _digits("ds_J_molK"), err=p.get("ds_err_J_molK"))]
    if p.get("n_states") is not None:
        ds.append(Line("N", p["n_states"], _digits("n_states"), err=p.get("n_states_err")))
    t = [Line("onset", p.get("onset_K"), _digits("onset_K")), Line("peak", p["peak_K"], _digits("peak_K"))]
    return (tuple(head), tuple(t), tuple(dh), tuple(ds),
            _partner_lines(p, partner, dh_key, dh_unit, heating_main, cooled))


def _transitions(results: Mapping[str, Any]) -> Optional[CompactTable]:
    """Each heating peak with its paired cooling peak, paired by the phase model
    (:func:`server.analysis.phases.pair_dsc`: opposite heat, at most PAIR_MAX_HYSTERESIS_K below), so the page
    and the verdict's phase model never disagree; a cooling peak without a heating partner has a row of its own."""
    peaks = [p for p in results.get("peaks") or [] if p.get("peak_K") is not None]
    if not peaks:
        return None
    thermal = [ThermalPeak(measurement_id=0, t_peak_K=p["peak_K"], scan=p.get("segment_direction") or "heating",
                           endothermic=p.get("direction") != "exo", onset_K=p.get("onset_K"),
                           ds_J_molK=p.get("ds_J_molK")) for p in peaks]
    peak_of = {id(t): p for t, p in zip(thermal, peaks)}
    dh_key = "dh_kJ_mol" if any(p.get("dh_kJ_mol") is not None for p in peaks) else "dh_J_g"
    cooled = any(s.get("direction") == "cooling" for s in results.get("segments") or [])
    rows: list[tuple[dict[str, Any], list[dict[str, Any]], bool]] = []
    for heat, cool in pair_dsc(thermal):
        partner = [peak_of[id(t)] for t in cool or []]
        rows += [(peak_of[id(t)], partner, True) for t in heat] if heat else [(c, [], False) for c in partner]
    rows.sort(key=lambda r: (r[0]["peak_K"], not r[2]))
    columns = (("Transition", ""), ("T", "K"), (_label(dh_key), KIND.result_key(dh_key).unit),
               (_label("ds_J_molK"), KIND.result_key("ds_J_molK").unit), ("Paired cooling peak", ""))
    return CompactTable(
        replaces="peaks", caption="Transitions: each heating peak with its cooling partner", columns=columns,
        rows=tuple(_transition_row(p, partner, heating, dh_key, cooled) for p, partner, heating in rows),
        note=(f"Paired as the phase model pairs them: a cooling peak of the opposite heat at most "
              f"{PAIR_MAX_HYSTERESIS_K:g} K below its heating peak; hysteresis is the heating minus the cooling "
              f"peak temperature. ΔH and ΔS are given ± their standard uncertainty: the spread over baseline "
              f"choices, the noise of the trace and its sampling; calibration and sample mass not included."))


def _scans(results: Mapping[str, Any]) -> Optional[CompactTable]:
    segments = results.get("segments") or []
    if not segments:
        return None
    rows = tuple(((Line("scan", s.get("index")), Line(s.get("direction") or "")),
                  (Line("from", s.get("t_start_K"), _digits("t_start_K")), Line("to", s.get("t_end_K"), _digits("t_end_K"))),
                  (Line("", s.get("rate_K_min"), _digits("rate_K_min")),),
                  (Line("", s.get("n_points")), Line("integrated over", s.get("integrated_over"))))
                 for s in segments)
    return CompactTable(replaces="segments", caption="Scans", rows=rows,
                        columns=(("Scan", ""), ("T", "K"), ("rate", "K/min"), ("points", "")))


def _compact(results: Mapping[str, Any]) -> tuple[CompactTable, ...]:
    return tuple(t for t in (_transitions(results), _scans(results)) if t is not None)


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
        ResultKey("dh_err_J_g", "ΔH uncertainty", "J/g", 2),
        ResultKey("dh_err_kJ_mol", "ΔH uncertainty", "kJ/mol", 2),
        ResultKey("ds_err_J_molK", "ΔS uncertainty", "J/(mol K)", 2),
        ResultKey("n_states_err", "N uncertainty", "", 2),
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
    compact=_compact,
)
