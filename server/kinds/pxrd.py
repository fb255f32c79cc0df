"""Powder X-ray diffraction patterns: peaks, d-spacings, and the match with every CIF of the compound.

The wavelength is file metadata, ``# wavelength: 1.5406 angstrom`` or a named line
(``# wavelength: Cu Ka1``, :data:`server.analysis.pxrd.ANODE_LINES_A`); the peak width of the
simulation may be set with ``# peak width: 0.08 deg`` (FWHM in 2theta). Both are kept in
``Conditions.extra``. The pattern is compared with every live crystal structure registered for
the compound (``Context.structures``); a pattern stored before its CIF is compared when it is
re-analysed (``remanence reanalyze``).
"""

from __future__ import annotations

from typing import Any, Optional

from ..analysis import pxrd
from ..errors import AnalysisError
from ..ingest.conditions import parse_quantity
from ..plots.pxrd import pxrd_figure
from ..synth.cif import bowl_crystal
from ..synth.pxrd import powder_pattern
from .base import EXAMPLE_SMILES, Evidence, Example, Kind, Need, ResultKey, example_csv, rng_for

# The example: the example bowl's P2_1 structure (the crystal kind's example), measured with Cu Ka1
# at 295 K with a zero error of +0.06 deg; compared with the structure itself it matches.
_EX = {"smiles": EXAMPLE_SMILES, "space_group": "P21", "stacking_A": 6.0, "zero_shift_deg": 0.06,
       "wavelength_A": 1.540593, "temperature_K": 295.0, "fwhm_deg": 0.10}


def _metadata(c, *names: str) -> tuple[str, str] | None:
    """(key, value) of the first file metadata line named one of ``names`` (case and spaces ignored)."""
    for key, value in c.extra.items():
        if " ".join(str(key).replace("_", " ").lower().split()) in names:
            return key, str(value)
    return None


def wavelength_A(c) -> Optional[float]:
    """The wavelength from ``# wavelength:`` (a number with a unit, or a named anode line)."""
    got = _metadata(c, "wavelength", "lambda", "anode", "radiation")
    if got is None:
        return None
    key, text = got
    named = pxrd.wavelength_from_text(text)
    if named is not None:
        return named
    if not any(ch.isdigit() for ch in text):
        raise AnalysisError(f"'{text}' (file line '# {key}') is not a known anode line; use one of "
                            f"{', '.join(k.title() for k in pxrd.ANODE_LINES_A)} or write e.g. '1.5406 angstrom'",
                            field="wavelength")
    return parse_quantity(text, field="wavelength", unit="angstrom", example="1.5406 angstrom",
                          origin=f" (from the file line '# {key}: {text}')")


def _fwhm_deg(c) -> Optional[float]:
    got = _metadata(c, "peak width", "fwhm", "width")
    if got is None:
        return None
    key, text = got
    return parse_quantity(text, field="peak width", unit="degree", example="0.1 deg",
                          origin=f" (from the file line '# {key}: {text}')")


def _analyse(parsed, c, ctx):
    return pxrd.analyse_pxrd(parsed.frame, wavelength_A=wavelength_A(c), temperature_K=c.temperature_K,
                             fwhm_deg=_fwhm_deg(c), references=ctx.structures)


def _figure(parsed, result):
    return pxrd_figure(result)


def example_structure() -> bytes:
    """The CIF the example pattern is simulated from (the crystal kind's example structure)."""
    e = _EX
    return bowl_crystal(e["smiles"], "P2_1", stacking_A=e["stacking_A"], head_to_tail=True, seed=7,
                        temperature_K=150.0).cif


def _example() -> Example:
    e = _EX
    frame = powder_pattern([(example_structure(), 1.0)], rng=rng_for("pxrd"), wavelength_A=e["wavelength_A"],
                           zero_shift_deg=e["zero_shift_deg"], fwhm_deg=e["fwhm_deg"])
    conditions = {"temperature": f"{e['temperature_K']:g} K", "wavelength": "Cu Ka1"}
    return Example("pxrd.csv", example_csv(frame, conditions, {"geometry": "Bragg-Brentano, flat plate"}), dict(e))


_PEAK_KEYS = (
    ResultKey("two_theta_deg", "2θ", "deg", 4),
    ResultKey("d_A", "d", "Å", 4),
    ResultKey("i_rel_pct", "I/I₀", "%", 2),
    ResultKey("hkl", "hkl"),
    ResultKey("calc_two_theta_deg", "2θ calculated", "deg", 4),
    ResultKey("calc_i_rel_pct", "I/I₀ calculated", "%", 2),
)

def _evidence(results: dict[str, Any], temperature_K: Optional[float]) -> Evidence:
    """The comparison with the compound's structures at the pattern's temperature (for the verdict's PXRD
    criterion; pattern changes of a run come from the raw patterns, :mod:`server.services.pattern_runs`)."""
    return Evidence(results.get("temperature_K") or temperature_K,
                    {k: results.get(k) for k in ("reference", "reference_label", "space_group")})


KIND = Kind(
    name="pxrd",
    label="Powder X-ray diffraction pattern",
    analysis=pxrd,
    analyse=_analyse,
    column_sets=(("two_theta_deg", "intensity"),),
    needs=(Need(("temperature",), "(and '# wavelength: 1.5406 angstrom' or 'Cu Ka1' in the file)"),),
    results=(
        ResultKey("verdict", "comparison with the structure"),
        ResultKey("reference", "reference structure (measurement)"),
        ResultKey("reference_label", "reference structure"),
        ResultKey("space_group", "space group of the reference"),
        ResultKey("zero_shift_deg", "zero shift", "deg", 2),
        ResultKey("score", "normalised cross-correlation", "", 3),
        ResultKey("rwp", "Rwp", "", 2),
        ResultKey("rexp", "Rexp (counting noise)", "", 2),
        ResultKey("misfit", "misfit beyond noise", "", 2),
        ResultKey("wavelength_A", "wavelength", "Å", 6),
        ResultKey("temperature_K", "temperature", "K", 4),
        ResultKey("fwhm_deg", "simulated peak width (FWHM)", "deg", 2),
        ResultKey("two_theta_min_deg", "2θ from", "deg", 4),
        ResultKey("two_theta_max_deg", "2θ to", "deg", 4),
        ResultKey("n_points", "points"),
        ResultKey("peaks", "peaks"),
        ResultKey("matched_peaks", "peaks explained by the structure"),
        ResultKey("unmatched_peaks", "peaks the structure does not explain"),
        ResultKey("missing_peaks", "strong simulated lines not found"),
        ResultKey("candidates", "every registered structure"),
        *_PEAK_KEYS,
    ),
    summary_keys=("verdict", "reference_label", "score", "zero_shift_deg"),
    figure=_figure,
    evidence=_evidence,
    example=_example,
    needs_structures=True,
)


def verdict_label(results: dict[str, Any]) -> str:
    """The verdict in words ("" when no structure was compared)."""
    return pxrd.VERDICT_LABELS.get(results.get("verdict") or "", "")
