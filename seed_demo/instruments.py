"""The group's instruments: each turns a scenario measurement into the file it would write.

Every instrument PC has its own upload token limited to the kinds it produces, exactly as
in the lab (see ``load.py``). The physics comes from :mod:`seed_demo.scenario`, the models
from ``server.synth``; this module only chooses what each instrument records (columns,
units, sampling, conditions) and adds its noise, from the numpy Generator it is given.
"""

from __future__ import annotations

import re

from dataclasses import dataclass
from typing import Callable

import numpy as np

from server.analysis.constants import H_J_S, KB_J_K, R_J_MOLK
from server.errors import ChemistryError
from server.ingest.table import to_csv_bytes
from server.synth.cif import bowl_crystal
from server.synth.dielectric import curie_weiss_scan
from server.synth.dsc import dsc_trace
from server.synth.ferro import leaky_capacitor, miller_loop, pund_train, raw_vq
from server.synth.nmr import rate_table
from server.synth.relaxation import relaxation_spectra
from server.synth.identity import elemental_file, elemental_found, hrms_profile
from server.synth.nmr_spectrum import Signal, jcamp_file, signals_for, spectrum

from .scenario import CompoundPlan, Measurement


@dataclass(frozen=True)
class Instrument:
    name: str  # also the upload token's name
    kinds: tuple[str, ...]
    description: str


INSTRUMENTS = (
    Instrument("loop-tracer-2", ("pe_loop", "pund"), "Charge-mode P-E loop tracer with a hot stage"),
    Instrument("lcr-cryostat", ("dielectric",), "LCR meter on a variable-temperature cell, 1 kHz - 100 kHz"),
    Instrument("broadband-dielectric", ("dielectric_spectrum",),
               "Frequency-response analyser on a cryostat, 0.1 Hz - 1 MHz"),
    Instrument("dsc-bench", ("dsc",), "Heat-flux DSC, nitrogen purge"),
    Instrument("nmr-vt-500", ("nmr_rates",), "Variable-temperature NMR; rates from line-shape fits"),
    Instrument("xrd-micro", ("crystal",), "Single-crystal diffractometer, 150 K cryostream (or room temperature)"),
    Instrument("hrms-esi", ("hrms",), "High-resolution ESI mass spectrometer, resolving power 60 000"),
    Instrument("chns-combustion", ("elemental",), "CHNS combustion analyser"),
    Instrument("nmr-400", ("nmr_spectrum",), "400 MHz NMR spectrometer, spectra exported as JCAMP-DX"),
)
INSTRUMENT_FOR = {kind: inst for inst in INSTRUMENTS for kind in inst.kinds}


@dataclass(frozen=True)
class Upload:
    """A file and the form fields that go with it."""

    kind: str
    filename: str
    raw: bytes
    form: dict[str, str]
    content_type: str = "text/csv"


# Sample geometry of pressed pellets / crystal plates (typical values, common practice).
AREA_CM2 = 0.0785  # 3.16 mm diameter electrode
THICKNESS_UM = 150.0
LOOP_FREQUENCY_HZ = 100.0


def _base(c: CompoundPlan, m: Measurement, operator: str) -> dict[str, str]:
    form = {"instrument": INSTRUMENT_FOR[m.kind].name, "operator": operator}
    if m.temperature_K is not None:
        form["temperature"] = f"{m.temperature_K:g} K"
    return form


