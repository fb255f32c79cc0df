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

import hashlib
import json
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
from server.services import measurements
from server.synth.cif import bowl_crystal_cif
from server.synth.dsc import dsc_trace
from tests.api.test_attachments import micrograph
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
VIEW_ROUTES = {"/compounds", "/compounds/count", "/compounds/export.{fmt}", "/api/v1/compounds", "/api/v1/search", "/explorer",
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
            assert client.post("/status/public", data={"enabled": "on", "confirm": "on", "csrf_token": admin_csrf}).status_code == 200
            for code, bridge in (("BWL-C", "CH2"), ("BWL-S", "S")):
                r = client.post("/api/v1/scaffolds", json={"code": code, "name": f"{bridge} bowl",
                                                           "smiles": PARENT_BOWLS[bridge]}, headers=w)
                assert r.status_code == 201, r.text
            open_codes = []
            for n in (2, 6):
                r = client.post("/api/v1/compounds", json={"scaffold": "BWL-C", "label": f"open C{n}",
                                                           "side_chain": {"kind": "alkoxy", "carbons": n}}, headers=w)
                assert r.status_code == 201, r.text
                open_codes.append(r.json()["code"])
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
            # Comments on the compound, its batch, sample and measurement that give the structure away.
            sample = pe.json()["sample"]
            comment_ids = []
            for plural, ref in (("compounds", code), ("batches", batch["code"]), ("samples", sample),
                                ("measurements", dsc.json()["id"])):
                r = client.post(f"/api/v1/{plural}/{ref}/comments", headers=w,
                                json={"body": f"**{WORLDS[which]['label']}**: {WORLDS[which]['notes']}"})
                assert r.status_code == 201, r.text
                comment_ids.append(r.json()["id"])
            # Images on the same four objects, different in each world, captioned with the label (issue 23).
            attachment_ids, attachment_shas = [], []
            for i, (plural, ref) in enumerate((("compounds", code), ("batches", batch["code"]),
                                               ("samples", sample), ("measurements", dsc.json()["id"]))):
                image = micrograph("PNG", size=(64, 48), seed={"A": 10, "B": 20}[which] + i)
                r = client.post(f"/api/v1/{plural}/{ref}/attachments", headers=w,
                                files={"file": ("pom.png", image, "image/png")},
                                data={"caption": WORLDS[which]["label"], "polariser": "crossed"})
                assert r.status_code == 201, r.text
                attachment_ids.append(r.json()["id"])
                attachment_shas.append(r.json()["sha256"])
            # One archived with a reason that names the structure: its history is as embargoed as its bytes.
            r = client.post(f"/api/v1/attachments/{attachment_ids[1]}/archive", headers=w,
                            json={"reason": f"retaken: {WORLDS[which]['notes']}"})
            assert r.status_code == 200, r.text
            # A paper freeze holding the embargoed compound beside an open one (issue 23).
            fz = client.post("/api/v1/freezes", json={"name": "bowl-chains manuscript",
                                                      "compounds": [open_codes[0], code]}, headers=w)
            assert fz.status_code == 201, fz.text
            params = {"freeze_id": fz.json()["id"], "code": code, "batch_code": batch["code"],
                      "measurement_id": dsc.json()["id"],
                      "sample_code": sample, "comment_id": comment_ids[0], "attachment_id": attachment_ids[0],
                      "job_id": row.id, "fmt": "csv", "kind": "dsc", "scaffold": "BWL-S"}
            info = {"code": code, "pe": pe.json()["id"], "dsc": dsc.json()["id"], "secret": secret,
                    "mw": comp.mw, "formula": comp.formula, "up": up, "attachments": attachment_shas,
                    "comments": [client.get(f"/api/v1/{p}/{r}/comments", headers=w).json()["items"][0]["body"]
                                 for p, r in (("compounds", code), ("batches", batch["code"]), ("samples", sample),
                                              ("measurements", dsc.json()["id"]))]}
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
            for aid in attachment_ids:
                for what in ("", "/original", "/thumbnail"):
                    r = client.get(f"/api/v1/attachments/{aid}{what}", headers=up)
                    answers[f"upload attachment {aid}{what}"] = str(r.status_code) + r.text
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
        url = re.sub(r"^/batches/[^/]+", f"/batches/{params['batch_code']}", url)
    if path.startswith(("/api/v1/batches/{code}/comments", "/api/v1/batches/{code}/attachments")):
        url = url.replace(f"/batches/{params['code']}/", f"/batches/{params['batch_code']}/")
    if path.startswith("/samples/{code}"):
        url = url.replace(f"/samples/{params['code']}", f"/samples/{params['sample_code']}")
    return url


def test_no_answer_depends_on_an_embargoed_structure(settings, db_url, sqlite_template):
    a, info_a = _build(settings, "A")
    _reset(db_url, sqlite_template)
    b, info_b = _build(settings, "B")
    # The worlds really differ, so the comparison below can fail (and a member would see the difference).
    assert info_a["code"] == info_b["code"] and info_a["mw"] != info_b["mw"]
    assert info_a["formula"] != info_b["formula"] and info_a["secret"]["scaffold"] != info_b["secret"]["scaffold"]
    assert all(ca != cb for ca, cb in zip(info_a["comments"], info_b["comments"], strict=True))  # a member sees them
    assert all(sa != sb for sa, sb in zip(info_a["attachments"], info_b["attachments"], strict=True))
    assert a.keys() == b.keys() and len(a) > 150, len(a)
    differ = sorted(k for k in a if a[k] != b[k])
    assert not differ, f"{len(differ)} answers depend on the embargoed structure, e.g.:\n" + "\n".join(differ[:40])



# --- one regression test per finding (issue 12, items 3, 5, 7; 1-2, 4 and 6 also in the property test) ----


@pytest.fixture
def hidden(client, session):
    """An embargoed naphthalene (C10H8, an invented registration) with a batch; a write, an upload
    and a read token, and a member session."""
    w = bearer(make_token(session, scope="write", name="registrar"))
    r = client.post("/api/v1/compounds", json={"smiles": "c1ccc2ccccc2c1", "embargoed": True,
                                               "label": "naphthalene N-1", "notes": "two fused rings"}, headers=w)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=w).json()["code"]
    return {"code": code, "batch": batch, "write": w, "formula": r.json()["formula"],
            "up": bearer(make_token(session, scope="upload", name="instrument-pc")),
            "read": bearer(make_token(session, scope="read", name="reader-pc", sees_embargoed=True)),
            "plain_read": bearer(make_token(session, scope="read", name="plain-reader"))}


