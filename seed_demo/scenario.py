"""The invented demo campaign: who made what, when, and the physics every file is drawn from.

Everything here is invented: the group, its people, the campaign, the codes and the numbers.
The models that turn these parameters into instrument files live in ``server/synth``; this
module only decides the parameters, and it decides them from one coherent picture:

The group and the campaign
--------------------------
The *Tessellate group* (an invented dipolar-materials lab) runs campaign **TILT-26**
("tilted-bowl inversion trials") between April and November 2026: about sixty derivatives
of one triphenylene bowl, closed by three bridges, with six side chains on the rim.

Four scaffolds, differing in their bridge (:data:`BOWLS`)
-------------------------------------------------------
``TB-CH2`` (three CH2 bridges), ``TB-CS`` (two CH2 and one S, our own mixed bowl,
validated with ``server.chem.scaffold.validate_scaffold``), ``TB-S`` (three S) and
``TB-SE`` (three Se). Longer bridge bonds (C-C 1.51, C-S 1.76, C-Se 1.91 A, typical
single-bond lengths, from memory) open the five-membered rings and flatten the bowl, so in
this scenario the bowl depth, the axial dipole and the inversion barrier all fall along
CH2 > CH2/S > S > Se. The parents' barriers (dG at 298 K) are 19.6, 17.0, 14.2 and
11.0 kcal/mol (invented; the order of magnitude is that of known CH2- and chalcogen-bridged
bowls, from memory). Alkoxy chains lower them by 0.4 kcal/mol and alkylthio chains by
0.6 kcal/mol (electron-rich rims flatten the bowl a little). The activation entropy is
small and negative, dS = -6 J/(mol K), as for a unimolecular inversion through a more
ordered planar transition state (common practice: |dS| below ~20 J/(mol K) for
conformational inversions).

Packing: polar columns or not
-----------------------------
Bowls stack concave-into-convex in columns. Short and medium linear chains (effective length
L <= 8 carbons, an alkylthio chain counting 1.5 carbons longer than an alkoxy chain of the
same carbon count) on the CH2, CH2/S and S bowls keep the columns head-to-tail: polar
space groups P2_1 or Pna2_1, and the crystals switch. Long chains (L > 8) interdigitate
between neighbouring columns, which pairs the columns antiparallel (P2_1/c, P-1); branched
chains frustrate the head-to-tail stacking (P-1); the shallow Se bowl stacks too weakly to
keep a column polar (P2_1/c). None of these switch.

Ferroelectric numbers (polar compounds)
---------------------------------------
* Curie temperature: Tc = T_bowl - 9 K x L (+- 4 K per compound), T_bowl = 440, 412, 385 K
  for CH2, CH2/S, S: longer chains dilute the dipole-dipole coupling. Polar compounds have
  Tc between about 300 and 435 K.
* Spontaneous polarization: P0 = f mu / V, the molecular dipole mu (3.0, 2.6, 2.2 D for
  CH2, CH2/S, S) over the molecular volume V = 330 A^3 + 27 A^3 per chain carbon (Tanford's
  CH2 volume, 26.9 A^3; C. Tanford, J. Phys. Chem. 76, 3020 (1972), from memory) + 8 A^3
  per linker atom, with the column order f = 0.85-0.95. That gives 1-2 uC/cm^2, the range
  of molecular ferroelectrics. Pr(T) = P0 sqrt(1 - T/Tc) (Landau, second order; Lines and
  Glass 1977, ch. 3).
* Coercive field: Ec(T) = Ec0 (1 - T/Tc), Ec0 = 80, 60, 45 kV/cm x (1 - 0.025 L): an
  empirical linear fall (common practice for nucleation-limited switching; the intrinsic
  Landau law would be (1 - T/Tc)^(3/2), S. Ducharme et al., Phys. Rev. Lett. 84, 175
  (2000), from memory). The drive amplitude of a sample is 4.5 x Ec at its lowest
  measuring temperature.
* Permittivity: Curie-Weiss above Tc with an order-disorder Curie constant C = 900-1400 K,
  Landau (second order) below; compounds with two different chains show a little frequency
  dispersion (2-4 K per decade), as mixed chains give a spread of local environments.
* DSC: the order-disorder transition at Tc carries dS = R ln 2 (two bowl orientations,
  n_states = 2); melting at Tm = T_m,bowl - 7 K x L (T_m,bowl = 545, 530, 520, 505 K;
  branched chains 25 K lower, alkylthio 10 K lower) with dS_m = 60 J/(mol K) + 2.5 J/(mol K)
  per chain carbon (Walden's rule, about 56 J/(mol K) for rigid molecules, plus a part of
  the chain entropy; common practice). Chains of 12 or more carbons also melt on their own
  (a side-chain transition near 250 K + 3 K x n, 7.5 J/g).
* Impure batches melt 3-8 K lower and broader (melting-point depression) and hold ionic
  impurities that make them leaky: their "loops" are the ellipses of a lossy dielectric
  (server.synth.ferro.leaky_capacitor). Se bowls are leaky too (a smaller gap): their
  loops look like loops, and PUND shows no switching.

Crystal structures (CIF, server.synth.cif.bowl_crystal) exist for the short-chain compounds
only (C1, C2, isopropoxy): the generator embeds and packs the whole molecule, which takes
minutes (and RDKit's ETKDG fails) for long flexible chains. Their columns are stacked at the
first clash-free distance of 4-8 A; the long-chain compounds' centrosymmetric packing is
shown by the absence of switching (PUND) and of a dielectric anomaly.

Everything random (jitter of Tc, yields, noise in the files) comes from numpy Generators
seeded with :data:`SEED` and the compound's place in the list, so the demo is the same on
every run and a smaller ``scale`` loads a subset of the same compounds with the same data.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from datetime import date, timedelta
from functools import cached_property

import numpy as np

from server.analysis.constants import CAL_J, DEBYE_C_M
from server.chem.scaffold import PARENT_BOWLS, attach_side_chains, side_chain_smiles, validate_scaffold

SEED = 20261201
TODAY = date(2026, 12, 1)
CAMPAIGN_START = date(2026, 4, 6)
CAMPAIGN_END = date(2026, 11, 27)

GROUP = "Tessellate group"
CAMPAIGN = "TILT-26"


#: Invented people of the group: (login, full name, role). The admin is the CLI's 'demo' user.
PEOPLE = (
    ("ivarnhout", "Ilse Varnhout", "member"),
    ("tbrenek", "Tomas Brenek", "member"),
    ("oquist", "Odile Quist-Amara", "member"),
    ("rpellow", "Ruairi Pellow", "viewer"),
)
CHEMISTS = ("I. Varnhout", "T. Brenek", "O. Quist-Amara")


@dataclass(frozen=True)
class Bowl:
    """One scaffold and the bowl physics that goes with its bridge."""

    code: str
    name: str
    smiles: str
    bridge: str
    dg_parent_kcal_mol: float  # inversion barrier of the parent, 298 K
    dipole_D: float
    tc_base_K: float | None  # None: this bowl never packs in polar columns
    ec0_kV_cm: float
    tm_base_K: float
    notes: str


_MIXED_CS = "S1c2c([*:1])c([*:2])c3c4c2c2c1c([*:3])c([*:4])c1c2c2c(c([*:5])c([*:6])c(c42)C3)C1"

BOWLS: dict[str, Bowl] = {
    "CH2": Bowl("TB-CH2", "Tri-CH2-bridged triphenylene bowl", PARENT_BOWLS["CH2"], "CH2", 19.6, 3.0, 440.0,
                80.0, 545.0, "Deepest bowl of the series; the reference scaffold of TILT-26."),
    "CS": Bowl("TB-CS", "Mixed CH2/CH2/S-bridged triphenylene bowl", _MIXED_CS, "CH2/S", 17.0, 2.6, 412.0,
               60.0, 530.0, "Our own mixed bowl: one S bridge opens one bay and lowers the barrier."),
    "S": Bowl("TB-S", "Tri-S-bridged triphenylene bowl", PARENT_BOWLS["S"], "S", 14.2, 2.2, 385.0,
              45.0, 520.0, "Shallower bowl; polar columns survive to medium chains."),
    "Se": Bowl("TB-SE", "Tri-Se-bridged triphenylene bowl", PARENT_BOWLS["Se"], "Se", 11.0, 1.6, None,
               30.0, 505.0, "Shallowest bowl: columns pair antiparallel; leaky films."),
}

# Activation entropy of inversion used for every bowl (module docstring).
DS_ACT_J_MOLK = -6.0


@dataclass(frozen=True)
class Chain:
    kind: str  # "alkoxy" | "alkylthio"
    carbons: int
    branched_form: str | None = None

    @property
    def smiles(self) -> str:
        return side_chain_smiles(self.kind, None if self.branched_form else self.carbons, self.branched_form)

    @property
    def effective_length(self) -> float:
        return self.carbons + (1.5 if self.kind == "alkylthio" else 0.0)

    @property
    def tag(self) -> str:
        linker = "O" if self.kind == "alkoxy" else "S"
        if self.branched_form:
            short = {"isopropyl": "iPr", "isobutyl": "iBu", "sec-butyl": "sBu", "2-ethylhexyl": "EH",
                     "3,7-dimethyloctyl": "DMO", "2-butyloctyl": "BO"}[self.branched_form]
            return f"{linker}{short}"
        return f"{linker}{self.carbons}"


@dataclass(frozen=True)
class Measurement:
    """One instrument file to write and upload."""

    kind: str
    temperature_K: float | None = None
    leaky: bool = False
    impure: bool = False
    variant: str = ""  # identity evidence: "missing_chalcogen" (HRMS), "hemihydrate" (EA)
    # nmr_spectrum files: impure=True adds the side product of an impure batch (about 10 %)


@dataclass(frozen=True)
class BatchPlan:
    seq: int
    made_on: date
    chemist: str
    scale_mg: float
    yield_pct: float | None
    purity_pct: float | None
    state: str
    notes: str
    measurements: tuple[Measurement, ...]


@dataclass(frozen=True)
class Crystal:
    space_group: str
    head_to_tail: bool
    t_K: float = 150.0  # the collection temperature


@dataclass(frozen=True)
class CompoundPlan:
    """One derivative: structure, registration details and its physics."""

    index: int  # place in the campaign (0-based); also seeds its random numbers
    bowl_key: str
    chains: tuple[Chain, Chain]  # on attachment points 1, 3, 5 and on 2, 4, 6
    embargoed: bool = False
    batches: tuple[BatchPlan, ...] = ()
    tc_jitter_K: float = 0.0
    order_f: float = 0.9
    curie_constant_K: float = 1100.0
    crystal: Crystal | None = None
    coalescence_dnu_Hz: float | None = None
    imported_offset_kcal_mol: float | None = None
    queue_estimate: bool = False

    @property
    def bowl(self) -> Bowl:
        return BOWLS[self.bowl_key]

    @property
    def uniform(self) -> bool:
        return self.chains[0] == self.chains[1]

    @property
    def label(self) -> str:
        a, b = self.chains
        chains = a.tag if self.uniform else f"{a.tag}/{b.tag}"
        return f"{CAMPAIGN} {self.bowl.code}-{chains}"

    @cached_property
    def smiles(self) -> str:
        a, b = self.chains
        return attach_side_chains(self.bowl.smiles, {n: (a.smiles if n % 2 else b.smiles) for n in range(1, 7)})

    # ---- physics -------------------------------------------------------------------------

    @property
    def branched(self) -> bool:
        return any(c.branched_form for c in self.chains)

    @property
    def chain_length(self) -> float:
        """Effective chain length L (carbons; alkylthio + 1.5), mean over the two chain sites."""
        return (self.chains[0].effective_length + self.chains[1].effective_length) / 2.0

    @property
    def chain_carbons(self) -> int:
        return 3 * (self.chains[0].carbons + self.chains[1].carbons)

    @property
    def has_thio(self) -> bool:
        return any(c.kind == "alkylthio" for c in self.chains)

    @property
    def polar(self) -> bool:
        """Head-to-tail (polar, switching) columns: see the module docstring."""
        return self.bowl.tc_base_K is not None and not self.branched and self.chain_length <= 8.0

    @property
    def leaky(self) -> bool:
        return self.bowl_key == "Se"

    @property
    def tc_K(self) -> float | None:
        if not self.polar:
            return None
        return round(self.bowl.tc_base_K - 9.0 * self.chain_length + self.tc_jitter_K, 1)

    @property
    def molar_mass_g_mol(self) -> float:
        from rdkit import Chem
        from rdkit.Chem import Descriptors

        return Descriptors.MolWt(Chem.MolFromSmiles(self.smiles))

    @property
    def volume_A3(self) -> float:
        return 330.0 + 27.0 * self.chain_carbons + 8.0 * 6

    @property
    def p0_uC_cm2(self) -> float:
        # P = f mu / V: D -> C m, A^3 -> m^3 gives C/m^2; x 100 gives uC/cm^2
        return self.order_f * self.bowl.dipole_D * DEBYE_C_M / (self.volume_A3 * 1e-30) * 100.0

    @property
    def ec0_kV_cm(self) -> float:
        return self.bowl.ec0_kV_cm * (1.0 - 0.025 * self.chain_length)

    def pr_uC_cm2(self, t_K: float) -> float:
        """Landau second order: Pr = P0 sqrt(1 - T/Tc); 0 above Tc or for non-polar packings."""
        if self.tc_K is None or t_K >= self.tc_K:
            return 0.0
        return self.p0_uC_cm2 * math.sqrt(1.0 - t_K / self.tc_K)

    def ec_kV_cm(self, t_K: float) -> float:
        if self.tc_K is None or t_K >= self.tc_K:
            return 0.0
        return self.ec0_kV_cm * (1.0 - t_K / self.tc_K)

    @property
    def loop_temperatures_K(self) -> tuple[float, ...]:
        """P-E temperatures: 0.75 Tc, 0.9 Tc and Tc + 15 K for polar compounds; 300 K otherwise."""
        if self.tc_K is None:
            return (300.0,)
        return (round(0.75 * self.tc_K), round(0.9 * self.tc_K), round(self.tc_K + 15.0))

    @property
    def drive_kV_cm(self) -> float:
        """Drive amplitude: 4.5 x Ec at the lowest loop temperature; 60 kV/cm for non-switching samples."""
        if self.tc_K is None:
            return 60.0
        return round(4.5 * self.ec_kV_cm(min(self.loop_temperatures_K)), 1)

    @property
    def dispersion_K_per_decade(self) -> float:
        return 0.0 if self.uniform else 2.0 + (self.index % 3)

    @property
    def dg_kcal_mol(self) -> float:
        """Inversion barrier at 298.15 K (kcal/mol)."""
        drop = 0.6 if self.has_thio else 0.4
        return self.bowl.dg_parent_kcal_mol - drop

    @property
    def dh_kJ_mol(self) -> float:
        return self.dg_kcal_mol * CAL_J + 298.15 * DS_ACT_J_MOLK / 1000.0

    @property
    def tm_K(self) -> float:
        t = self.bowl.tm_base_K - 7.0 * self.chain_length
        if self.branched:
            t -= 25.0
        if self.has_thio:
            t -= 10.0
        return round(t, 1)

    @property
    def melting_ds_J_molK(self) -> float:
        return 60.0 + 2.5 * self.chain_carbons

    @property
    def side_chain_melting_K(self) -> float | None:
        n = max(c.carbons for c in self.chains)
        return 250.0 + 3.0 * n if n >= 12 else None


@dataclass(frozen=True)
class Scenario:
    compounds: tuple[CompoundPlan, ...]

    @property
    def batches(self) -> int:
        return sum(len(c.batches) for c in self.compounds)

    @property
    def measurements(self) -> int:
        return sum(len(b.measurements) for c in self.compounds for b in c.batches)


# --------------------------------------------------------------------------------------------
# the campaign, in the order the compounds were made

O, S_ = "alkoxy", "alkylthio"


def _c(kind: str, n: int | None = None, form: str | None = None) -> Chain:
    if form:
        from server.chem.scaffold import BRANCHED_FORMS

        return Chain(kind, BRANCHED_FORMS[form][1], form)
    return Chain(kind, n)


# (bowl, chain on 1/3/5, chain on 2/4/6 or None for the same)
_LIST: tuple[tuple[str, Chain, Chain | None], ...] = (
    # spring: the CH2 series, chain length scan first
    *(("CH2", _c(O, n), None) for n in (1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 14, 16)),
    ("CH2", _c(O, form="isopropyl"), None),
    ("CH2", _c(O, form="sec-butyl"), None),
    ("CH2", _c(O, form="2-ethylhexyl"), None),
    ("CH2", _c(O, form="3,7-dimethyloctyl"), None),
    *(("CH2", _c(S_, n), None) for n in (4, 6, 8, 12)),
    ("CH2", _c(O, 4), _c(O, 8)),
    ("CH2", _c(O, 2), _c(O, 12)),
    ("CH2", _c(O, 6), _c(S_, 6)),
    # summer: the S series
    *(("S", _c(O, n), None) for n in (1, 2, 3, 4, 5, 6, 7, 8, 10, 12, 16)),
    ("S", _c(O, form="isobutyl"), None),
    ("S", _c(O, form="2-ethylhexyl"), None),
    ("S", _c(O, form="2-butyloctyl"), None),
    *(("S", _c(S_, n), None) for n in (4, 6, 10)),
    ("S", _c(O, 3), _c(O, 6)),
    ("S", _c(O, 4), _c(O, 12)),
    ("S", _c(O, 4), _c(S_, 4)),
    # late summer: the Se series
    *(("Se", _c(O, n), None) for n in (1, 2, 4, 6, 8, 12)),
    ("Se", _c(O, form="2-ethylhexyl"), None),
    ("Se", _c(O, 2), _c(O, 6)),
    # autumn: the mixed CH2/S bowl (the newest results, some under embargo)
    *(("CS", _c(O, n), None) for n in (1, 2, 3, 4, 6, 8, 12)),
    ("CS", _c(O, form="2-ethylhexyl"), None),
    ("CS", _c(O, 4), _c(O, 6)),
)

#: Made last, after the referee's question "was the phase of your 150 K structure the one that switches?":
#: a short-chain CH2 bowl whose structure was collected at room temperature, inside the interval the DSC
#: (from 240 K) and the permittivity scan cover, below its Tc and its PUND temperature with no transition
#: between. Its evidence earns the strongest verdict class under the rules of server/analysis/verdict.py
#: (tests/test_demo.py checks it with the verdict code). Appended after the autumn compounds, so every other
#: compound keeps its place, its seed and its data; always loaded, whatever the ``scale``.
_LATE: tuple[tuple[str, Chain, Chain | None], ...] = (
    ("CH2", _c(S_, 1), None),
    ("CH2", _c(S_, 3), None),  # loops only so far (see _LATE_STAGES)
    ("CS", _c(S_, 1), None),  # a structure only so far (see _LATE_STAGES)
)

#: Two compounds made with the late one, at the campaign's end, and measured only in part when the demo stops,
#: so the demo holds a compound in each verdict class of server/verdict_codes.py (tests/test_demo.py checks that):
#: the propylthio CH2 bowl has its P-E loops, permittivity and DSC but no PUND yet (the pulse set-up was away for
#: repair), so its saturated loops give "loop only"; the methylthio CH2/S bowl has its structure (polar, 150 K) and
#: DSC but no electrodes yet, so nothing has tried to switch it: "polar, not switched". Their physics is that of
#: every other compound of the scenario (both are polar: short linear chains on a polar-column bowl).
_LATE_STAGES = {
    ("CH2", "S3"): ("loops_only", "Thin films for the P-E tracer; PUND waits for the pulse generator, away for repair."),
    ("CS", "S1"): ("structure_only", "Single crystals from toluene/heptane; electrodes not yet applied."),
}
_EMBARGO_END = len(_LIST)  # the embargo covers the newest CH2/S compounds of the autumn list
_LIST = _LIST + _LATE

#: Compounds with a single-crystal structure: (bowl, chain tag) -> space group. Only the short
#: chains: the crystal generator (server.synth.cif.bowl_crystal) embeds and packs the whole
#: molecule, and that becomes slow (and ETKDG fails) for long flexible chains.
_CRYSTALS = {
    ("CH2", "O1"): Crystal("P2_1", True),
    ("CH2", "O2"): Crystal("P2_1", True),
    ("CH2", "OiPr"): Crystal("P-1", False),
    ("S", "O1"): Crystal("Pna2_1", True),
    ("S", "O2"): Crystal("P2_1", True),
    ("Se", "O1"): Crystal("P2_1/c", False),
    ("Se", "O2"): Crystal("P-1", False),
    ("CS", "O1"): Crystal("P2_1", True),
    ("CH2", "S1"): Crystal("Pna2_1", True, 296.0),  # collected at room temperature (see _LATE)
    ("CS", "S1"): Crystal("P2_1", True),  # the structure-only late compound (see _LATE_STAGES)
}

_FAILED_NOTES = ("Cyclisation stalled; black tar after work-up.", "Bridge closure failed (mass spec shows open bay).",
                 "Lost on the column: decomposed on silica.")
_IMPURE_NOTES = ("Contains mono-dealkylated side product (about 10 % by NMR).",
                 "Grey solid; residual catalyst and salts, recrystallisation pending.",
                 "Ionic impurity from the work-up; films are leaky.")


def _dates(n: int) -> list[date]:
    span = (CAMPAIGN_END - CAMPAIGN_START).days
    return [CAMPAIGN_START + timedelta(days=round(i * span / max(n - 1, 1))) for i in range(n)]


# The identity evidence with a story: the first S-bridged compound's HRMS sample lost one bridge S
# (a dithia bowl by-product), and the compound of index 3 crystallised as a hemihydrate.
HEMIHYDRATE_INDEX = 3


def _identity(c: CompoundPlan, *, first_of_bowl: bool) -> list[Measurement]:
    hrms = "missing_chalcogen" if first_of_bowl and c.bowl.bridge == "S" else ""
    ea = "hemihydrate" if c.index == HEMIHYDRATE_INDEX else ""
    return [Measurement("hrms", variant=hrms), Measurement("elemental", variant=ea)]


def _measurements_full(c: CompoundPlan, *, first_of_bowl: bool = False) -> tuple[Measurement, ...]:
    out: list[Measurement] = _identity(c, first_of_bowl=first_of_bowl)
    for t in c.loop_temperatures_K:
        out.append(Measurement("pe_loop", t, leaky=c.leaky))
    t_pund = round(0.8 * c.tc_K) if c.tc_K else 300.0
    out.append(Measurement("pund", t_pund, leaky=c.leaky))
    out.append(Measurement("dielectric"))
    out.append(Measurement("dsc"))
    out.append(Measurement("nmr_rates"))
    if c.crystal:
        out.append(Measurement("crystal", c.crystal.t_K))
    out.append(Measurement("dielectric_spectrum"))
    out.append(Measurement("nmr_spectrum"))  # appended last: the earlier files keep their noise seeds
    return tuple(out)


def _late_stage_batches(c: CompoundPlan, made: date, rng: np.random.Generator, stage: str, notes: str
                        ) -> tuple[BatchPlan, ...]:
    """The one good batch of a compound of :data:`_LATE_STAGES`, measured as far as the campaign got."""
    ms: list[Measurement] = _identity(c, first_of_bowl=False)
    if stage == "loops_only":
        ms += [Measurement("pe_loop", t, leaky=c.leaky) for t in c.loop_temperatures_K]
        ms += [Measurement("dielectric"), Measurement("dsc")]
    else:
        ms += [Measurement("crystal", c.crystal.t_K), Measurement("dsc")]
    ms.append(Measurement("nmr_spectrum"))
    chemist = CHEMISTS[int(rng.integers(len(CHEMISTS)))]
    return (BatchPlan(1, made, chemist, float(rng.choice([80, 120, 200])), round(float(rng.uniform(40, 75)), 1),
                      round(float(rng.uniform(97.5, 99.5)), 1), "made", notes, tuple(ms)),)


def _measurements_repeat(c: CompoundPlan) -> tuple[Measurement, ...]:
    t = round(0.8 * c.tc_K) if c.tc_K else 300.0
    return (Measurement("hrms"), Measurement("pe_loop", t, leaky=c.leaky), Measurement("dsc"),
            Measurement("nmr_spectrum"))


def _measurements_impure() -> tuple[Measurement, ...]:
    return (Measurement("pe_loop", 300.0, leaky=True, impure=True), Measurement("dsc", impure=True),
            Measurement("nmr_spectrum", impure=True))


def identity_note(c: CompoundPlan, b: BatchPlan, *, newest_compound: bool) -> str | None:
    """The note a member confirms batch ``b``'s identity with, or None where it stays unconfirmed: a batch
    with nothing measured (failed), the batch whose HRMS lacks a bridge S (the evidence contradicts the
    structure), and on purpose the newest compound's last batch (its evidence awaits the group's review),
    so the verdicts show the identity criterion unmet where it is."""
    kinds = {m.kind for m in b.measurements}
    if not kinds or any(m.variant == "missing_chalcogen" for m in b.measurements):
        return None
    if newest_compound and b is c.batches[-1]:
        return None
    if b.state == "impure":
        return ("1H NMR shows the compound's signals beside a side product of about 10 %: the identity of the "
                "main component is shown; its purity is not")
    if "elemental" in kinds:
        return "HRMS, elemental analysis and 1H NMR agree with the structure"
    return "HRMS and 1H NMR agree with the structure and with the first batch"


def _batches(c: CompoundPlan, made: date, rng: np.random.Generator, *, first_of_bowl: bool = False
             ) -> tuple[BatchPlan, ...]:
    n = 1 + int(rng.random() < 0.45) + int(rng.random() < 0.12)
    states: list[str] = []
    for i in range(n):
        u = rng.random()
        states.append("failed" if u < 0.08 else "impure" if u < 0.22 else "made")
    if not any(s == "made" for s in states):
        states.append("made")  # every compound reaches a good batch in the end
    # a compound made early in the campaign had its first good batch measured up
    good_first = states.index("made")
    if made < date(2026, 8, 1) and rng.random() < 0.5:
        states[good_first] = "used_up"
    out = []
    day = made
    for seq, state in enumerate(states, start=1):
        scale = float(rng.choice([50, 80, 120, 200, 300, 500]))
        chemist = CHEMISTS[int(rng.integers(len(CHEMISTS)))]
        if state == "failed":
            y, p, notes, ms = round(float(rng.uniform(0, 6)), 1), None, _FAILED_NOTES[seq % 3], ()
        elif state == "impure":
            y, p = round(float(rng.uniform(20, 55)), 1), round(float(rng.uniform(78, 91)), 1)
            notes, ms = _IMPURE_NOTES[seq % 3], _measurements_impure()
        else:
            y, p = round(float(rng.uniform(35, 82)), 1), round(float(rng.uniform(97.0, 99.8)), 1)
            first_good = seq - 1 == good_first
            notes = "Recrystallised twice; single crystals from toluene/heptane." if c.crystal and first_good else ""
            ms = _measurements_full(c, first_of_bowl=first_of_bowl) if first_good else _measurements_repeat(c)
        out.append(BatchPlan(seq, min(day, CAMPAIGN_END), chemist, scale, y, p, state, notes, ms))
        day = day + timedelta(days=int(rng.integers(5, 21)))
    return tuple(out)


def build(scale: float = 1.0) -> Scenario:
    """The campaign; ``scale`` < 1 keeps an evenly spaced subset of the compounds (same data each)."""
    if not 0 < scale <= 1:
        raise ValueError(f"scale must be in (0, 1], got {scale}")
    for bowl in BOWLS.values():
        info = validate_scaffold(bowl.smiles)
        if info.attachment_points != 6 or info.bridge != bowl.bridge:
            raise ValueError(f"scaffold {bowl.code}: expected 6 attachment points and bridge {bowl.bridge}, "
                             f"got {info.attachment_points} and {info.bridge}")
    made = _dates(_EMBARGO_END) + [CAMPAIGN_END] * len(_LATE)  # the late compounds are made at the campaign's end
    n_total = len(_LIST)
    keep = {int(i / scale) for i in range(max(1, round((n_total - len(_LATE)) * scale)))}
    keep |= set(range(n_total - len(_LATE), n_total))
    compounds = []
    queued = 0
    for i, (bowl_key, a, b) in enumerate(_LIST):
        if i not in keep:
            continue
        rng = np.random.default_rng([SEED, i])
        chains = (a, b or a)
        tag = a.tag if b is None else None
        crystal = _CRYSTALS.get((bowl_key, tag)) if tag else None
        draft = CompoundPlan(
            index=i,
            bowl_key=bowl_key,
            chains=chains,
            tc_jitter_K=round(float(rng.uniform(-4, 4)), 1),
            order_f=round(float(rng.uniform(0.85, 0.95)), 3),
            curie_constant_K=round(float(rng.uniform(900, 1400))),
            crystal=crystal,
            # every third compound: a coalescence point from a VT-NMR series
            coalescence_dnu_Hz=round(float(rng.uniform(25, 90)), 1) if i % 3 == 0 else None,
            # every seventh: a barrier computed elsewhere, imported
            imported_offset_kcal_mol=round(float(rng.normal(0.7, 0.3)), 2) if i % 7 == 3 else None,
            # the newest CH2/S compounds are under embargo until the paper is out
            embargoed=bowl_key == "CS" and _EMBARGO_END - 4 <= i < _EMBARGO_END,
        )
        # the smallest molecule of each bowl gets a queued GFN2-xTB estimate (4 jobs)
        queue = tag == "O1" and queued < 4
        queued += int(queue)
        if (bowl_key, tag) in _LATE_STAGES:
            batches = _late_stage_batches(draft, made[i], rng, *_LATE_STAGES[(bowl_key, tag)])
        else:
            batches = _batches(draft, made[i], rng,
                               first_of_bowl=not any(x.bowl_key == bowl_key for x in compounds))
        compounds.append(replace(draft, queue_estimate=queue, batches=batches))
    return Scenario(tuple(compounds))


def expected_loop_verdict(c: CompoundPlan, m: Measurement) -> set[str]:
    """What the hysteresis analysis should say about a P-E file of this scenario."""
    if m.leaky:
        return {"lossy_dielectric"}
    if c.tc_K is not None and m.temperature_K < c.tc_K:
        return {"switching"}
    return {"linear_dielectric", "paraelectric"}


def expected_pund_verdict(c: CompoundPlan, m: Measurement) -> str:
    return "switching" if c.tc_K is not None and m.temperature_K < c.tc_K else "no_switching"


def expected_crystal_verdict(c: CompoundPlan) -> str:
    return "polar" if c.crystal and c.crystal.head_to_tail else "centrosymmetric"


__all__ = [
    "SEED", "TODAY", "GROUP", "CAMPAIGN", "PEOPLE", "CHEMISTS", "BOWLS", "Bowl", "Chain", "Measurement",
    "BatchPlan", "Crystal", "CompoundPlan", "Scenario", "build", "expected_loop_verdict",
    "expected_pund_verdict", "expected_crystal_verdict",
]


# ---- specimens: one batch measured as a pressed pellet and as a single crystal
@dataclass(frozen=True)
class SpecimenPlan:
    """A described sample of a batch and the loops measured on it, in the order they were taken."""

    body: dict  # the POST /api/v1/batches/{code}/samples body
    pr_factor: float  # Pr of this specimen relative to the compound's Landau Pr(T) (invented physics)
    loops: tuple[tuple[float, str], ...]  # (temperature K, stated sweep or "")
    corrected: tuple[float, str, str] | None = None  # (T, thickness typed wrongly, right thickness)


def specimen_compound(plan: Scenario) -> CompoundPlan | None:
    """The first polar, public compound with a transition: its first batch gets described samples."""
    return next((c for c in plan.compounds if c.tc_K is not None and not c.embargoed and c.batches), None)


def specimens(c: CompoundPlan) -> tuple[SpecimenPlan, ...]:
    """A pellet heated through Tc (series by upload order) and cooled back (a stated sweep), and a
    crystal cut along its polar axis, whose loops are larger (a pellet averages over grain
    orientations; the factor 1.6 is invented for the demo), with one thickness typed wrongly and
    corrected afterwards."""
    tc = c.tc_K
    heating = tuple((round(tc * f), "") for f in (0.80, 0.84, 0.88, 0.92, 0.96)) + ((round(tc + 10), ""),)
    cooling = tuple((round(tc * f), "cooling") for f in (0.94, 0.86, 0.78))
    pellet = SpecimenPlan(
        body={"form": "pellet", "thickness": "150 um", "electrode_area": "7.85 mm^2", "electrode": "silver paste",
              "preparation": {"pressing_load": "20 kN", "anneal_temperature": "80 degC", "anneal_time": "2 h"}},
        pr_factor=1.0, loops=heating + cooling)
    crystal = SpecimenPlan(
        body={"form": "single_crystal", "thickness": "80 um", "electrode_area": "2 mm^2", "electrode": "gold, sputtered",
              "axis": "[001]", "notes": "plate cut normal to the polar axis"},
        pr_factor=1.6, loops=((round(0.8 * tc), ""),), corrected=(round(0.9 * tc), "8 um", "80 um"))
    return (pellet, crystal)
