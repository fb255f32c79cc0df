"""1D NMR spectra in JCAMP-DX: the spectrum on a reversed ppm axis, its peak list and integrated signals, and
the structure's expected number of environments beside the number found (a check, not proof).

The file's own records give the conditions: ``##.OBSERVE NUCLEUS=`` (nucleus), ``##.OBSERVE FREQUENCY=``
(spectrometer, MHz), ``##.SOLVENT NAME=`` (solvent), and the temperature from ``##$TE=`` (K, as
spectrometers write it) or ``##TEMPERATURE=`` (degrees Celsius, the unit of the core standard, McDonald and
Wilks 1988; recalled from memory). The form wins over the file, as for every kind.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from ..analysis import nmr_spectrum
from ..errors import IngestError
from ..ingest.jcamp import Spectrum, read_jcamp
from ..plots.identity import nmr_spectrum_figure
from ..synth.nmr_spectrum import Signal, jcamp_file, signals_for, spectrum
from .base import EXAMPLE_SMILES, Example, Kind, Need, ResultKey, rng_for

# The example: the example bowl C27H24O6 at 400.13 MHz in CDCl3, 298.15 K, with the solvent residual and TMS.
_EX = {"smiles": EXAMPLE_SMILES, "mhz": 400.13, "solvent": "CDCl3", "t_K": 298.15}


@dataclass(frozen=True)
class NmrFile:
    """A JCAMP-DX spectrum as read, with the conditions its records give."""

    spectrum: Spectrum
    metadata: dict[str, str] = field(default_factory=dict)


def _float_record(spec: Spectrum, *labels: str) -> Optional[float]:
    text = spec.record(*labels)
    if text is None:
        return None
    try:
        return float(text.split()[0].strip("<>"))
    except (ValueError, IndexError):
        raise IngestError(f"##{labels[0]}= {text[:30]!r} is not a number", field=labels[0]) from None


def read_nmr(raw: bytes, filename: Optional[str] = None) -> NmrFile:
    """The spectrum and its conditions (``nucleus``, ``spectrometer``, ``solvent``, ``temperature``)."""
    spec = read_jcamp(raw)
    meta: dict[str, str] = {}
    nucleus = spec.record(".OBSERVE NUCLEUS")
    if nucleus:
        meta["nucleus"] = nucleus.strip().lstrip("^")
    mhz = _float_record(spec, ".OBSERVE FREQUENCY")
    if mhz is not None:
        meta["spectrometer"] = f"{mhz:.10g} MHz"
    solvent = spec.record(".SOLVENT NAME", "$SOLVENT")
    if solvent:
        meta["solvent"] = solvent.strip().strip("<>")
    t_k = _float_record(spec, "$TE")
    if t_k is None:
        t_c = _float_record(spec, "TEMPERATURE")
        t_k = None if t_c is None else t_c + 273.15
    if t_k is not None:
        meta["temperature"] = f"{t_k:.2f} K"
    return NmrFile(spec, meta)


def _ppm(parsed: NmrFile, mhz: Optional[float]) -> np.ndarray:
    return nmr_spectrum.to_ppm(parsed.spectrum.x, parsed.spectrum.x_units, mhz)


def _analyse(parsed: NmrFile, c, ctx):
    return nmr_spectrum.analyse_nmr_spectrum(_ppm(parsed, c.spectrometer_MHz), parsed.spectrum.y, nucleus=c.nucleus,
                                             solvent=c.solvent, spectrometer_MHz=c.spectrometer_MHz,
                                             t_K=c.temperature_K, smiles=ctx.smiles)


#: What a person may set on a signal of the peak list, and the bounds of an edit.
EDIT_KEYS = ("from_ppm", "to_ppm", "shift_ppm", "n_H", "multiplicity", "j_Hz", "label", "assigned")
NOT_SAMPLE = ("", "solvent residual", "water", "TMS", "impurity")
MAX_SIGNALS, MAX_LABEL, MAX_J_HZ = 100, 80, 40.0
#: Couplings a multiplicity names (first-order: one J for n + 1 lines, two for a tree such as dd or dt, three
#: for ddd, ddt, ..., none for s and m).
J_COUNT = {"s": 0, "m": 0, **{name: 1 for name in nmr_spectrum.BINOMIAL_NAMES.values()},
           **{name: 2 for name, _, _ in nmr_spectrum.TREES}, **{t[0]: 3 for t in nmr_spectrum.TREES3}}


def _number(value, where: str, *, required: bool = False) -> Optional[float]:
    if value is None or (isinstance(value, str) and not value.strip()):
        if required:
            raise IngestError(f"{where} is required", field=where)
        return None
    try:
        out = float(str(value).strip().replace("−", "-")) if not isinstance(value, (int, float)) else float(value)
    except ValueError:
        raise IngestError(f"{where} = {str(value)[:30]!r} is not a number", field=where) from None
    if not np.isfinite(out):
        raise IngestError(f"{where} is not a finite number", field=where)
    return out


def _couplings(value, where: str) -> tuple[float, ...]:
    items = value if isinstance(value, (list, tuple)) else [v for v in str(value or "").replace(";", ",").split(",")]
    out = tuple(v for v in (_number(v, where) for v in items) if v is not None)
    if any(not 0 < j <= MAX_J_HZ for j in out):
        raise IngestError(f"{where}: a 1H-1H coupling is between 0 and {MAX_J_HZ:g} Hz", field=where)
    return tuple(sorted(out, reverse=True))


def _correct(parsed: NmrFile, result, edit) -> dict:
    """A person's peak list (``edit``: a list of signals, each with ``from_ppm`` and ``to_ppm`` and optionally
    ``shift_ppm``, ``n_H``, ``multiplicity``, ``j_Hz``, ``label``, ``assigned``) integrated over the stored
    spectrum as the automatic signals are: the replaced ``signals`` (downfield first), ``signals_found`` and
    ``environments_check``. A signal's extent (``high_ppm``, ``low_ppm``: the range an m is printed as) is
    that of the stored peak list's lines inside its region, the region itself when none lies there. A person's ``n_H`` stands; without one the integral is scaled to the formula."""
    if not isinstance(edit, (list, tuple)) or not edit:
        raise IngestError("the peak list needs at least one signal with a region (from and to, ppm)", field="signals")
    if len(edit) > MAX_SIGNALS:
        raise IngestError(f"at most {MAX_SIGNALS} signals", field="signals")
    rows = []
    for i, row in enumerate(edit):
        where = f"signals[{i}]"
        if not isinstance(row, dict) or set(row) - set(EDIT_KEYS):
            raise IngestError(f"{where}: a signal has only the keys {', '.join(EDIT_KEYS)}", field=where)
        lo, hi = sorted((_number(row.get("from_ppm"), f"{where}.from_ppm", required=True),
                         _number(row.get("to_ppm"), f"{where}.to_ppm", required=True)))
        if lo == hi or lo < result.ppm_min or hi > result.ppm_max:
            raise IngestError(f"{where}: the region {lo:g} to {hi:g} ppm must be a range inside the spectrum "
                              f"({result.ppm_min:.3f} to {result.ppm_max:.3f} ppm)", field=f"{where}.from_ppm")
        shift = _number(row.get("shift_ppm"), f"{where}.shift_ppm")
        if shift is not None and not lo <= shift <= hi:
            raise IngestError(f"{where}: δ {shift:g} ppm lies outside its region", field=f"{where}.shift_ppm")
        n_h = _number(row.get("n_H"), f"{where}.n_H")
        if n_h is not None and not 0 <= n_h <= 1000:
            raise IngestError(f"{where}.n_H: between 0 and 1000 atoms", field=f"{where}.n_H")
        mult = str(row.get("multiplicity") or "m").strip()
        if mult not in nmr_spectrum.MULTIPLICITIES:
            raise IngestError(f"{where}.multiplicity {mult[:20]!r}: one of {', '.join(nmr_spectrum.MULTIPLICITIES)}",
                              field=f"{where}.multiplicity")
        j = _couplings(row.get("j_Hz"), f"{where}.j_Hz")
        if j and len(j) != J_COUNT[mult]:
            raise IngestError(f"{where}: a {mult} has {J_COUNT[mult]} coupling constant(s), {len(j)} given",
                              field=f"{where}.j_Hz")
        label = str(row.get("label") or "").strip()
        assigned = str(row.get("assigned") or "").strip()
        if len(label) > MAX_LABEL:
            raise IngestError(f"{where}.label: at most {MAX_LABEL} characters", field=f"{where}.label")
        if assigned not in NOT_SAMPLE:
            raise IngestError(f"{where}.assigned: one of {', '.join(repr(a) for a in NOT_SAMPLE)}",
                              field=f"{where}.assigned")
        rows.append(dict(lo=lo, hi=hi, shift=shift if shift is not None else (lo + hi) / 2, n_H=n_h, mult=mult, j=j,
                         label=label, assigned=assigned, where=where, i=i))
    rows.sort(key=lambda r: r["lo"])
    for a, b in zip(rows, rows[1:]):
        if b["lo"] < a["hi"]:
            first, later = sorted((a, b), key=lambda r: r["i"])
            raise IngestError(f"{later['where']}: its region overlaps that of {first['where']}",
                              field=f"{later['where']}.from_ppm")
    areas = nmr_spectrum.integrate_regions(_ppm(parsed, result.spectrometer_MHz), parsed.spectrum.y,
                                           [(r["lo"], r["hi"]) for r in rows])
    total = sum(a for a, r in zip(areas, rows) if not r["assigned"])
    signals = []
    for r, area in sorted(zip(rows, areas), key=lambda p: -p[0]["shift"]):
        rel = area / total if not r["assigned"] and total > 0 else None
        scaled = rel * result.element_count if rel is not None and result.element_count else None
        inside = [p for p in result.peaks_ppm if r["lo"] <= p <= r["hi"]]  # the stored lines in the region
        signals.append({"shift_ppm": round(r["shift"], 4), "from_ppm": round(r["lo"], 4), "to_ppm": round(r["hi"], 4),
                        "lines": None, "integral_rel": rel,
                        "n_H": r["n_H"] if r["n_H"] is not None else scaled, "assigned": r["assigned"],
                        "multiplicity": r["mult"], "j_Hz": list(r["j"]), "pattern": "", "label": r["label"],
                        "high_ppm": round(max(inside), 4) if inside else round(r["hi"], 4),
                        "low_ppm": round(min(inside), 4) if inside else round(r["lo"], 4)})
    found = sum(1 for x in signals if not x["assigned"])
    expected = result.environments_expected
    check = None if expected is None else ("as expected" if found == expected else
                                           "fewer than expected" if found < expected else "more than expected")
    return {"signals": signals, "signals_found": found, "environments_check": check}


def _figure(parsed: NmrFile, result):
    return nmr_spectrum_figure(_ppm(parsed, result.spectrometer_MHz), parsed.spectrum.y, result)


def _example() -> Example:
    e = _EX
    signals = signals_for(e["smiles"]) + [Signal(7.26, 0.5), Signal(0.0, 1.0)]  # CHCl3 residual, TMS
    ppm, y = spectrum(signals, rng=rng_for("nmr_spectrum"), mhz=e["mhz"])
    raw = jcamp_file(ppm, y, mhz=e["mhz"], solvent=e["solvent"], t_K=e["t_K"], title="example bowl, 1H",
                     crlf=True, comments=["invented example spectrum: Lorentzian lines and noise"])
    return Example("nmr_spectrum.jdx", raw, {**e, "signals": [(s.shift_ppm, s.n_H) for s in signals[:-2]]})


KIND = Kind(
    name="nmr_spectrum",
    label="NMR spectrum (JCAMP-DX)",
    analysis=nmr_spectrum,
    analyse=_analyse,
    reader=read_nmr,
    columns_text=("a JCAMP-DX 1D spectrum (##XYDATA=(X++(Y..Y)) in AFFN, PAC, SQZ, DIF or DUP form; X in PPM or HZ "
                  "with ##.OBSERVE FREQUENCY=); nucleus, frequency, solvent and temperature from its records"),
    needs=(Need(("nucleus", "spectrometer", "solvent", "temperature"), "(optional; the file's records give them)"),),
    results=(
        ResultKey("nucleus", "nucleus"),
        ResultKey("solvent", "solvent"),
        ResultKey("spectrometer_MHz", "spectrometer frequency", "MHz", 6),
        ResultKey("t_K", "temperature", "K", 4),
        ResultKey("ppm_min", "lowest shift in file", "ppm", 3),
        ResultKey("ppm_max", "highest shift in file", "ppm", 3),
        ResultKey("points", "points"),
        ResultKey("noise_rel", "noise (of the tallest line)", "", 2),
        ResultKey("resolution_Hz", "digital resolution (per point)", "Hz", 2),
        ResultKey("j_err_Hz", "J uncertainty (spectrum: the resolution's; signal: line fit and resolution)", "Hz", 2),
        ResultKey("peaks_ppm", "peak list", "ppm", 4),
        ResultKey("signals", "signals"),
        ResultKey("shift_ppm", "δ", "ppm", 3),
        ResultKey("from_ppm", "region from", "ppm", 3),
        ResultKey("to_ppm", "region to", "ppm", 3),
        ResultKey("lines", "lines"),
        ResultKey("integral_rel", "integral (fraction)", "", 3),
        ResultKey("n_H", "integral (atoms, scaled to the formula)", "", 3),
        ResultKey("assigned", "not the sample"),
        ResultKey("multiplicity", "multiplicity"),
        ResultKey("j_Hz", "J", "Hz", 3),
        ResultKey("pattern", "why m"),
        ResultKey("high_ppm", "extent from (outermost line)", "ppm", 3),
        ResultKey("low_ppm", "extent to (outermost line)", "ppm", 3),
        ResultKey("label", "assignment"),
        ResultKey("signals_found", "signals found"),
        ResultKey("environments_expected", "environments expected (topological symmetry; a check, not proof)"),
        ResultKey("element_count", "atoms of the observed element"),
        ResultKey("environments_check", "found against expected"),
    ),
    summary_keys=("nucleus", "solvent", "signals_found", "environments_expected"),
    figure=_figure,
    correct=_correct,
    example=_example,
    content_type="chemical/x-jcamp-dx",
)
