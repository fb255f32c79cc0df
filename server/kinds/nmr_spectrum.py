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
        ResultKey("j_err_Hz", "J uncertainty (from the resolution)", "Hz", 2),
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
        ResultKey("signals_found", "signals found"),
        ResultKey("environments_expected", "environments expected (topological symmetry; a check, not proof)"),
        ResultKey("element_count", "atoms of the observed element"),
        ResultKey("environments_check", "found against expected"),
    ),
    summary_keys=("nucleus", "solvent", "signals_found", "environments_expected"),
    figure=_figure,
    example=_example,
    content_type="chemical/x-jcamp-dx",
)