def test_crystal_receipt_does_not_quote_the_registered_formula(client, hidden):
    """Item 3: a CIF whose content disagrees with the registration gets a formula_mismatch flag; for an
    upload token the flag keeps its code but not its message (which names the registered formula)."""
    # The CH2-bridged parent bowl (C21H12), as in tests/api/test_verdicts.py: not the registered C10H8.
    cif = bowl_crystal_cif("C1c2ccc3Cc4ccc5Cc6ccc1c7c6c5c4c3c27", "P2_1", head_to_tail=True)
    r = client.post(f"/api/v1/batches/{hidden['batch']}/measurements", data={"kind": "crystal"},
                    files={"file": ("x.cif", cif, "chemical/x-cif")}, headers=hidden["up"])
    assert r.status_code == 201, r.text
    receipt = r.json()
    assert "formula_mismatch" in {f["code"] for f in receipt["flags"]}
    assert hidden["formula"] not in r.text and "C10" not in r.text and receipt["results"] == {}
    assert {f["message"] for f in receipt["flags"]} == {measurements.RECEIPT_WITHHELD}
    assert receipt["sha256"] == hashlib.sha256(cif if isinstance(cif, bytes) else cif.encode()).hexdigest()
    # Members see everything (control: the message does quote the formula).
    full = client.get(f"/api/v1/measurements/{receipt['id']}", headers=hidden["read"]).json()
    assert any("C10" in f["message"] for f in full["flags"] if f["code"] == "formula_mismatch"), full["flags"]
    assert full["results"]


def test_dsc_receipt_has_no_molar_quantities(client, hidden):
    """Item 3: DSC results carry the molar mass, and molar over specific enthalpy gives it."""
    trace = dsc_trace([{"kind": "melting", "t_K": 400.0, "dh_J_g": 80.0, "width_K": 1.5}], t_start_K=330,
                      t_end_K=450, rate_K_min=10.0, mass_mg=5.0)
    r = client.post(f"/api/v1/batches/{hidden['batch']}/measurements", data={"kind": "dsc", "mass": "5 mg"},
                    files={"file": ("dsc.csv", to_csv_bytes(trace), "text/csv")}, headers=hidden["up"])
    assert r.status_code == 201, r.text
    assert r.json()["results"] == {} and "128.1" not in r.text  # naphthalene 128.17 g/mol
    listed = client.get("/api/v1/measurements", headers=hidden["up"]).json()["items"]
    assert [m["results"] for m in listed] == [{}]
    full = client.get(f"/api/v1/measurements/{r.json()['id']}", headers=hidden["read"]).json()
    assert "128.1" in json.dumps(full["results"])  # control: the member view carries the molar mass


