"""The embargo as a data boundary (issue 12, items 1-7): a caller who may not see embargoed
compounds (an upload token, a visitor) gets no answer that depends on an embargoed compound's
structure, label, notes or mass (``server/access.py``).

The property test builds the same registry twice, on the same back end, differing only in the
embargoed compound: world A registers it on the S-bridged bowl with octylthio chains, world B on the
CH2-bridged bowl with butoxy chains, with other labels and notes (so formula, masses, scaffold,
side chains, chain carbons differ). It then asks every GET route of the app (web and API alike,
enumerated from ``app.routes``), with the registry filters and sorts that used to leak, as an upload
token and as a visitor, and requires byte-identical answers after normalising only what is volatile
per request or per run (listed in :func:`normalise`). Runs on SQLite and PostgreSQL.
"""

from __future__ import annotations

import re
import shutil

import pytest
from fastapi.testclient import TestClient
from sqlalchemy.engine import make_url
from sqlmodel import Session, select

from server.app import create_app
from server.chem.scaffold import PARENT_BOWLS
from server.ingest.table import to_csv_bytes
from server.models import Compound, Job
from server.synth.dsc import dsc_trace
from tests.conftest import _empty_pg
from tests.factories import bearer, login_as, make_token

from .conftest import loop_bytes

# The two versions of the embargoed compound (invented; both on the group's bowl scaffolds).
WORLDS = {
    "A": {"scaffold": "BWL-S", "side_chain": {"kind": "alkylthio", "carbons": 8},
          "label": "octylthio S-bowl, Q-7", "notes": "six SC8H17 arms on the S bowl"},
    "B": {"scaffold": "BWL-C", "side_chain": {"kind": "alkoxy", "carbons": 4},
          "label": "butoxy CH2-bowl, Q-9", "notes": "six OC4H9 arms on the CH2 bowl"},
}

# Query strings that used to leak (issue 12 items 1-2), asked of every route that reads a view.
VIEW_QUERIES = ("", "sort=mw", "sort=mw&dir=asc", "sort=carbons", "sort=scaffold", "sort=label",
                "sort=barrier_computed", "chain_kind=alkylthio", "chain_kind=alkoxy", "c_min=5", "c_max=5",
                "branched=no", "main_kind=alkylthio", "main_c=8", "main_c=4", "scaffold=BWL-S", "scaffold=BWL-C",
                "bridge=S", "bridge=CH2", "q=Q-7", "q=SC8", "substructure=CSc1ccccc1", "x=mw", "x=mw&y=carbons",
                "barrier_source=computed&barrier_min=0")
VIEW_ROUTES = {"/compounds", "/compounds/export.{fmt}", "/api/v1/compounds", "/api/v1/search", "/explorer",
               "/outcomes", "/explorer/plot", "/outcomes/map"}


def normalise(text: str) -> str:
    """What may differ between the two runs without saying anything about the structure:
    CSRF tokens (random per session), timestamps (wall-clock at registration and per request),
    and SQLite/PostgreSQL-independent nothing else: ids and codes are equal by construction."""
    text = re.sub(r'(csrf[-_]token"?\s*(?:content|value)?="?)[^"&\s]+', r"\1<csrf>", text, flags=re.I)
    text = re.sub(r'name="csrf_token" value="[^"]*"', 'name="csrf_token" value="<csrf>"', text)
    text = re.sub(r'"csrf[^"]*":\s*"[^"]*"', '"csrf":"<csrf>"', text)
    text = re.sub(r"\d{4}-\d\d-\d\d[T ]\d\d:\d\d(:\d\d(\.\d+)?)?(\+00:00|Z)?", "<time>", text)
    return text


def _reset(url: str, template) -> None:  # noqa: ANN001
    if url.startswith("sqlite"):
        shutil.copyfile(template, make_url(url).database)
    else:
        _empty_pg(url)


