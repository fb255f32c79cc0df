"""Crystal structures (CIF): space group, polarity and bowl geometry; each keeps a CrystalPhase row."""

from __future__ import annotations

from typing import Any, Optional, Sequence

from sqlmodel import select

from ..analysis import crystal
from ..analysis.crystal_cell import cell_contents
from ..plots.crystal import packing_figure
from ..models import CrystalPhase, is_live
from ..synth.cif import bowl_crystal
from .base import EXAMPLE_SMILES, Evidence, Example, Kind, ResultKey

# The example: the example bowl in P2_1, head-to-tail columns 6 A apart, at 150 K.
_EX = {"smiles": EXAMPLE_SMILES, "space_group": "P21", "stacking_A": 6.0, "temperature_K": 150.0, "polar": True}


def _analyse(raw: bytes, c, ctx):
    return crystal.analyse_cif(raw, formula=ctx.formula, molar_mass_g_mol=ctx.molar_mass_g_mol,
                               core_smiles=ctx.smiles)


def _evidence(results: dict[str, Any], temperature_K: Optional[float]) -> Evidence:
    return Evidence(results.get("temperature_K") or temperature_K,
                    {"space_group": results.get("space_group"), "bowl_depth_A": results.get("bowl_depth_A")})


def _stats(ms: Sequence[Any]) -> dict[str, Any]:
    """Polar phase and space groups from the live structures; the deepest measured bowl."""
    depths = [m.results.get("bowl_depth_A") for m in ms if isinstance(m.results.get("bowl_depth_A"), (int, float))]
    groups = sorted({m.results.get("space_group") for m in ms if m.results.get("space_group")})
    return {"polar_phase": any(bool(m.results.get("polar")) for m in ms) if ms else None,
            "space_groups": ", ".join(groups)[:200], "bowl_depth_A": max(depths) if depths else None}


def _derive(session, *, compound, batch, measurement, actor):
    """The CrystalPhase row of this structure: created, rewritten, archived and restored with it."""
    row = session.exec(select(CrystalPhase).where(CrystalPhase.measurement_id == measurement.id)
                       .order_by(CrystalPhase.id)).first()
    if row is None:
        row = CrystalPhase(compound_id=compound.id, batch_id=batch.id, measurement_id=measurement.id)
    r = measurement.results
    row.space_group, row.space_group_number = r.get("space_group") or "", r.get("space_group_number")
    row.polar, row.centrosymmetric = r.get("polar"), r.get("centrosymmetric")
    row.temperature_K, row.results, row.archived = r.get("temperature_K"), r, not is_live(session, measurement)
    session.add(row)


def _figure(parsed, result):
    """The unit cell and its atoms, projected along the shortest edge (``parsed`` is the CIF's bytes)."""
    return packing_figure(cell_contents(parsed))


def _example() -> Example:
    e = _EX
    cif = bowl_crystal(e["smiles"], "P2_1", stacking_A=e["stacking_A"], head_to_tail=True, seed=7,
                       temperature_K=e["temperature_K"]).cif
    return Example("crystal.cif", cif, dict(e))


KIND = Kind(
    name="crystal",
    label="Crystal structure (CIF)",
    analysis=crystal,
    analyse=_analyse,
    columns_text="a small-molecule CIF with cell, space group and atom sites",
    results=(
        ResultKey("space_group", "space group"),
        ResultKey("space_group_xhm", "space group (Hermann-Mauguin)"),
        ResultKey("space_group_number", "space group number"),
        ResultKey("point_group", "point group"),
        ResultKey("crystal_system", "crystal system"),
        ResultKey("polar", "polar"),
        ResultKey("centrosymmetric", "centrosymmetric"),
        ResultKey("chiral", "chiral"),
        ResultKey("z", "Z"),
        ResultKey("cell", "cell"),
        ResultKey("a", "a", "Å", 5),
        ResultKey("b", "b", "Å", 5),
        ResultKey("c", "c", "Å", 5),
        ResultKey("alpha", "α", "°", 5),
        ResultKey("beta", "β", "°", 5),
        ResultKey("gamma", "γ", "°", 5),
        ResultKey("volume", "volume", "Å³", 5),
        ResultKey("density_g_cm3", "density (computed)", "g/cm³", 4),
        ResultKey("density_cif_g_cm3", "density (CIF)", "g/cm³", 4),
        ResultKey("molar_mass_g_mol", "molar mass", "g/mol", 5),
        ResultKey("temperature_K", "temperature", "K", 4),
        ResultKey("r1", "R1", "", 3),
        ResultKey("wr2", "wR2", "", 3),
        ResultKey("goof", "goodness of fit S", "", 3),
        ResultKey("flack", "Flack parameter", "", 2),
        ResultKey("formula_cif", "formula (CIF)"),
        ResultKey("data_block", "data block"),
        ResultKey("bowl_depth_A", "bowl depth", "Å", 3),
        ResultKey("stacking_distance_A", "stacking distance", "Å", 3),
        ResultKey("column_axis", "column axis"),
        ResultKey("column_axis_angle_deg", "column axis angle", "°", 3),
        ResultKey("column_polar", "columns polar"),
        ResultKey("neighbours_same_direction", "neighbours pointing the same way", "", 3),
    ),
    summary_keys=("space_group",),
    figure=_figure,
    evidence=_evidence,
    stats=_stats,
    derive=_derive,
    example=_example,
    content_type="chemical/x-cif",
)
