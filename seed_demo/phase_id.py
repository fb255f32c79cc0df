"""Phase-identification files of the demo (invented, from physical models): powder patterns of several batches
with a crystal structure (one with an extra phase from a solvate), a variable-temperature powder set through a
transition, SAXS/WAXS of two long-chain compounds in hexagonal columnar mesophases, and SHG runs on a few.

* Powder patterns: server.synth.pxrd from the batch's own CIF (the same generator and seed as its crystal
  upload); the solvate is the same molecule packed in P-1 (an invented toluene solvate, 35 % by scattering
  weight); the high-temperature phase of the VT set is the centrosymmetric P2_1/c packing, above the
  compound's Tc.
* SAXS: server.synth.saxs, hexagonal columns of a = 1.9 nm + 0.11 nm per chain carbon (invented: the core plus
  molten chains), 3.5 A stacking and the 4.5 A chain halo, above the chains' melting.
* SHG: server.synth.shg, I(2w) ~ Ps^2 vanishing at the compound's Tc; a centrosymmetric compound is silent.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from server.ingest.table import to_csv_bytes
from server.synth.pxrd import powder_pattern
from server.synth.saxs import mesophase_curve
from server.synth.shg import shg_run

from . import instruments, scenario

QUARTZ = "alpha-quartz powder, 45-63 um"


@dataclass
class PhaseIdReport:
    uploads: dict[str, int] = field(default_factory=lambda: {"pxrd": 0, "saxs": 0, "shg": 0})


@lru_cache(maxsize=None)
def _cif(smiles: str, space_group: str, head_to_tail: bool) -> bytes:
    """The CIF the demo's crystal upload of this molecule uses (same generator, same seed)."""
    return instruments.crystal_cif(smiles, space_group, head_to_tail)


def _crystal_batch(batch_codes, c):
    """The batch of ``c`` that carries its crystal structure (its first good batch), or None."""
    return next((code for cc, b, code in batch_codes if cc is c and any(m.kind == "crystal" for m in b.measurements)),
                None)


def plan_compounds(plan: scenario.Scenario):
    """(with crystals, public), (long chains, no crystal, public), the VT compound."""
    crystals = [c for c in plan.compounds if c.crystal and not c.embargoed and c.batches]
    long_chains = [c for c in plan.compounds if c.side_chain_melting_K and not c.crystal and not c.embargoed
                   and c.batches][:2]
    vt = next((c for c in crystals if c.tc_K and c.crystal.head_to_tail), None)
    return crystals[:3], long_chains, vt


def load(client, writer: dict, plan: scenario.Scenario, batch_codes: list, echo: Callable[[str], None]) -> PhaseIdReport:
    report = PhaseIdReport()
    rng = np.random.default_rng(20261203)
    crystals, long_chains, vt = plan_compounds(plan)

    from .load import DemoLoadError

    def post(bcode: str, kind: str, raw: bytes, name: str) -> None:
        r = client.post(f"/api/v1/batches/{bcode}/measurements", headers=writer, data={"kind": kind},
                        files={"file": (name, raw, "text/csv")})
        if r.status_code != 201:
            raise DemoLoadError(f"{kind} upload {name} for {bcode}: {r.status_code} {r.text[:300]}")
        report.uploads[kind] += 1

    for k, c in enumerate(crystals):
        bcode = _crystal_batch(batch_codes, c)
        if bcode is None:
            continue
        cif = _cif(c.smiles, c.crystal.space_group, c.crystal.head_to_tail)
        phases = [(cif, 1.0)]
        if k == 1:  # the solvate
            phases.append((_cif(c.smiles, "P-1", False), 0.35))
        frame = powder_pattern(phases, rng=rng, zero_shift_deg=round(float(rng.uniform(-0.08, 0.08)), 3))
        meta = {"temperature": "295 K", "wavelength": "Cu Ka1", "instrument": "pxrd-bb"}
        if k == 1:
            meta["notes"] = "crystallised from toluene; dried 2 h in air"
        post(bcode, "pxrd", to_csv_bytes(frame, meta), f"{bcode}-pxrd-295K.csv")
        if c.tc_K:
            t = np.arange(round(c.tc_K - 80, -1), round(c.tc_K + 40, -1) + 1, 10.0)
            run = shg_run(t, tc_K=c.tc_K, ratio_at_first=round(float(rng.uniform(0.3, 1.5)), 2), rng=rng)
        else:
            run = shg_run(np.array([295.0]), tc_K=0.0, ratio_at_first=0.0, rng=rng)
        post(bcode, "shg", to_csv_bytes(run, {"reference": QUARTZ, "detection limit": "0.01", "sweep": "heating",
                                              "temperature": "295 K"}), f"{bcode}-shg.csv")

    if vt is not None:
        bcode = _crystal_batch(batch_codes, vt)
        low = _cif(vt.smiles, vt.crystal.space_group, vt.crystal.head_to_tail)
        high = _cif(vt.smiles, "P2_1/c", False)
        for t in np.arange(round(vt.tc_K - 40, -1), round(vt.tc_K + 30, -1) + 1, 20.0):
            cif = low if t < vt.tc_K else high
            frame = powder_pattern([(cif, 1.0)], rng=rng, lattice_strain=1e-4 * (t - 295.0), zero_shift_deg=0.02)
            post(bcode, "pxrd", to_csv_bytes(frame, {"temperature": f"{t:g} K", "wavelength": "Cu Ka1",
                                                     "sweep": "heating"}), f"{bcode}-pxrd-{t:g}K.csv")

    for c in long_chains:
        bcode = next(code for cc, b, code in batch_codes if cc is c and b.measurements)
        n = max(ch.carbons for ch in c.chains)
        a_nm = round(1.9 + 0.11 * n, 2)
        t = round(c.side_chain_melting_K + 30.0)
        curve = mesophase_curve("hexagonal", a_nm, rng=rng, stacking_A=3.5, halo_A=4.5)
        post(bcode, "saxs", to_csv_bytes(curve, {"temperature": f"{t:g} K", "instrument": "saxs-lab"}),
             f"{bcode}-saxs-{t:g}K.csv")
    echo("phase identification: " + ", ".join(f"{k} {v}" for k, v in report.uploads.items()))
    return report
