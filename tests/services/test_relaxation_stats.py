"""The compound's dielectric-relaxation Ea is stored in CompoundStats (kinds/dielectric_spectrum.py, stats rule
``stats/3``) and the compound page and the registry export read it from there (SQLite and PostgreSQL).

The spectra are generated from the Cole-Cole function (Cole and Cole, J. Chem. Phys. 9, 341 (1941); form as in
Kremer and Schoenhals, Broadband Dielectric Spectroscopy, Springer 2003, ch. 1) with relaxation times from an
Arrhenius law (the kind's example: tau0 1e-13 s, Ea 40 kJ/mol = 9.560 kcal/mol with 1 cal = 4.184 J) or from a
Vogel-Fulcher law (Vogel 1921; Fulcher 1925), whose curvature in 1/T makes the Arrhenius Ea an apparent mean.
"""

from __future__ import annotations

import csv
import io
import json
import math
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from server.analysis.relaxation import havriliak_negami
from server.kinds.base import example_csv
from server.kinds import KINDS
from server.kinds.base import EXAMPLE_SMILES
from server.models import CompoundStats
from server.services import stats
from tests.factories import login_as, soup

EA_KCAL_MOL = 40.0 / 4.184  # the example's Arrhenius law


def _vogel_fulcher_file() -> bytes:
    """tau = 1e-12 s exp(1200 K / (T - 160 K)), Cole-Cole alpha 0.85, 2 % noise: curved in 1/T."""
    rng = np.random.default_rng(11)
    f = np.logspace(-1, 6, 43)
    parts = []
    for t in (205.0, 215.0, 225.0, 240.0, 255.0, 270.0, 290.0):
        eps = havriliak_negami(f, 3.0, 8.0, 1e-12 * math.exp(1200.0 / (t - 160.0)), 0.85, 1.0, 0.0)
        parts.append(pd.DataFrame({"T (K)": t, "f (Hz)": f, "eps_r ()": eps.real * (1 + 0.02 * rng.standard_normal(f.size)),
                                   "eps_i ()": -eps.imag * (1 + 0.02 * rng.standard_normal(f.size))}))
    return example_csv(pd.concat(parts, ignore_index=True), {}, {"model": "cole_cole"})


def _upload(client, csrf, kind, name, raw) -> str:
    r = client.post("/batches/RVZ-00001-B01/upload", data={"kind": kind, "csrf_token": csrf},
                    files={"file": (name, raw)}, follow_redirects=False)
    assert r.status_code == 303, r.text
    return r.headers["location"].rstrip("/")


def _stats(session) -> CompoundStats:
    session.expire_all()
    return session.get(CompoundStats, 1)


