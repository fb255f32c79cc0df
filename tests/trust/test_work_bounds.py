"""Bounded work per request (issue 12, item 8): a CIF past the site or cell-atom bound is refused
with 413 naming the limit, before its work grows, and nothing is stored.

The files are invented: a P1 cell listing more sites than ``crystal.MAX_CIF_SITES``, and a small
asymmetric unit in a space group whose images give more than ``crystal.MAX_CELL_ATOMS`` atoms.
"""

from __future__ import annotations

import time

import pytest

from server.analysis import crystal
from server.errors import OverLimit
from tests.factories import bearer, make_token

from .conftest import counts, seed_batch


def _p1_cif(n_sites: int, *, a_A: float = 200.0) -> bytes:
    """A P1 cell of ``n_sites`` carbon atoms on a 1.5 A grid (no bonds between grid rows matter here)."""
    lines = ["data_rmx_many", "_space_group_name_H-M_alt 'P 1'", "loop_", "_space_group_symop_operation_xyz", "x,y,z",
             f"_cell_length_a {a_A}", f"_cell_length_b {a_A}", f"_cell_length_c {a_A}", "_cell_angle_alpha 90",
             "_cell_angle_beta 90", "_cell_angle_gamma 90", "loop_", "_atom_site_label", "_atom_site_type_symbol",
             "_atom_site_fract_x", "_atom_site_fract_y", "_atom_site_fract_z"]
    side = int(round(n_sites ** (1 / 3))) + 1
    k = 0
    for i in range(side):
        for j in range(side):
            for m in range(side):
                if k == n_sites:
                    break
                k += 1
                lines.append(f"C{k} C {i * 1.5 / a_A:.6f} {j * 1.5 / a_A:.6f} {m * 1.5 / a_A:.6f}")
    return ("\n".join(lines) + "\n").encode()


def test_too_many_sites_is_refused_at_once():
    raw = _p1_cif(crystal.MAX_CIF_SITES + 1)
    t0 = time.perf_counter()
    with pytest.raises(OverLimit) as err:
        crystal.analyse_cif(raw)
    assert err.value.limit == "cif_sites" and err.value.value == crystal.MAX_CIF_SITES and err.value.status == 413
    assert time.perf_counter() - t0 < 10  # refused before any bond perception (generous for a loaded machine)


def test_too_many_cell_atoms_is_refused(monkeypatch):
    # 40 sites in P2_1/c (4 images each) = 160 cell atoms, past a lowered bound of 100.
    monkeypatch.setattr(crystal, "MAX_CELL_ATOMS", 100)
    lines = _p1_cif(40, a_A=60.0).decode().replace("'P 1'", "'P 1 21/c 1'").replace(
        "x,y,z", "x,y,z\n-x,y+1/2,-z+1/2\n-x,-y,-z\nx,-y+1/2,z+1/2")
    with pytest.raises(OverLimit) as err:
        crystal.analyse_cif(lines.encode())
    assert err.value.limit == "cell_atoms"


def test_the_upload_answers_413_naming_the_limit_and_stores_nothing(app, client, session, settings):
    engine = app.state.engine
    code, batch = seed_batch(engine, settings)
    writer = bearer(make_token(session, scope="write", name="xtal-pc"))
    before = counts(engine)
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "crystal"},
                    files={"file": ("big.cif", _p1_cif(crystal.MAX_CIF_SITES + 5), "chemical/x-cif")}, headers=writer)
    assert r.status_code == 413, r.text
    assert r.json()["limit"] == "cif_sites" and r.json()["limit_value"] == crystal.MAX_CIF_SITES
    assert counts(engine) == before


def test_an_xlsx_past_the_row_bound_is_413(monkeypatch):
    import pandas as pd

    from server.ingest import table

    frame = pd.DataFrame({"E (kV/cm)": [float(i) for i in range(60)], "P (uC/cm2)": [0.1 * i for i in range(60)]})
    raw = table.to_xlsx_bytes(frame)
    assert len(table.read_table(raw).frame) == 60  # control: within the bound it reads
    monkeypatch.setattr(table, "MAX_XLSX_ROWS", 50)
    with pytest.raises(OverLimit) as err:
        table.read_table(raw)
    assert err.value.limit == "xlsx_rows" and err.value.status == 413
    monkeypatch.setattr(table, "MAX_XLSX_ROWS", 1000)
    monkeypatch.setattr(table, "MAX_XLSX_CELLS", 100)
    with pytest.raises(OverLimit) as err:
        table.read_table(raw)
    assert err.value.limit == "xlsx_cells"
