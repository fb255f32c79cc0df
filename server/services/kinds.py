"""The measurement kinds: how each raw file is read, analysed and drawn.

One table (:data:`KINDS`) ties an upload ``kind`` to its reader (``server.ingest``), its
pure analysis (``server.analysis``) and its figure (``server.plots``). Adding a kind means
adding one :class:`Kind` here; the upload API, the pages, the re-analysis command and the
docs test all read this table.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Optional

import plotly.graph_objects as go

from ..analysis import crystal, dielectric, dsc, hysteresis, kinetics, pund
from ..ingest.conditions import Conditions
from ..ingest.table import ParsedTable, read_table


@dataclass(frozen=True)
class Context:
    """What the registry knows about the sample, for analyses that need it."""

    formula: Optional[str] = None
    molar_mass_g_mol: Optional[float] = None
    smiles: Optional[str] = None


@dataclass(frozen=True)
class Kind:
    name: str
    label: str
    version: str
    method: str
    columns: str  # accepted columns, for the README and the upload page
    table: bool  # read with ingest.read_table (False: the analysis reads the raw bytes)
    analyse: Callable[[Any, Conditions, Context], Any]
    figure: Optional[Callable[[Any, Any], go.Figure]] = None
    needs: str = ""  # conditions the analysis needs, for the upload form's hints

    def read(self, raw: bytes, filename: str | None) -> Any:
        return read_table(raw, filename=filename) if self.table else raw


def _loop(parsed: ParsedTable, c: Conditions, ctx: Context):
    return hysteresis.analyse_loop(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um,
                                   frequency_Hz=c.frequency_Hz)


def _pund(parsed: ParsedTable, c: Conditions, ctx: Context):
    return pund.analyse_pund(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um)


def _dielectric(parsed: ParsedTable, c: Conditions, ctx: Context):
    return dielectric.analyse_dielectric(parsed.frame, area_cm2=c.area_cm2, thickness_um=c.thickness_um,
                                         frequency_Hz=c.frequency_Hz)


def _dsc(parsed: ParsedTable, c: Conditions, ctx: Context):
    return dsc.analyse_dsc(parsed.frame, mass_mg=c.mass_mg, rate_K_min=c.rate_K_min, endo=c.endo,
                           molar_mass_g_mol=ctx.molar_mass_g_mol)


def _rates(parsed: ParsedTable, c: Conditions, ctx: Context):
    return kinetics.analyse_rate_table(parsed.frame, first_data_line=parsed.first_data_line,
                                       source_columns=parsed.source_columns)


def _crystal(raw: bytes, c: Conditions, ctx: Context):
    return crystal.analyse_cif(raw, formula=ctx.formula, molar_mass_g_mol=ctx.molar_mass_g_mol,
                               core_smiles=ctx.smiles)


def _fig_loop(parsed, result):
    from ..plots.ferro import loop_figure

    return loop_figure(result)


def _fig_pund(parsed, result):
    from ..plots.ferro import pund_figure

    return pund_figure(parsed.frame, result)


def _fig_dielectric(parsed, result):
    from ..plots.dielectric import permittivity_figure

    return permittivity_figure(result)


def _fig_dsc(parsed, result):
    from ..plots.dsc import dsc_figure

    return dsc_figure(result, parsed.frame)


def _fig_rates(parsed, result):
    from ..plots.kinetics import eyring_figure

    return eyring_figure(result)


KINDS: dict[str, Kind] = {
    k.name: k
    for k in (
        Kind(
            name="pe_loop",
            label="P-E hysteresis loop",
            version=hysteresis.VERSION,
            method=hysteresis.METHOD,
            columns="E (kV/cm) and P (uC/cm^2); or V (V) and Q (uC) with area and thickness; "
            "or t (s), V (V) and I (A) with area and thickness",
            table=True,
            analyse=_loop,
            figure=_fig_loop,
            needs="area and thickness for raw V/Q or V/I data; frequency",
        ),
        Kind(
            name="pund",
            label="PUND pulse train",
            version=pund.VERSION,
            method=pund.METHOD,
            columns="t (s), V (V) and Q (uC) or I (A) with area and thickness; or t (s), E (kV/cm), P (uC/cm^2)",
            table=True,
            analyse=_pund,
            figure=_fig_pund,
            needs="area and thickness for raw V/Q or V/I data",
        ),
        Kind(
            name="dielectric",
            label="Dielectric spectroscopy",
            version=dielectric.VERSION,
            method=dielectric.METHOD,
            columns="T (K), f (Hz) and C (pF) with D (tan delta), area and thickness; or T (K), f (Hz), eps_r, eps_i",
            table=True,
            analyse=_dielectric,
            figure=_fig_dielectric,
            needs="area and thickness when capacitance is given",
        ),
        Kind(
            name="dsc",
            label="DSC trace",
            version=dsc.VERSION,
            method=dsc.METHOD,
            columns="T (K or degC), heat flow (mW) with mass, or heat flow (W/g); t (s) optional",
            table=True,
            analyse=_dsc,
            figure=_fig_dsc,
            needs="mass for heat flow in mW; rate when there is no time column; endo (up or down)",
        ),
        Kind(
            name="nmr_rates",
            label="Variable-temperature NMR rates",
            version=kinetics.VERSION,
            method=kinetics.METHOD,
            columns="T (K) and k (1/s)",
            table=True,
            analyse=_rates,
            figure=_fig_rates,
        ),
        Kind(
            name="crystal",
            label="Crystal structure (CIF)",
            version=crystal.VERSION,
            method=crystal.METHOD,
            columns="a small-molecule CIF with cell, space group and atom sites",
            table=False,
            analyse=_crystal,
        ),
    )
}