def test_relaxation_ea_is_stored_shown_and_exported(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": EXAMPLE_SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    ex = KINDS["nmr_rates"].example()
    _upload(client, csrf, "nmr_rates", ex.filename, ex.raw)
    ex = KINDS["dielectric_spectrum"].example()
    first = _upload(client, csrf, "dielectric_spectrum", ex.filename, ex.raw)
    row = _stats(session)
    assert abs(row.relax_ea_kcal_mol - EA_KCAL_MOL) < 3 * row.relax_ea_err_kcal_mol + 0.1
    assert 0 < row.relax_ea_err_kcal_mol < 0.5 and row.relax_ea_apparent is False
    assert f"/measurements/{row.relax_ea_measurement_id}" == first
    page = soup(client.get("/compounds/RVZ-00001").text)
    sv = page.find(id="solid-vs-solution")
    assert sv.find("a")["href"] == first and "apparent" not in sv.text
    export = next(csv.DictReader(io.StringIO(client.get("/compounds/export.csv").text)))
    assert abs(float(export["relaxation Ea (kcal/mol)"]) - EA_KCAL_MOL) < 3 * row.relax_ea_err_kcal_mol + 0.1
    assert export["relaxation Ea apparent"] == "False"

    # a later spectrum whose ln tau is curved in 1/T: its Ea is stored, and shown and exported as apparent
    second = _upload(client, csrf, "dielectric_spectrum", "vf.csv", _vogel_fulcher_file())
    row = _stats(session)
    assert row.relax_ea_apparent is True and f"/measurements/{row.relax_ea_measurement_id}" == second
    sv = soup(client.get("/compounds/RVZ-00001").text).find(id="solid-vs-solution")
    assert sv.find("a")["href"] == second and sv.text.startswith("Solid against solution: apparent E")
    export = next(csv.DictReader(io.StringIO(client.get("/compounds/export.csv").text)))
    assert export["relaxation Ea apparent"] == "True"


def _explorer_points(client) -> list[tuple[float, float]]:
    page = soup(client.get("/explorer?x=relax_ea&y=barrier_measured&group=verdict").text)
    fig = json.loads(page.find("script", id="explorer-figure").string)
    assert fig["layout"]["xaxis"]["title"]["text"] == "relaxation Ea, solid (kcal/mol)"
    return [(x, y) for t in fig["data"] if t["mode"] == "markers" for x, y in zip(t["x"], t["y"])]


def test_the_explorer_plots_the_relaxation_ea_and_leaves_an_apparent_one_out(client, session):
    """Ea against the solution barrier (the kind's example NMR rates): plotted from the Arrhenius spectrum
    (40 kJ/mol = 9.560 kcal/mol, the generating law), and gone once the latest spectrum is curved in 1/T
    (Vogel-Fulcher), whose Ea is only apparent, as the explorer leaves apparent Pr and Ec out."""
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": EXAMPLE_SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    ex = KINDS["nmr_rates"].example()
    _upload(client, csrf, "nmr_rates", ex.filename, ex.raw)
    assert _explorer_points(client) == []  # no spectrum yet: no Ea
    ex = KINDS["dielectric_spectrum"].example()
    _upload(client, csrf, "dielectric_spectrum", ex.filename, ex.raw)
    row = _stats(session)
    [(x, y)] = _explorer_points(client)
    assert abs(x - EA_KCAL_MOL) < 3 * row.relax_ea_err_kcal_mol + 0.1
    assert x == pytest.approx(row.relax_ea_kcal_mol) and y == pytest.approx(row.barrier_measured_kcal_mol)
    _upload(client, csrf, "dielectric_spectrum", "vf.csv", _vogel_fulcher_file())
    assert _stats(session).relax_ea_apparent is True
    assert _explorer_points(client) == []


def test_the_stats_of_the_kind_take_the_latest_spectrum_with_an_ea():
    take = KINDS["dielectric_spectrum"].stats

    def m(i, results):
        return SimpleNamespace(id=i, results=results)

    assert take([]) == {"relax_ea_kcal_mol": None, "relax_ea_err_kcal_mol": None, "relax_ea_apparent": None,
                        "relax_ea_measurement_id": None}
    got = take([m(1, {"ea_kcal_mol": 9.5, "arrhenius": {"ea_err_kcal_mol": 0.2, "curved": True}}),
                m(2, {"ea_kcal_mol": 9.8, "arrhenius": {"ea_err_kcal_mol": 0.1, "curved": False}}),
                m(3, {"ea_kcal_mol": None, "arrhenius": {"temperatures": 1}})])  # too few temperatures: no Ea
    assert got == {"relax_ea_kcal_mol": 9.8, "relax_ea_err_kcal_mol": 0.1, "relax_ea_apparent": False,
                   "relax_ea_measurement_id": 2}


def test_the_rule_moved_so_older_rows_are_rebuilt(session):
    # rows built under stats/2 have no relaxation Ea: ensure_current rebuilds them once
    assert stats.RULE == "stats/4"
    from server.models import SiteSetting

    session.add(SiteSetting(key=stats.RULE_KEY, value="stats/2"))
    session.commit()
    stats.ensure_current(session)
    assert stats.stored_rule(session) == "stats/4" and stats.ensure_current(session) == 0