def pe_loop(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """Charge-mode tracer record (V, Q) at 100 Hz; area and thickness go on the form."""
    e0 = c.drive_kV_cm
    pr = c.pr_uC_cm2(m.temperature_K)
    if m.leaky:
        # a lossy, conducting sample: an ellipse with a large apparent Pr (Scott 2008)
        sigma = float(rng.uniform(1.0e-7, 4.0e-7))
        frame = leaky_capacitor(float(rng.uniform(5, 9)), float(rng.uniform(0.2, 0.6)), e0,
                                frequency_Hz=LOOP_FREQUENCY_HZ, sigma_S_m=sigma, noise_uC_cm2=2e-4, rng=rng)
    elif pr > 0:
        ps = pr / float(rng.uniform(0.86, 0.93))
        frame = miller_loop(ps, pr, c.ec_kV_cm(m.temperature_K), e0, cycles=2, points_per_cycle=500,
                            eps_r_background=float(rng.uniform(4, 8)), noise_uC_cm2=0.004 * ps, rng=rng,
                            frequency_Hz=LOOP_FREQUENCY_HZ)
    else:
        # paraelectric (above Tc) or non-polar packing: a nearly linear dielectric
        eps = _eps_real(c, m.temperature_K)
        frame = leaky_capacitor(eps, 0.004 * eps, e0, frequency_Hz=LOOP_FREQUENCY_HZ, noise_uC_cm2=2e-4, rng=rng)
    raw = raw_vq(frame, AREA_CM2, THICKNESS_UM)
    meta = {"instrument": "loop-tracer-2", "drive": f"sine {LOOP_FREQUENCY_HZ:g} Hz, {e0:g} kV/cm"}
    form = {**_base(c, m, operator), "area": f"{AREA_CM2} cm^2", "thickness": f"{THICKNESS_UM:g} um",
            "frequency": f"{LOOP_FREQUENCY_HZ:g} Hz"}
    return Upload("pe_loop", f"{name}.csv", to_csv_bytes(raw, meta), form)


def _eps_real(c: CompoundPlan, t_K: float) -> float:
    """Static permittivity for a linear response: Curie-Weiss above Tc, a small background otherwise."""
    if c.tc_K is not None and t_K > c.tc_K:
        return 4.0 + c.curie_constant_K / (t_K - c.tc_K)
    return 4.5


def pund(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """Five-pulse PUND train recorded as t, V, Q."""
    pr = c.pr_uC_cm2(m.temperature_K)
    e_pulse = c.drive_kV_cm
    common = dict(e_pulse_kV_cm=e_pulse, eps_r_background=float(rng.uniform(4, 8)), pulse_width_s=1e-3,
                  delay_s=1e-3, points=3000, rng=rng, area_cm2=AREA_CM2, thickness_um=THICKNESS_UM)
    if pr > 0 and not m.leaky:
        frame = pund_train(pr, pr / 0.9, c.ec_kV_cm(m.temperature_K), noise_uC_cm2=0.004 * pr, **common)
    else:
        # no switching: only the linear background and, for leaky samples, an ohmic leak.
        # The Miller parameters are not used when switching=False.
        leak = float(rng.uniform(1e-8, 5e-8)) if m.leaky else 0.0
        frame = pund_train(1.0, 2.0, 1.0, switching=False, leak_sigma_S_m=leak, noise_uC_cm2=2e-4, **common)
    form = {**_base(c, m, operator), "area": f"{AREA_CM2} cm^2", "thickness": f"{THICKNESS_UM:g} um"}
    return Upload("pund", f"{name}.csv", to_csv_bytes(frame, {"instrument": "loop-tracer-2", "mode": "PUND"}), form)


def dielectric(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """C and D against T at three frequencies, on the cooling cell."""
    area, thick = 0.2, 300.0
    if c.tc_K is not None:
        frame = curie_weiss_scan(c.curie_constant_K, c.tc_K, c.tc_K, 4.0, t_min_K=c.tc_K - 60, t_max_K=c.tc_K + 60,
                                 step_K=1.0, frequencies_Hz=(1e3, 1e4, 1e5),
                                 dispersion_K_per_decade=c.dispersion_K_per_decade, area_cm2=area,
                                 thickness_um=thick, noise_rel=0.003, rng=rng, tan_delta=0.012, rounding_K=4.0)
    else:
        # non-polar packing: the Curie-Weiss tail of a dipolar freezing far below the range (T0 = 100 K), no peak
        frame = curie_weiss_scan(150.0, 100.0, 100.0, 3.5, t_min_K=220, t_max_K=400, step_K=2.0,
                                 frequencies_Hz=(1e3, 1e4, 1e5), area_cm2=area, thickness_um=thick,
                                 noise_rel=0.001, rng=rng, tan_delta=0.03 if c.leaky else 0.008)
    form = {**_base(c, m, operator), "area": f"{area} cm^2", "thickness": f"{thick:g} um"}
    return Upload("dielectric", f"{name}.csv", to_csv_bytes(frame, {"instrument": "lcr-cryostat"}), form)


def dsc_transitions(c: CompoundPlan, impure: bool = False, rng: np.random.Generator | None = None) -> list[dict]:
    """Heating-scan transitions: order-disorder at Tc (dS = R ln 2), side-chain melting, melting.

    The order-disorder peak is drawn as a Gaussian of 4 K FWHM (a transition broadened by
    the spread of local environments). The asymmetric "lambda" shape of server.synth.dsc
    would be closer to a textbook order-disorder anomaly, but its long low-temperature tail
    is under-integrated by the DSC analysis in some runs (dS about R ln 1.4 instead of R ln 2).
    """
    mm = c.molar_mass_g_mol
    out = []
    if c.tc_K is not None:
        out.append({"t_K": c.tc_K, "dh_J_g": R_J_MOLK * np.log(2.0) * c.tc_K / mm, "width_K": 4.0, "kind": "gaussian"})
    if c.side_chain_melting_K is not None:
        out.append({"t_K": c.side_chain_melting_K, "dh_J_g": 7.5, "width_K": 6.0, "kind": "gaussian"})
    tm, width = c.tm_K, 2.0
    if impure:
        tm -= float((rng or np.random.default_rng(0)).uniform(3, 8))  # melting-point depression
        width = 5.0
    out.append({"t_K": tm, "dh_J_g": tm * c.melting_ds_J_molK / mm, "width_K": width, "kind": "melting"})
    return out


def dsc(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """Heating scan at 10 K/min from 240 K to 25 K above melting, heat flow in mW."""
    mass = round(float(rng.uniform(2.5, 6.0)), 2)
    transitions = dsc_transitions(c, m.impure, rng)
    t_start = min(240.0, (c.tc_K or 300.0) - 50.0)
    frame = dsc_trace(transitions, t_start_K=t_start, t_end_K=c.tm_K + 25.0, rate_K_min=10.0, mass_mg=mass,
                      baseline_mW=float(rng.uniform(-0.3, 0.3)), baseline_slope=float(rng.uniform(-2e-3, 2e-3)),
                      noise_mW=0.002, rng=rng, sample_interval_s=1.0)
    form = {**_base(c, m, operator), "mass": f"{mass} mg", "rate": "10 K/min", "endo": "up"}
    return Upload("dsc", f"{name}.csv", to_csv_bytes(frame, {"instrument": "dsc-bench", "purge": "N2 50 mL/min"}), form)


def eyring_k_per_s(dh_kJ_mol: float, ds_J_molK: float, t_K: float) -> float:
    """k = (kB T / h) exp(dS/R) exp(-dH/RT) (Eyring 1935; kappa = 1)."""
    kb_h = KB_J_K / H_J_S
    return kb_h * t_K * np.exp(ds_J_molK / R_J_MOLK - dh_kJ_mol * 1e3 / (R_J_MOLK * t_K))


def temperature_for_rate(dh_kJ_mol: float, ds_J_molK: float, k_per_s: float) -> float:
    """The temperature at which the Eyring rate equals ``k_per_s`` (bisection; k rises with T)."""
    lo, hi = 50.0, 1000.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if eyring_k_per_s(dh_kJ_mol, ds_J_molK, mid) < k_per_s:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def nmr_rates(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """Eight rates across the NMR line-shape window (k from about 20 to 2000 1/s)."""
    from .scenario import DS_ACT_J_MOLK

    t_lo = temperature_for_rate(c.dh_kJ_mol, DS_ACT_J_MOLK, 20.0)
    t_hi = temperature_for_rate(c.dh_kJ_mol, DS_ACT_J_MOLK, 2000.0)
    temps = np.round(np.linspace(t_lo, t_hi, 8), 1)
    frame = rate_table(c.dh_kJ_mol, DS_ACT_J_MOLK, temps, noise_rel=0.05, rng=rng)
    meta = {"instrument": "nmr-vt-500", "solvent": "toluene-d8", "method": "line-shape fit"}
    return Upload("nmr_rates", f"{name}.csv", to_csv_bytes(frame, meta), _base(c, m, operator))


#: The bowl's dipole turns over with the bowl in the solid too, a little more hindered by the packing than in
#: solution (an invented factor of the demo); the relaxation is broadened (Cole-Cole alpha 0.8).
SOLID_BARRIER_FACTOR = 1.08
RELAXATION_TAU0_S = 1e-13


def dielectric_spectrum(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str
                        ) -> Upload:
    """eps' and eps'' from 0.1 Hz to 1 MHz at six temperatures chosen so the loss peak crosses the window
    (tau from 0.1 s to 10 us), drifting 0.1 K within each sweep; 2 % noise."""
    ea_kJ_mol = SOLID_BARRIER_FACTOR * c.dh_kJ_mol
    temps = [round(ea_kJ_mol * 1e3 / (R_J_MOLK * np.log(tau / RELAXATION_TAU0_S)), 1)
             for tau in np.logspace(-1, -5, 6)]
    frame = relaxation_spectra(temps, tau0_s=RELAXATION_TAU0_S, ea_kJ_mol=ea_kJ_mol, d_eps=float(rng.uniform(3, 6)),
                               eps_inf=float(rng.uniform(3, 4)), alpha=0.8, noise_rel=0.02, drift_K=0.1, rng=rng)
    meta = {"instrument": "broadband-dielectric", "model": "cole_cole"}
    return Upload("dielectric_spectrum", f"{name}.csv", to_csv_bytes(frame, meta), _base(c, m, operator))


#: Stacking distances tried in turn (A): a column of bowls with rim chains needs more room than
#: the bare core's 3.8 A; the generator says when a distance clashes (field "stacking_A").
STACKING_LADDER_A = (4.0, 5.0, 6.0, 7.0, 8.0)


def crystal_cif(smiles: str, space_group: str, head_to_tail: bool, *, seed: int = 7,
                temperature_K: float = 150.0) -> bytes:
    """CIF of an invented columnar crystal (server.synth.cif.bowl_crystal), first clash-free stacking."""
    last: ChemistryError | None = None
    for stacking in STACKING_LADDER_A:
        try:
            return bowl_crystal(smiles, space_group, stacking_A=stacking, head_to_tail=head_to_tail, seed=seed,
                                temperature_K=temperature_K).cif
        except ChemistryError as exc:
            if exc.field != "stacking_A":
                raise
            last = exc
    raise ChemistryError(f"no clash-free stacking up to {STACKING_LADDER_A[-1]} A: {last}", field="stacking_A")


def crystal(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    cif = crystal_cif(c.smiles, c.crystal.space_group, c.crystal.head_to_tail, temperature_K=m.temperature_K)
    return Upload("crystal", f"{name}.cif", cif, _base(c, m, operator), content_type="chemical/x-cif")


def _formula(c: CompoundPlan) -> str:
    from rdkit import Chem
    from rdkit.Chem.rdMolDescriptors import CalcMolFormula

    return CalcMolFormula(Chem.MolFromSmiles(c.smiles))


def hrms(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """[M+Na]+ at resolving power 60 000, within 2 ppm; the "missing_chalcogen" sample lacks one S."""
    formula = _formula(c)
    sample = re.sub(r"S(\d*)(?![a-z])", lambda g: f"S{int(g.group(1) or 1) - 1}" if int(g.group(1) or 1) > 1 else "",
                    formula, count=1) if m.variant == "missing_chalcogen" else formula
    frame = hrms_profile(sample, "[M+Na]+", rng=rng, error_ppm=float(rng.uniform(-2.0, 2.0)),
                         window=(-1.5, 40.0) if sample != formula else (-1.5, 4.5))
    form = {"instrument": INSTRUMENT_FOR[m.kind].name, "operator": operator}
    return Upload("hrms", f"{name}.csv", to_csv_bytes(frame, {"ion": "[M+Na]+"}), form)


def elemental(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """C, H (and S for chalcogen bowls) with 0.1 % scatter; the "hemihydrate" sample holds 0.5 H2O."""
    formula = _formula(c)
    els = ("C", "H", "S") if "S" in re.findall(r"[A-Z][a-z]?", formula) else ("C", "H")
    solvate = ("H2O", 0.5) if m.variant == "hemihydrate" else None
    found = elemental_found(formula, rng=rng, elements=els, scatter_pct=0.1, solvate=solvate)
    meta = {"solvate": "0.5 H2O"} if solvate else {}
    form = {"instrument": INSTRUMENT_FOR[m.kind].name, "operator": operator}
    return Upload("elemental", f"{name}.csv", elemental_file(found, meta), form)


NMR_MHZ = 400.13
NMR_SOLVENT = "CDCl3"
#: The impure batches' side product: its phenol OH and how far downfield its other signals lie (invented).
PHENOL_OH_PPM, SIDE_PRODUCT_OFFSET_PPM = 5.60, 0.08


def nmr_spectrum(c: CompoundPlan, m: Measurement, rng: np.random.Generator, name: str, operator: str) -> Upload:
    """A 1H spectrum in CDCl3 at 400 MHz and 298 K: the compound's invented signals
    (server.synth.nmr_spectrum.signals_for), the CHCl3 residual, water and TMS; an impure batch adds
    10 % of a mono-dealkylated side product (a phenol OH near 5.6 ppm and its chain signals 0.08 ppm
    downfield, apart from the compound's). Noise 0.2 % of the tallest line (a signal-to-noise ratio of 500).
    32 k points over 13 ppm (server.synth.nmr_spectrum.POINTS: 0.16 Hz per point, so J prints to 0.1 Hz).
    The spectrometer writes X in Hz with CRLF line ends; some files were converted to ppm."""
    main = signals_for(c.smiles)
    signals = list(main)
    if m.impure:
        signals = [Signal(s.shift_ppm, 0.9 * s.n_H, s.neighbours, s.j_Hz) for s in main]
        signals += [Signal(s.shift_ppm + SIDE_PRODUCT_OFFSET_PPM, 0.1 * s.n_H, s.neighbours, s.j_Hz) for s in main]
        signals.append(Signal(PHENOL_OH_PPM, 0.1))
    signals += [Signal(7.26, float(rng.uniform(0.3, 0.8))), Signal(1.56, float(rng.uniform(0.2, 1.0))),
                Signal(0.0, float(rng.uniform(0.8, 1.5)))]
    ppm, y = spectrum(signals, rng=rng, mhz=NMR_MHZ, fwhm_Hz=float(rng.uniform(1.2, 1.8)), noise_rel=0.002)
    in_hz = rng.random() < 0.75
    raw = jcamp_file(ppm, y, mhz=NMR_MHZ, solvent=NMR_SOLVENT, t_K=298.15, title=f"{name} 1H", in_hz=in_hz,
                     crlf=in_hz, comments=[f"invented demo spectrum; operator {operator}"])
    form = {"instrument": INSTRUMENT_FOR[m.kind].name, "operator": operator}
    return Upload("nmr_spectrum", f"{name}.jdx", raw, form, content_type="chemical/x-jcamp-dx")


WRITERS: dict[str, Callable[..., Upload]] = {
    "pe_loop": pe_loop,
    "pund": pund,
    "dielectric": dielectric,
    "dielectric_spectrum": dielectric_spectrum,
    "dsc": dsc,
    "nmr_rates": nmr_rates,
    "crystal": crystal,
    "hrms": hrms,
    "elemental": elemental,
    "nmr_spectrum": nmr_spectrum,
}


def write(c: CompoundPlan, batch_seq: int, index: int, m: Measurement, operator: str, code: str) -> Upload:
    """The file for measurement ``index`` of batch ``batch_seq``; noise seeded by those numbers alone."""
    from .scenario import SEED

    rng = np.random.default_rng([SEED, c.index, batch_seq, index])
    temp = f"-{m.temperature_K:g}K" if m.temperature_K is not None and m.kind in ("pe_loop", "pund") else ""
    return WRITERS[m.kind](c, m, rng, f"{code}-{m.kind}{temp}", operator)


def specimen_loop(c: CompoundPlan, t_K: float, rng: np.random.Generator, *, pr_factor: float, area_cm2: float,
                  thickness_um: float, name: str, operator: str, sweep: str = "") -> Upload:
    """A loop measured on a described sample (V, Q from the sample's own geometry); area and
    thickness are left off the form, so they come from the sample."""
    e0 = c.drive_kV_cm
    pr = c.pr_uC_cm2(t_K) * pr_factor
    if pr > 0:
        ps = pr / float(rng.uniform(0.86, 0.93))
        frame = miller_loop(ps, pr, c.ec_kV_cm(t_K), e0, cycles=2, points_per_cycle=500,
                            eps_r_background=float(rng.uniform(4, 8)), noise_uC_cm2=0.004 * ps, rng=rng,
                            frequency_Hz=LOOP_FREQUENCY_HZ)
    else:
        eps = _eps_real(c, t_K)
        frame = leaky_capacitor(eps, 0.004 * eps, e0, frequency_Hz=LOOP_FREQUENCY_HZ, noise_uC_cm2=2e-4, rng=rng)
    meta = {"instrument": "loop-tracer-2", "drive": f"sine {LOOP_FREQUENCY_HZ:g} Hz, {e0:g} kV/cm"}
    form = {"instrument": INSTRUMENT_FOR["pe_loop"].name, "operator": operator, "temperature": f"{t_K:g} K",
            "frequency": f"{LOOP_FREQUENCY_HZ:g} Hz"}
    if sweep:
        form["sweep"] = sweep
    return Upload("pe_loop", f"{name}.csv", to_csv_bytes(raw_vq(frame, area_cm2, thickness_um), meta), form)
