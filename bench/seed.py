"""Fast bulk seeding of benchmark databases with an invented bowl campaign.

Registering 10^4 compounds through the API would take an hour (InChI, audit, stats refresh
and a commit per compound), so the benchmarks insert rows directly with SQLAlchemy Core.
The rows are what the services would have written:

* molecules: the three ``PARENT_BOWLS`` of :mod:`server.chem.scaffold` with a side chain
  (alkoxy / alkylthio / alkyl, linear C1-C16 or a named branched form, or H) at each of
  the six rim positions, deduplicated on RDKit canonical SMILES. The fragment text is
  put into the scaffold's ``([*:n])`` branches directly (it is 30x quicker than
  ``attach_side_chains``' molzip); :func:`molecule_library` checks on the first molecules
  that ``attach_side_chains`` builds the same canonical SMILES;
* identity (InChI, InChIKey, Hill formula, masses) from :func:`server.chem.identity.identify`
  and side chains from :func:`server.chem.sidechains.perceive_side_chains`, for every
  compound (so InChIKeys are real and unique);
* batches, raw files, measurements with result keys the analyses produce, barrier
  estimates and crystal phases, and the denormalised ``CompoundStats`` /
  ``CompoundSideChain`` rows computed by the same rules as :func:`server.services.stats.refresh`
  (checked against ``refresh`` itself on a sample of compounds after seeding).

Everything is deterministic (fixed seeds). Molecule lists, identities and the seeded SQLite
file are cached under ``bench/results/`` (gitignored), keyed by :data:`SEED_VERSION`, the
sizes and the Alembic head, so a rerun starts in seconds. Bump SEED_VERSION when the rules
here change.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import random
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any, Iterable, Optional

import numpy as np
from sqlalchemy import insert, text
from sqlalchemy.engine import Engine, make_url
from sqlmodel import Session

from server.verdict_codes import LABELS as VERDICT_LABELS
from server.chem import identity, scaffold, sidechains
from server.db import alembic_config, make_engine, upgrade
from server import merit
from server.models.planning import life_state
from server.models import (
    BarrierEstimate, Batch, Compound, CompoundSideChain, CompoundStats, CrystalPhase, Measurement, RawFile, Sample, Scaffold,
)
from server.services import accounts
from server.analysis.constants import R_J_MOLK
from server.settings import Settings

from .common import RESULTS_DIR

SEED_VERSION = "1"
SEED = 20261201
BENCH_USER = "bench-viewer"
BENCH_PASSWORD = "bench-viewer-password"

BOWL_CODES = {"CH2": "BOWL-CH2", "S": "BOWL-S", "Se": "BOWL-SE"}
BOWL_WEIGHTS = {"CH2": 0.5, "S": 0.3, "Se": 0.2}

# ---------------------------------------------------------------------------------- molecules


def _chain_vocabulary() -> list[tuple[str, float]]:
    """(fragment SMILES without the attachment point, weight); '' stands for H."""
    vocab: list[tuple[str, float]] = [("", 0.5)]
    for n in range(1, 17):
        vocab.append((scaffold.side_chain_smiles("alkoxy", n)[len("[*:1]"):], 6.0 if 4 <= n <= 14 else 1.5))
    for n in range(2, 13):
        vocab.append((scaffold.side_chain_smiles("alkylthio", n)[len("[*:1]"):], 1.2))
        vocab.append((scaffold.side_chain_smiles("alkyl", n)[len("[*:1]"):], 1.0))
    for form in scaffold.BRANCHED_FORMS:
        vocab.append((scaffold.side_chain_smiles("alkoxy", None, form)[len("[*:1]"):], 1.5))
        vocab.append((scaffold.side_chain_smiles("alkylthio", None, form)[len("[*:1]"):], 0.4))
    return vocab


def _bowl_text(bowl: str, chains: dict[int, str]) -> str:
    out = scaffold.PARENT_BOWLS[bowl]
    for n, frag in chains.items():
        out = out.replace(f"([*:{n}])", f"({frag})" if frag else "")
    return out


def _candidates(rng: random.Random, count: int) -> list[tuple[str, str, dict[int, str]]]:
    """Random (bowl, text SMILES, chains) picks: a fifth fully symmetric, a quarter C3 (AB AB AB), the rest free."""
    vocab = _chain_vocabulary()
    frags, weights = [v for v, _ in vocab], [w for _, w in vocab]
    bowls, bweights = list(BOWL_WEIGHTS), list(BOWL_WEIGHTS.values())
    out = []
    for _ in range(count):
        bowl = rng.choices(bowls, bweights)[0]
        pattern = rng.random()
        if pattern < 0.2:
            a = rng.choices(frags, weights)[0]
            chains = {n: a for n in range(1, 7)}
        elif pattern < 0.45:
            a, b = rng.choices(frags, weights, k=2)
            chains = {n: (a if n % 2 else b) for n in range(1, 7)}
        else:
            chains = {n: f for n, f in zip(range(1, 7), rng.choices(frags, weights, k=6))}
        out.append((bowl, _bowl_text(bowl, chains), chains))
    return out


def _canonical(smiles_text: str) -> str:
    from rdkit import Chem

    mol = Chem.MolFromSmiles(smiles_text)
    if mol is None:
        raise RuntimeError(f"bench seed built an unreadable SMILES: {smiles_text}")
    return Chem.MolToSmiles(mol)


def _pool_map(fn, items: list, chunksize: int = 200) -> list:
    workers = min(2, os.cpu_count() or 1)
    if len(items) < 2000 or workers < 2:
        return [fn(x) for x in items]
    with ProcessPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(fn, items, chunksize=chunksize))


def _check_fast_route(picks: list[tuple[str, str, dict[int, str]]]) -> None:
    """The string route must build the molecule ``attach_side_chains`` builds."""
    for bowl, smiles_text, chains in picks:
        spec = {n: ("[*:1]" + f) if f else "[*:1][H]" for n, f in chains.items()}
        expected = scaffold.attach_side_chains(scaffold.PARENT_BOWLS[bowl], spec)
        got = _canonical(smiles_text)
        if got != expected:
            raise RuntimeError(f"bench seed: fast route gave {got}, attach_side_chains gave {expected}")


def molecule_library(n: int, *, seed: int = SEED) -> list[tuple[str, str]]:
    """``n`` distinct bowl derivatives as (bowl, canonical SMILES), deterministic, cached.

    The list for a larger ``n`` starts with the list for a smaller one (same seed), so the
    10^4 molecules of the registry are the first 10^4 of the search library.
    """
    path = RESULTS_DIR / f"molecules-v{SEED_VERSION}-{seed}.tsv"
    if path.exists():
        rows = [tuple(line.split("\t")) for line in path.read_text().splitlines() if line]
        if len(rows) >= n:
            return [(b, s) for b, s in rows[:n]]
    rng = random.Random(seed)
    seen: set[str] = set()
    out: list[tuple[str, str]] = []
    checked = False
    while len(out) < n:
        picks = _candidates(rng, max(1000, int((n - len(out)) * 1.3)))
        if not checked:
            _check_fast_route(picks[:12])
            checked = True
        for (bowl, _, _), smi in zip(picks, _pool_map(_canonical, [p[1] for p in picks])):
            if smi not in seen:
                seen.add(smi)
                out.append((bowl, smi))
                if len(out) == n:
                    break
    RESULTS_DIR.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    tmp.write_text("".join(f"{b}\t{s}\n" for b, s in out))
    tmp.replace(path)
    return out


def _identity_record(smiles: str) -> dict[str, Any]:
    mol = identity.parse_structure(smiles)
    ident = identity.identify(mol)
    chains = sidechains.perceive_side_chains(mol)
    return {
        "smiles": ident.smiles, "inchi": ident.inchi, "inchikey": ident.inchikey, "formula": ident.formula,
        "mw": ident.mw, "exact_mass": ident.exact_mass, "heavy_atoms": ident.heavy_atoms,
        "side_chains": [c.to_dict() for c in chains], "side_chain_summary": sidechains.describe_side_chains(chains),
    }


def compound_records(n: int) -> list[dict[str, Any]]:
    """Identity and side chains of the first ``n`` library molecules (cached as JSON lines)."""
    path = RESULTS_DIR / f"identities-v{SEED_VERSION}-{SEED}.jsonl"
    have: list[dict[str, Any]] = []
    if path.exists():
        have = [json.loads(line) for line in path.read_text().splitlines() if line]
    if len(have) < n:
        lib = molecule_library(n)
        more = _pool_map(_identity_record, [s for _, s in lib[len(have):n]], chunksize=100)
        for (bowl, _), rec in zip(lib[len(have):n], more):
            rec["bowl"] = bowl
        have.extend(more)
        keys = [r["inchikey"] for r in have]
        if len(set(keys)) != len(keys):
            raise RuntimeError("bench seed: two library molecules share an InChIKey")
        tmp = path.with_suffix(".tmp")
        tmp.write_text("".join(json.dumps(r) + "\n" for r in have))
        tmp.replace(path)
    return have[:n]


# ---------------------------------------------------------------------------------- registry rows

KIND_WEIGHTS = {"pe_loop": 0.25, "pund": 0.1, "dielectric": 0.25, "dsc": 0.2, "nmr_rates": 0.12, "crystal": 0.08}
BATCH_STATE_WEIGHTS = {"made": 0.8, "impure": 0.1, "failed": 0.07, "used_up": 0.03}
POLAR_GROUPS = (("P2_1", 4), ("Pna2_1", 33), ("Cc", 9), ("P3_1", 144), ("R3c", 161))
NONPOLAR_GROUPS = (("P2_1/c", 14), ("P-1", 2), ("Pbca", 61), ("C2/c", 15))
VERDICT_WEIGHTS = {"untested": 0.45, "no_switching_seen": 0.15, "transition_only": 0.12, "polar_switching_supported": 0.08,
                   "switching_phase_unknown": 0.07, "polar_unswitched": 0.05, "nonpolar": 0.06, "conflicting": 0.02}
BASE_TIME = datetime(2026, 1, 5, 8, 0, tzinfo=timezone.utc)


@dataclass(frozen=True)
class SeedInfo:
    url: str
    compounds: int
    measurements: int
    username: str = BENCH_USER
    password: str = BENCH_PASSWORD


def _pick(rng: random.Random, weights: dict[str, float]) -> str:
    return rng.choices(list(weights), list(weights.values()))[0]


def _stats_row(cid: int, chains: list[dict], batches: list[dict], ms: list[dict], bars: list[dict],
               phases: list[dict], updated_at: datetime) -> dict[str, Any]:
    """CompoundStats by the rules of server.services.stats.refresh (verified on a sample after seeding)."""
    row: dict[str, Any] = {"compound_id": cid}
    if chains:
        main = max(chains, key=lambda c: (c["count"], c["carbons"]))
        row.update(chain_kind=main["kind"], chain_carbons=main["carbons"],
                   chain_carbons_min=min(c["carbons"] for c in chains), chain_carbons_max=max(c["carbons"] for c in chains),
                   chain_branched=any(c["branched"] for c in chains), chain_count=sum(c["count"] for c in chains))
    else:
        row.update(chain_kind="", chain_carbons=None, chain_carbons_min=None, chain_carbons_max=None,
                   chain_branched=False, chain_count=0)
    states = sorted({b["state"] for b in batches})
    row.update(n_batches=len(batches), batch_states="," + ",".join(states) + "," if states else "",
               yield_best_pct=max((b["yield_pct"] for b in batches if b["yield_pct"] is not None), default=None),
               purity_best_pct=max((b["purity_pct"] for b in batches if b["purity_pct"] is not None), default=None))
    kinds = sorted({m["kind"] for m in ms})
    row.update(n_measurements=len(ms), kinds="," + ",".join(kinds) + "," if kinds else "")
    row.update(identity_status="unconfirmed" if batches else "no batches",  # no seeded batch is confirmed
               life_state=life_state(None, set(states)))
    apparent = merit.apparent_reasons([{**m, "sample": m["sample_id"]} for m in ms])  # what refresh() leaves out of best values (PUND contradicting a loop)
    loops = [m for m in ms if m["kind"] == "pe_loop" and m["id"] not in apparent and merit.is_figure_of_merit(m)]
    best_m = max(loops, key=lambda m: m["results"].get("pr_uC_cm2") or 0, default=None)
    best = best_m["results"] if best_m else None
    row.update(pr_max_uC_cm2=best["pr_uC_cm2"] if best else None, ec_kV_cm=best["ec_kV_cm"] if best else None,
               ps_uC_cm2=best["ps_uC_cm2"] if best else None,
               pr_max_t_K=best_m["temperature_K"] if best_m else None,
               pr_max_emax_kV_cm=best.get("emax_kV_cm") if best else None,
               pr_max_measurement_id=best_m["id"] if best_m else None)
    # refresh() takes the latest dielectric (highest measurement id) that has a peak.
    diel = [m["results"] for m in sorted(ms, key=lambda m: m["id"])
            if m["kind"] == "dielectric" and m["results"].get("t_peak_K") is not None]
    last = diel[-1] if diel else {}
    row.update(t_peak_K=last.get("t_peak_K"), eps_peak=last.get("eps_peak"), curie_constant_K=last.get("curie_constant_K"))
    peaks = sorted((p for m in ms if m["kind"] == "dsc" for p in m["results"]["peaks"]), key=lambda p: p["peak_K"])
    first = peaks[0] if peaks else {}
    row.update(dsc_t_K=first.get("peak_K"), dsc_ds_J_molK=first.get("ds_J_molK"), dsc_n_states=first.get("n_states"))
    measured = [b for b in bars if b["method"] in ("coalescence", "eyring")]
    computed = [b for b in bars if b["method"] == "gfn2-xtb"]
    row.update(barrier_measured_kcal_mol=measured[-1]["dg_kcal_mol"] if measured else None,
               barrier_computed_kcal_mol=computed[-1]["dg_kcal_mol"] if computed else None,
               dipole_D=computed[-1]["results"]["dipole_D"] if computed else None)
    depths = [m["results"]["bowl_depth_A"] for m in ms if m["kind"] == "crystal"]
    row["bowl_depth_A"] = max(depths) if depths else (computed[-1]["results"]["bowl_depth_A"] if computed else None)
    row["polar_phase"] = any(p["polar"] for p in phases) if phases else None
    row["space_groups"] = ", ".join(sorted({p["space_group"] for p in phases}))[:200]
    times = [updated_at] + [b["created_at"] for b in batches] + [m["created_at"] for m in ms] + \
        [b["created_at"] for b in bars]
    row["last_activity_at"] = max(times)
    return row


def _measurement_results(rng: random.Random, kind: str, barrier: float) -> tuple[dict, str, Optional[float]]:
    """(results, verdict, temperature_K) with the keys the analyses write."""
    if kind == "pe_loop":
        pr = rng.uniform(0.2, 8.0)
        verdict = "switching" if rng.random() < 0.55 else rng.choice(("paraelectric", "lossy_dielectric",
                                                                           "inconclusive"))
        return ({"pr_uC_cm2": pr, "ec_kV_cm": rng.uniform(2.0, 40.0), "ps_uC_cm2": pr * rng.uniform(1.1, 1.5),
                 "frequency_Hz": 100.0}, verdict, 298.15)
    if kind == "pund":
        return ({"dp_uC_cm2": rng.uniform(0.1, 8.0)}, rng.choice(("switching", "no_switching")), 298.15)
    if kind == "dielectric":
        return ({"t_peak_K": rng.uniform(150.0, 420.0), "eps_peak": rng.uniform(5.0, 80.0),
                 "curie_constant_K": rng.uniform(300.0, 6000.0)}, "", None)
    if kind == "dsc":
        ds = rng.uniform(2.0, 15.0)
        peaks = [{"peak_K": rng.uniform(150.0, 420.0), "ds_J_molK": ds, "n_states": math.exp(ds / R_J_MOLK)}]
        if rng.random() < 0.5:
            peaks.append({"peak_K": rng.uniform(430.0, 560.0), "ds_J_molK": rng.uniform(20.0, 60.0), "n_states": None})
        return ({"peaks": peaks}, "", None)
    if kind == "nmr_rates":
        return ({"dg_kcal_mol": barrier, "t_K": 298.15}, "", None)
    if kind == "crystal":
        return ({"bowl_depth_A": rng.uniform(0.7, 1.4)}, "", 120.0)
    raise ValueError(kind)


def registry_rows(records: list[dict[str, Any]], n_measurements: int, settings: Settings) -> dict[str, list[dict]]:
    """Every row of the seeded registry, by table name, with explicit ids (1..n)."""
    rng = random.Random(SEED + 1)
    nrng = np.random.default_rng(SEED + 2)
    n = len(records)
    per_compound = nrng.poisson(n_measurements / n, n)
    diff = n_measurements - int(per_compound.sum())
    while diff != 0:  # nudge random compounds until the total is exact
        i = int(nrng.integers(n))
        if diff > 0:
            per_compound[i] += 1
            diff -= 1
        elif per_compound[i] > 0:
            per_compound[i] -= 1
            diff += 1
    tables: dict[str, list[dict]] = {k: [] for k in ("scaffold", "compound", "batch", "sample", "rawfile", "measurement",
                                                     "barrierestimate", "crystalphase", "compoundsidechain",
                                                     "compoundstats")}
    for sid, (bowl, code) in enumerate(BOWL_CODES.items(), start=1):
        info = scaffold.validate_scaffold(scaffold.PARENT_BOWLS[bowl])
        tables["scaffold"].append({"id": sid, "code": code, "name": f"{bowl}-bridged bowl (bench)",
                                   "smiles": info.smiles, "bridge": info.bridge or "",
                                   "attachment_points": info.attachment_points, "core_formula": info.core_formula,
                                   "notes": "", "created_at": BASE_TIME})
    scaffold_id = {bowl: sid for sid, bowl in enumerate(BOWL_CODES, start=1)}
    batch_id = rawfile_id = measurement_id = barrier_id = phase_id = chain_id = 0
    for cid, rec in enumerate(records, start=1):
        created = BASE_TIME + timedelta(minutes=40 * cid)
        verdict = _pick(rng, VERDICT_WEIGHTS)
        if verdict not in VERDICT_LABELS:
            raise RuntimeError(f"bench seed uses an unknown verdict {verdict}")
        tables["compound"].append({
            "id": cid, "number": cid, "code": f"{settings.code_prefix}-{cid:0{settings.code_digits}d}",
            "label": f"bench {rec['bowl']} #{cid}", "smiles": rec["smiles"], "inchi": rec["inchi"],
            "inchikey": rec["inchikey"], "formula": rec["formula"], "mw": rec["mw"], "exact_mass": rec["exact_mass"],
            "heavy_atoms": rec["heavy_atoms"], "side_chains": rec["side_chains"],
            "side_chain_summary": rec["side_chain_summary"], "scaffold_id": scaffold_id[rec["bowl"]], "notes": "",
            "embargoed": rng.random() < 0.05, "archived": rng.random() < 0.02, "created_at": created,
            "updated_at": created, "created_by": "bench", "verdict_code": verdict, "verdict": None, "verdict_at": None,
            "override_code": None, "override_reason": "", "override_by": "", "override_at": None,
        })
        for ch in rec["side_chains"]:
            chain_id += 1
            tables["compoundsidechain"].append({"id": chain_id, "compound_id": cid, "kind": ch["kind"],
                                                "carbons": ch["carbons"], "branched": bool(ch["branched"]),
                                                "count": ch["count"]})
        batches = []
        for seq in range(1, 2 + (rng.random() < 0.6) + (rng.random() < 0.2)):
            batch_id += 1
            b_created = created + timedelta(hours=rng.uniform(1, 300))
            b = {"id": batch_id, "code": f"{settings.code_prefix}-{cid:0{settings.code_digits}d}-{seq}",
                 "compound_id": cid, "seq": seq, "made_on": b_created.date(), "chemist": "bench",
                 "scale_mg": rng.uniform(5, 500), "yield_pct": rng.uniform(5, 95) if rng.random() < 0.9 else None,
                 "purity_pct": rng.uniform(80, 99.9) if rng.random() < 0.8 else None,
                 "state": _pick(rng, BATCH_STATE_WEIGHTS), "notes": "", "archived": False, "created_at": b_created,
                 "created_by": "bench"}
            batches.append(b)
            # The batch's default sample (what the first upload to a batch creates), id = the batch's id.
            tables["sample"].append({"id": batch_id, "code": f"{b['code']}-S01", "batch_id": batch_id, "seq": 1,
                                     "form": "", "is_default": True, "archived": False, "created_at": b_created,
                                     "created_by": "bench"})
        tables["batch"].extend(batches)
        barrier = rng.uniform(10.0, 26.0)  # kcal/mol, the range of dynamic-NMR bowl inversions
        ms, bars, phases = [], [], []
        for _ in range(int(per_compound[cid - 1])):
            b = rng.choice(batches)
            kind = _pick(rng, KIND_WEIGHTS)
            rawfile_id += 1
            measurement_id += 1
            data = f"# bench measurement: {measurement_id}\n# kind: {kind}\nT (K),x ()\n300,{rng.random():.6f}\n".encode()
            sha = hashlib.sha256(data).hexdigest()
            m_created = b["created_at"] + timedelta(hours=rng.uniform(1, 500))
            tables["rawfile"].append({"id": rawfile_id, "sha256": sha, "size": len(data), "filename": f"{kind}-{measurement_id}.csv",
                                      "content_type": "text/csv", "data": data, "created_at": m_created})
            results, mverdict, t_K = _measurement_results(rng, kind, barrier + rng.gauss(0, 0.2))
            m = {"id": measurement_id, "batch_id": b["id"], "sample_id": b["id"], "kind": kind, "raw_file_id": rawfile_id, "sha256": sha,
                 "conditions": {}, "results": results, "flags": [], "verdict": mverdict,
                 "analysis_version": f"{kind}/bench", "temperature_K": t_K, "instrument": "", "operator": "bench",
                 "notes": "", "archived": False, "created_at": m_created, "analysed_at": m_created, "created_by": "bench"}
            ms.append(m)
            if kind == "nmr_rates":
                barrier_id += 1
                bars.append({"id": barrier_id, "compound_id": cid, "method": "eyring",
                             "dg_kcal_mol": results["dg_kcal_mol"], "dg_err_kcal_mol": 0.2, "t_K": 298.15,
                             "results": {}, "model": "", "measurement_id": measurement_id, "job_id": None,
                             "analysis_version": "kinetics/bench", "notes": "", "archived": False,
                             "created_at": m_created, "created_by": "bench"})
            if kind == "crystal":
                phase_id += 1
                polar = rng.random() < 0.4
                sg, number = rng.choice(POLAR_GROUPS if polar else NONPOLAR_GROUPS)
                results.update(space_group=sg, polar=polar)  # what the crystal analysis writes (kinds/crystal.py)
                phases.append({"id": phase_id, "compound_id": cid, "batch_id": b["id"], "measurement_id": measurement_id,
                               "space_group": sg, "space_group_number": number, "polar": polar,
                               "centrosymmetric": not polar and sg != "P2_1", "temperature_K": 120.0, "results": {},
                               "archived": False, "created_at": m_created})
        if rng.random() < 0.3:
            barrier_id += 1
            bars.append({"id": barrier_id, "compound_id": cid, "method": "gfn2-xtb",
                         "dg_kcal_mol": barrier + rng.gauss(1.0, 1.5), "dg_err_kcal_mol": None, "t_K": None,
                         "results": {"dipole_D": rng.uniform(1.5, 5.0), "bowl_depth_A": rng.uniform(0.8, 1.3)},
                         "model": "GFN2-xTB (bench)", "measurement_id": None, "job_id": None,
                         "analysis_version": "xtb/bench", "notes": "", "archived": False,
                         "created_at": created + timedelta(hours=2), "created_by": "bench"})
        tables["measurement"].extend(ms)
        tables["barrierestimate"].extend(bars)
        tables["crystalphase"].extend(phases)
        tables["compoundstats"].append(_stats_row(cid, rec["side_chains"], batches, ms, bars, phases, created))
    return tables


_ORDER = (("scaffold", Scaffold), ("compound", Compound), ("compoundsidechain", CompoundSideChain),
          ("batch", Batch), ("sample", Sample), ("rawfile", RawFile), ("measurement", Measurement), ("barrierestimate", BarrierEstimate),
          ("crystalphase", CrystalPhase), ("compoundstats", CompoundStats))


def insert_tables(engine: Engine, tables: dict[str, list[dict]], *, only: Iterable[str] | None = None) -> None:
    """Core INSERTs in foreign-key order, 5000 rows per executemany, one transaction."""
    wanted = set(only) if only is not None else None
    with engine.begin() as conn:
        for name, model in _ORDER:
            if wanted is not None and name not in wanted:
                continue
            rows = tables.get(name, [])
            for start in range(0, len(rows), 5000):
                conn.execute(insert(model.__table__), rows[start:start + 5000])
        if engine.dialect.name == "postgresql":
            # Explicit ids leave the sequences behind; later inserts through the app need them ahead.
            for name, _ in _ORDER:
                if (wanted is None or name in wanted) and name != "compoundstats" and tables.get(name):
                    conn.execute(text(f"SELECT setval(pg_get_serial_sequence('{name}', 'id'), "
                                      f"(SELECT max(id) FROM {name}))"))


def check_stats_sample(engine: Engine, ids: Iterable[int]) -> None:
    """Recompute a few compounds' stats with server.services.stats.refresh and compare (rolled back)."""
    from server.services import stats

    fields = [c.name for c in CompoundStats.__table__.columns if c.name != "compound_id"]
    with Session(engine) as session:
        for cid in ids:
            seeded = session.get(CompoundStats, cid)
            before = {f: getattr(seeded, f) for f in fields}
            session.expunge(seeded)
            fresh = stats.refresh(session, session.get(Compound, cid))
            session.flush()
            after = {f: getattr(fresh, f) for f in fields}
            wrong = {f: (before[f], after[f]) for f in fields
                     if not (before[f] == after[f] or (isinstance(before[f], float) and after[f] is not None
                                                       and math.isclose(before[f], after[f], rel_tol=1e-12)))}
            if wrong:
                raise RuntimeError(f"bench seed: compound {cid} stats differ from stats.refresh: {wrong}")
        session.rollback()


