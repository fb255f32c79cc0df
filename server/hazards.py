"""The one home of safety wording: GHS vocabulary, the "no data" notice, and the campaign's general cautions.

No hazard data about any substance ships with the program. A reagent's hazard statements and
pictograms are entered by the group from the supplier's safety data sheet (``models.planning.Reagent``);
what is here is the shape of that data (the GHS pictogram codes and the pattern of hazard-statement
codes, from the UN Globally Harmonized System, "GHS", Annexes 1 and 3) and general reminders of the
kind a group puts on its bench cards. The reminders are common practice, not a risk assessment: every
one defers to the institution's risk assessment and to trained staff.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from rdkit import Chem

#: GHS pictogram codes and the symbol each shows (UN GHS Annex 1; symbol names from memory: check the
#: current GHS revision). The symbol names describe the picture, not any substance.
PICTOGRAMS: dict[str, str] = {
    "GHS01": "exploding bomb",
    "GHS02": "flame",
    "GHS03": "flame over circle",
    "GHS04": "gas cylinder",
    "GHS05": "corrosion",
    "GHS06": "skull and crossbones",
    "GHS07": "exclamation mark",
    "GHS08": "health hazard",
    "GHS09": "environment",
}

#: Hazard-statement codes: H2xx physical, H3xx health, H4xx environmental (UN GHS Annex 3), with an
#: optional letter suffix (H360FD), EU supplementary statements EUHxxx; combinations joined by "+".
_H_CODE = re.compile(r"^(?:H[234]\d\d[A-Za-z]{0,2}|EUH\d{3}[A-Za-z]?)(?:\+(?:H[234]\d\d[A-Za-z]{0,2}|EUH\d{3}[A-Za-z]?))*$")

NO_DATA = "no hazard data entered: read the safety data sheet"

DEFER = ("These are general reminders, not a risk assessment. Follow your institution's risk assessment "
         "and local rules, and do this work only as trained staff allow.")


@dataclass(frozen=True)
class Caution:
    key: str
    title: str
    text: str


#: General cautions for the chemistry of this campaign (common practice; README and planning pages).
CAMPAIGN_CAUTIONS: tuple[Caution, ...] = (
    Caution("organolithium", "Organolithium bases",
            "Alkyllithium reagents can ignite in air and react violently with water. Handle them under inert "
            "gas with dry glassware and transfer techniques you have been trained in; keep a suitable "
            "extinguishing agent at hand and never work alone."),
    Caution("chalcogen", "Chalcogen sources and their hydrides",
            "Sulfur and selenium reagents can release hydrogen sulfide or hydrogen selenide, toxic gases that "
            "the nose stops warning about. Work in a fume hood, plan how the off-gas is scrubbed and how waste "
            "is quenched, and have gas detection where your institution requires it."),
    Caution("hot_bath_high_voltage", "Hot silicone-oil baths for high-voltage work",
            "Poling and P-E measurements in a heated oil bath combine kilovolts with hot, flammable liquid. Use "
            "interlocked enclosures, keep the oil well below its flash point, and let the bath and the sample "
            "cool and the supply discharge before reaching in."),
)
CAUTIONS_BY_KEY = {c.key: c for c in CAMPAIGN_CAUTIONS}

HEATING_CHALCOGEN = ("This compound contains sulfur or selenium: check its decomposition (TGA) before heating "
                     "it far, since decomposing chalcogen compounds can release toxic hydrides.")


#: High voltage at the P-E / PUND tester (common practice; the upload form repeats it).
HIGH_VOLTAGE = Caution("high_voltage", "High voltage",
                       "P-E loops and PUND drive samples with hundreds to thousands of volts. Use the tester's "
                       "interlocks and shielding, keep hands off the sample stage while a measurement is armed, "
                       "and follow your laboratory's high-voltage rules and its trained staff.")

#: Which cautions each form where work is recorded or planned shows (the batch form: the synthesis; the upload
#: form: the measurement). One table, so the wording lives here only.
FORM_CAUTIONS: dict[str, tuple[Caution, ...]] = {
    "batch": (CAUTIONS_BY_KEY["organolithium"], CAUTIONS_BY_KEY["chalcogen"]),
    "upload": (HIGH_VOLTAGE, CAUTIONS_BY_KEY["hot_bath_high_voltage"]),
}


def form_cautions(form: str, formula: str | None = None) -> list[Caution]:
    """The cautions of one form (:data:`FORM_CAUTIONS`), plus the heating caution when the compound's formula
    holds S or Se. Pass the formula only when the caller may see the compound's structure (the embargo): for
    anyone else the compound-specific caution would say something about the structure."""
    out = list(FORM_CAUTIONS[form])
    if formula and formula_has_chalcogen(formula):
        out.append(Caution("heating_chalcogen", "Heating a sulfur or selenium compound", HEATING_CHALCOGEN))
    return out


def check_hazard_codes(codes: list[str]) -> list[str]:
    """Upper-cased codes, each checked against the GHS code pattern; raises ValueError naming a bad one."""
    out = []
    for raw in codes:
        code = raw.strip().upper().replace(" ", "")
        if not code:
            continue
        if not _H_CODE.match(code):
            raise ValueError(f"{raw!r} is not a GHS hazard-statement code (H200-H499, EUH000-EUH999, joined by +)")
        if code not in out:
            out.append(code)
    return out


def check_pictograms(codes: list[str]) -> list[str]:
    out = []
    for raw in codes:
        code = raw.strip().upper()
        if not code:
            continue
        if code not in PICTOGRAMS:
            raise ValueError(f"{raw!r} is not a GHS pictogram code ({', '.join(PICTOGRAMS)})")
        if code not in out:
            out.append(code)
    return out


def cautions_for_structure(smiles: str) -> list[Caution]:
    """The campaign cautions a reagent's structure calls for: a carbon-lithium bond (organolithium), or
    sulfur or selenium (a chalcogen source). A reagent without a structure calls for none here (its SDS
    and the general cautions still apply)."""
    mol = Chem.MolFromSmiles(smiles) if smiles else None
    if mol is None:
        return []
    out = []
    if any({b.GetBeginAtom().GetSymbol(), b.GetEndAtom().GetSymbol()} == {"C", "Li"} for b in mol.GetBonds()):
        out.append(CAUTIONS_BY_KEY["organolithium"])
    if any(a.GetSymbol() in ("S", "Se") for a in mol.GetAtoms()):
        out.append(CAUTIONS_BY_KEY["chalcogen"])
    return out


def formula_has_chalcogen(formula: str) -> bool:
    """Whether a Hill formula contains S or Se (not Si, Sn, Sb, Sc, Sr, Sm)."""
    return bool(re.search(r"S(?![a-z])|Se", formula or ""))