def _build(settings, which: str) -> tuple[dict, dict]:  # noqa: ANN001
    """One world; answers every GET route for the upload token and the visitor. Returns (answers, info)."""
    app = create_app(settings)
    answers: dict[str, str] = {}
    try:
        with TestClient(app) as client, TestClient(app) as visitor, Session(app.state.engine) as session:
            w = bearer(make_token(session, scope="write", name="registrar"))
            up = bearer(make_token(session, scope="upload", name="instrument-pc"))
            admin_csrf = login_as(client, session, role="admin", name="boss")
            assert client.post("/status/public", data={"enabled": "on", "csrf_token": admin_csrf}).status_code == 200
            for code, bridge in (("BWL-C", "CH2"), ("BWL-S", "S")):
                r = client.post("/api/v1/scaffolds", json={"code": code, "name": f"{bridge} bowl",
                                                           "smiles": PARENT_BOWLS[bridge]}, headers=w)
                assert r.status_code == 201, r.text
            for n in (2, 6):
                r = client.post("/api/v1/compounds", json={"scaffold": "BWL-C", "label": f"open C{n}",
                                                           "side_chain": {"kind": "alkoxy", "carbons": n}}, headers=w)
                assert r.status_code == 201, r.text
            r = client.post("/api/v1/compounds", json={**WORLDS[which], "embargoed": True}, headers=w)
            assert r.status_code == 201, r.text
            secret = r.json()
            code = secret["code"]
            batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=w).json()
            pe = client.post(f"/api/v1/batches/{batch['code']}/measurements", data={"kind": "pe_loop"},
                             files={"file": ("m.csv", loop_bytes(5), "text/csv")}, headers=w)
            assert pe.status_code == 201, pe.text
            # DSC results carry the molar mass (molar and specific enthalpy): the upload token's receipt must not.
            trace = dsc_trace([{"kind": "melting", "t_K": 400.0, "dh_J_g": 80.0, "width_K": 1.5}], t_start_K=330,
                              t_end_K=450, rate_K_min=10.0, mass_mg=5.0)
            dsc = client.post(f"/api/v1/batches/{batch['code']}/measurements", data={"kind": "dsc", "mass": "5 mg"},
                              files={"file": ("dsc.csv", to_csv_bytes(trace), "text/csv")}, headers=up)
            assert dsc.status_code == 201, dsc.text
            answers["POST upload receipt"] = normalise(dsc.text)
            job = client.post(f"/api/v1/compounds/{code}/estimates", json={}, headers=w)
            assert job.status_code == 202, job.text
            # A finished estimate whose result follows from the structure (as the worker would store it).
            row = session.get(Job, job.json()["job"])
            comp = session.exec(select(Compound).where(Compound.code == code)).one()
            row.state, row.progress, row.message = "done", 1.0, f"done for {comp.smiles}"
            row.result = {"smiles_used": comp.smiles, "barrier_kcal_mol": comp.mw / 50.0, "bowl_depth_A": 0.9}
            session.add(row)
            session.commit()
            params = {"code": code, "batch_code": batch["code"], "measurement_id": dsc.json()["id"],
                      "job_id": row.id, "fmt": "csv", "kind": "dsc", "scaffold": "BWL-S"}
            info = {"code": code, "pe": pe.json()["id"], "dsc": dsc.json()["id"], "secret": secret,
                    "mw": comp.mw, "formula": comp.formula, "up": up}
            for path in sorted(_get_routes(app)):
                url = _url(path, params)
                queries = VIEW_QUERIES if path in VIEW_ROUTES else ("",)
                for qs in queries:
                    for who, c, headers in (("upload", client, up), ("visitor", visitor, {})):
                        if who == "upload":
                            c.cookies.clear()
                        r = c.get(url + ("?" + qs if qs else ""), headers=headers, follow_redirects=False)
                        assert r.status_code < 500, (url, qs, r.status_code, r.text[:300])
                        answers[f"{who} GET {url}?{qs}"] = f"{r.status_code}\n" + normalise(r.text)
            for mid in (info["pe"], info["dsc"]):
                r = client.get(f"/api/v1/measurements/{mid}/raw", headers=up)
                answers[f"upload raw {mid}"] = str(r.status_code) + r.text
    finally:
        app.state.engine.dispose()
    return answers, info


def _get_routes(app) -> set[str]:  # noqa: ANN001
    """Every GET route of the app, web and API alike, walking included routers (FastAPI keeps them as
    branches); left out: the OpenAPI document and its two viewers (they describe the API, no data),
    and static assets (files in the package)."""
    from fastapi.routing import APIRoute

    def walk(routes, prefix=""):  # noqa: ANN001, ANN202
        for r in routes:
            if hasattr(r, "original_router"):
                yield from walk(r.original_router.routes, prefix + (r.include_context.prefix or ""))
            elif isinstance(r, APIRoute) and "GET" in r.methods:
                yield prefix + r.path

    skip = ("/openapi.json", "/docs", "/redoc", "/docs/oauth2-redirect")
    return {p for p in walk(app.routes) if p not in skip and not p.startswith(("/static", "/assets/"))}


def _url(path: str, params: dict) -> str:
    url = re.sub(r"\{(\w+)(:\w+)?\}", lambda m: str(params.get(m.group(1), "1")), path)
    if path.startswith("/batches/{code}"):
        url = url.replace(f"/batches/{params['code']}/", f"/batches/{params['batch_code']}/")
    return url


def test_no_answer_depends_on_an_embargoed_structure(settings, db_url, sqlite_template):
    a, info_a = _build(settings, "A")
    _reset(db_url, sqlite_template)
    b, info_b = _build(settings, "B")
    # The worlds really differ, so the comparison below can fail (and a member would see the difference).
    assert info_a["code"] == info_b["code"] and info_a["mw"] != info_b["mw"]
    assert info_a["formula"] != info_b["formula"] and info_a["secret"]["scaffold"] != info_b["secret"]["scaffold"]
    assert a.keys() == b.keys() and len(a) > 150, len(a)
    differ = sorted(k for k in a if a[k] != b[k])
    assert not differ, f"{len(differ)} answers depend on the embargoed structure, e.g.:\n" + "\n".join(differ[:40])