def _alembic_head() -> str:
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head() or "none"


def seed_database(url: str, n_compounds: int, n_measurements: int, *, with_user: bool = True) -> SeedInfo:
    """Migrate an EMPTY database at ``url`` and fill it (compounds, evidence, stats, one viewer)."""
    upgrade(url)
    records = compound_records(n_compounds)
    settings = Settings()
    tables = registry_rows(records, n_measurements, settings)
    engine = make_engine(url)
    try:
        insert_tables(engine, tables)
        check_stats_sample(engine, sorted({1, 2, 3, n_compounds // 2, n_compounds} |
                                          {int(i) for i in np.linspace(1, n_compounds, 20)}))
        if with_user:
            with Session(engine) as session:
                accounts.create_user(session=session, username=BENCH_USER, password=BENCH_PASSWORD, role="viewer",
                                     actor="bench")
        if engine.dialect.name == "sqlite":
            with engine.connect() as conn:
                conn.execute(text("ANALYZE"))
                conn.execute(text("PRAGMA wal_checkpoint(TRUNCATE)"))
    finally:
        engine.dispose()
    return SeedInfo(url=url, compounds=n_compounds, measurements=n_measurements)


def seeded_sqlite(n_compounds: int = 10_000, n_measurements: int = 50_000) -> SeedInfo:
    """A seeded SQLite file under bench/results/, built once per seed version, sizes and schema head."""
    RESULTS_DIR.mkdir(parents=True, exist_ok=True)
    path = RESULTS_DIR / f"registry-v{SEED_VERSION}-{n_compounds}-{n_measurements}-{_alembic_head()}.db"
    url = f"sqlite:///{path}"
    if not path.exists():
        tmp = path.with_name(path.name + ".building")
        for leftover in (tmp, Path(str(tmp) + "-wal"), Path(str(tmp) + "-shm")):
            leftover.unlink(missing_ok=True)
        seed_database(f"sqlite:///{tmp}", n_compounds, n_measurements)
        tmp.replace(path)
    return SeedInfo(url=url, compounds=n_compounds, measurements=n_measurements)


def database_name(url: str) -> str:
    return make_url(url).database or ""