def test_raw_files_of_embargoed_compounds_are_refused_to_upload_tokens(client, hidden):
    """Item 5."""
    r = client.post(f"/api/v1/batches/{hidden['batch']}/measurements", data={"kind": "pe_loop"},
                    files={"file": ("m.csv", loop_bytes(3), "text/csv")}, headers=hidden["up"])
    assert r.status_code == 201, r.text
    raw = f"/api/v1/measurements/{r.json()['id']}/raw"
    assert client.get(raw, headers=hidden["up"]).status_code == 403
    ok = client.get(raw, headers=hidden["read"])
    assert ok.status_code == 200 and ok.content == loop_bytes(3)


def test_jobs_summary_withholds_smiles_used(client, session, hidden):
    """Item 4: /api/v1/jobs/summary handed out ``smiles_used`` while the other job routes did not."""
    job = client.post(f"/api/v1/compounds/{hidden['code']}/estimates", json={}, headers=hidden["write"]).json()["job"]
    row = session.get(Job, job)
    row.state, row.result = "done", {"smiles_used": "c1ccc2ccccc2c1", "barrier_kcal_mol": 1.0}
    row.finished_at = row.created_at
    session.add(row)
    session.commit()
    summary = client.get("/api/v1/jobs/summary", headers=hidden["up"])
    assert summary.status_code == 200 and "c1ccc2" not in summary.text and "smiles_used" not in summary.text
    assert "c1ccc2ccccc2c1" in client.get("/api/v1/jobs/summary", headers=hidden["read"]).text  # control


def test_partial_web_edit_keeps_the_embargo_and_the_scaffold(client, session):
    """Item 7: a form post that changes only the label must not lift the embargo nor clear the scaffold."""
    w = bearer(make_token(session, scope="write", name="registrar"))
    assert client.post("/api/v1/scaffolds", json={"code": "BWL-C", "name": "CH2 bowl", "smiles": PARENT_BOWLS["CH2"]},
                       headers=w).status_code == 201
    r = client.post("/api/v1/compounds", json={"scaffold": "BWL-C", "side_chain": {"kind": "alkoxy", "carbons": 4},
                                               "embargoed": True, "label": "first"}, headers=w)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    csrf = login_as(client, session, role="member", name="mia")
    assert client.post(f"/compounds/{code}/edit", data={"label": "second", "csrf_token": csrf}).status_code in (200, 303)
    after = client.get(f"/api/v1/compounds/{code}", headers=w).json()
    assert (after["label"], after["embargoed"], after["scaffold"]) == ("second", True, "BWL-C")
    # The full form (as the page sends it, box unticked) still lifts the embargo: the control.
    page = client.get(f"/compounds/{code}").text
    assert 'name="embargoed_field"' in page
    client.post(f"/compounds/{code}/edit", data={"label": "second", "scaffold": "BWL-C", "notes": "",
                                                 "embargoed_field": "1", "csrf_token": csrf})
    after = client.get(f"/api/v1/compounds/{code}", headers=w).json()
    assert (after["embargoed"], after["scaffold"]) == (False, "BWL-C")


def test_read_tokens_see_embargoed_compounds_only_when_granted(client, session, hidden):
    """"Read tokens unless granted" (issue 12): without the grant a read token is held to the embargo
    like an upload token; with it (admin page, API or ``remanence token create --embargoed``) it sees all."""
    code = hidden["code"]
    plain = client.get(f"/api/v1/compounds/{code}", headers=hidden["plain_read"]).json()
    assert (plain["smiles"], plain["label"], plain["formula"]) == (None, "", None)
    assert client.get(f"/api/v1/compounds/{code}/structure.svg", headers=hidden["plain_read"]).status_code == 404
    granted = client.get(f"/api/v1/compounds/{code}", headers=hidden["read"]).json()
    assert granted["smiles"] and granted["label"] == "naphthalene N-1"
    # Only read tokens take the grant (write tokens see all anyway; upload tokens never).
    admin_csrf = login_as(client, session, role="admin", name="boss")
    for scope, status in (("upload", 422), ("read", 201)):
        r = client.post("/api/v1/tokens", json={"name": f"{scope}-g", "scope": scope, "sees_embargoed": True},
                        headers={"X-CSRF-Token": admin_csrf})
        assert r.status_code == status, r.text
    assert r.json()["sees_embargoed"] is True
    # The admin page's form sets it too, and the token table says so.
    page = client.post("/admin/tokens", data={"name": "nmr-reader", "scope": "read", "sees_embargoed": "on",
                                              "expires": "never", "csrf_token": admin_csrf})
    assert page.status_code == 200 and "(+ embargoed)" in page.text
