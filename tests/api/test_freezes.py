"""Paper freezes (issue 23, item 4): a freeze keeps every measurement id, raw-file SHA-256, analysis
version and result and the verdicts; re-analysis never changes it, and what moved is reported."""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import zipfile

import pytest
from sqlmodel import select

from server.kinds import KINDS
from server.models import AuditEvent, Measurement, PaperFreezeCompound
from server.services.measurements import reanalyse
from tests.factories import bearer, login_as, make_token
from tests.trust.conftest import loop_bytes


@pytest.fixture
def world(client, session):
    w = bearer(make_token(session, scope="write", name="registrar"))
    codes, mids = [], []
    for smiles, embargoed in (("c1ccc2ccccc2c1", False), ("c1ccc2cc3ccccc3cc2c1", True)):
        code = client.post("/api/v1/compounds", json={"smiles": smiles, "embargoed": embargoed}, headers=w).json()["code"]
        batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=w).json()["code"]
        for i in (1, 2):  # two specimens' loops per compound
            r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                            files={"file": (f"m{i}.csv", loop_bytes(10 * len(codes) + i), "text/csv")}, headers=w)
            assert r.status_code == 201, r.text
            mids.append(r.json()["id"])
        codes.append(code)
    return {"w": w, "codes": codes, "mids": mids}


def _changed_analysis(monkeypatch, factor: float) -> None:
    """A new version of the hysteresis analysis whose Pr comes out ``factor`` times the old one
    (standing in for a real method change; the version string is what reanalyse records)."""
    kind = KINDS["pe_loop"]
    old_analyse = kind.analyse

    def analyse(parsed, conditions, context):  # noqa: ANN001, ANN202
        result = old_analyse(parsed, conditions, context)
        return dataclasses.replace(result, pr_uC_cm2=result.pr_uC_cm2 * factor)

    monkeypatch.setattr(kind.analysis, "VERSION", kind.analysis.VERSION + "+test")
    monkeypatch.setitem(KINDS, "pe_loop", dataclasses.replace(kind, analyse=analyse))


def test_a_freeze_records_and_survives_reanalysis(client, session, world, monkeypatch):
    w, (code, secret), mids = world["w"], world["codes"], world["mids"]
    r = client.post("/api/v1/freezes", json={"name": "bowl-chains manuscript", "compounds": [code, secret]}, headers=w)
    assert r.status_code == 201, r.text
    fid = r.json()["id"]
    entry = r.json()["compounds"][0]
    frozen = {m["id"]: m for m in entry["measurements"]}
    assert set(frozen) == set(mids[:2])
    m1 = session.get(Measurement, mids[0])
    assert frozen[m1.id]["sha256"] == m1.sha256 and frozen[m1.id]["analysis_version"] == m1.analysis_version
    assert frozen[m1.id]["results"]["pr_uC_cm2"] == m1.results["pr_uC_cm2"]
    assert entry["differences"]["differs"] is False and entry["verdict"]["effective"]
    pr_then, version_then = m1.results["pr_uC_cm2"], m1.analysis_version

    _changed_analysis(monkeypatch, 1.05)
    changes = reanalyse(session=session, kind="pe_loop")
    assert {c.measurement_id for c in changes} == set(mids)
    session.expire_all()
    assert session.get(Measurement, mids[0]).results["pr_uC_cm2"] == pytest.approx(1.05 * pr_then, rel=1e-9)

    got = client.get(f"/api/v1/freezes/{fid}", headers=w).json()
    entry = got["compounds"][0]
    # The frozen record did not move...
    assert {m["id"]: m["results"]["pr_uC_cm2"] for m in entry["measurements"]}[mids[0]] == pr_then
    assert {m["analysis_version"] for m in entry["measurements"]} == {version_then}
    # ...and the difference is reported, by how much: +5 % on Pr, the new version named.
    diff = entry["differences"]
    assert diff["differs"] is True and len(diff["measurements"]) == 2
    one = next(m for m in diff["measurements"] if m["id"] == mids[0])
    assert (one["frozen_version"], one["current_version"]) == (version_then, version_then + "+test")
    pr = next(c for c in one["changes"] if c["key"] == "pr_uC_cm2")
    assert pr["frozen"] == pr_then and pr["relative"] == pytest.approx(0.05, rel=1e-6)
    assert pr["label"] == "Pr" and pr["unit"]
    assert diff["largest_relative_change"] == pytest.approx(0.05, rel=1e-6)
    # The stored rows themselves are untouched (re-analysis writes measurements only).
    rows = session.exec(select(PaperFreezeCompound)).all()
    assert all(m["analysis_version"] == version_then for r in rows for m in r.measurements)


def test_retired_and_added_measurements_are_reported(client, session, world):
    w, code, mids = world["w"], world["codes"][0], world["mids"]
    fid = client.post("/api/v1/freezes", json={"name": "first look", "compounds": [code]}, headers=w).json()["id"]
    assert client.post(f"/api/v1/measurements/{mids[0]}/archive", headers=w).status_code == 200
    batch = client.get(f"/api/v1/compounds/{code}/batches", headers=w).json()[0]["code"]
    new = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                      files={"file": ("m9.csv", loop_bytes(99), "text/csv")}, headers=w).json()["id"]
    diff = client.get(f"/api/v1/freezes/{fid}", headers=w).json()["compounds"][0]["differences"]
    assert diff["added"] == [new] and [(m["id"], m["state"]) for m in diff["measurements"]] == [(mids[0], "retired")]


def test_names_codes_doi_and_depositions_are_checked(client, session, world):
    w, code, mids = world["w"], world["codes"][0], world["mids"]
    assert client.post("/api/v1/freezes", json={"name": "x", "compounds": ["NOPE-1"]}, headers=w).status_code == 422
    fid = client.post("/api/v1/freezes", json={"name": "x", "compounds": [code]}, headers=w).json()["id"]
    assert client.post("/api/v1/freezes", json={"name": "x", "compounds": [code]}, headers=w).status_code == 409
    url = f"/api/v1/freezes/{fid}/publication"
    assert client.post(url, json={"dataset_doi": "not a doi"}, headers=w).status_code == 422
    assert client.post(url, json={"depositions": [{"number": "CCDC 2345678", "measurement": 99999}]},
                       headers=w).status_code == 422  # not a frozen measurement
    r = client.post(url, json={"dataset_doi": "https://doi.org/10.5281/zenodo.1234567",
                               "depositions": [{"number": "CCDC 2345678", "measurement": mids[0]}]}, headers=w)
    assert r.status_code == 200, r.text
    assert r.json()["dataset_doi"] == "10.5281/zenodo.1234567" and r.json()["depositions"][0]["number"] == "CCDC 2345678"
    actions = [e.action for e in session.exec(select(AuditEvent).where(AuditEvent.entity == "freeze")).all()]
    assert actions == ["freeze.create", "freeze.publication"]


def test_embargo_withholds_frozen_compounds_and_the_pack(client, session, world):
    w, (code, secret) = world["w"], world["codes"]
    fid = client.post("/api/v1/freezes", json={"name": "with secret", "compounds": [code, secret]}, headers=w).json()["id"]
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    seen = client.get(f"/api/v1/freezes/{fid}", headers=up).json()
    assert seen["compounds"][1] == {"compound": secret, "withheld": True}
    assert client.get(f"/api/v1/freezes/{fid}/pack.zip", headers=up).status_code == 403


def test_pack_carries_the_frozen_record_and_the_manifest(client, session, world, monkeypatch):
    w, code, mids = world["w"], world["codes"][0], world["mids"]
    fid = client.post("/api/v1/freezes", json={"name": "pack", "compounds": [code]}, headers=w).json()["id"]
    _changed_analysis(monkeypatch, 0.9)
    reanalyse(session=session, kind="pe_loop")
    r = client.get(f"/api/v1/freezes/{fid}/pack.zip", headers=w)
    assert r.status_code == 200 and r.headers["content-type"] == "application/zip"
    z = zipfile.ZipFile(io.BytesIO(r.content))
    manifest = json.loads(z.read("manifest.json"))
    listed = {f["path"]: f["sha256"] for f in manifest["files"]}
    assert set(listed) == set(z.namelist()) - {"manifest.json"}
    assert all(hashlib.sha256(z.read(p)).hexdigest() == h for p, h in listed.items())
    assert {m["id"] for m in manifest["frozen_measurements"]} == set(mids[:2])
    raw = [p for p in listed if p.startswith(f"raw/{mids[0]}-")]
    assert len(raw) == 1 and hashlib.sha256(z.read(raw[0])).hexdigest() == session.get(Measurement, mids[0]).sha256
    assert f"current/{code}/manifest.json" in listed  # the compound's report pack as it is now
    moved = json.loads(z.read("differences.json"))[0]
    assert moved["differs"] and moved["largest_relative_change"] == pytest.approx(0.1, rel=1e-6)


def test_a_freeze_from_a_view_takes_what_the_view_shows_the_caller_now(client, session, world):
    """Item 4, "or a saved view": a view is a link (services/views.py); the freeze takes every compound it
    shows the caller at that moment, on all its pages, and the audit event keeps the view."""
    w = world["w"]
    more = []
    for smiles in ("CCOc1ccc(OCC)cc1", "CCCOc1ccc(OCCC)cc1"):  # two open compounds beside the world's two
        more.append(client.post("/api/v1/compounds", json={"smiles": smiles}, headers=w).json()["code"])
    # The whole registry in pages of one: the freeze still takes all four, in the view's order.
    r = client.post("/api/v1/freezes", json={"name": "all of it", "view": "/compounds?size=1&page=2&sort=code&dir=asc"},
                    headers=w)
    assert r.status_code == 201, r.text
    assert [c["compound"] for c in r.json()["compounds"]] == sorted(world["codes"] + more)
    # A filtered view, given as a full link: only what it shows (the ethers with chains of 3 carbons).
    r = client.post("/api/v1/freezes", json={"name": "propoxy", "view": "http://lab.example/compounds?c_min=3"},
                    headers=w)
    assert r.status_code == 201, r.text
    assert [c["compound"] for c in r.json()["compounds"]] == [more[1]]
    event = session.exec(select(AuditEvent).where(AuditEvent.action == "freeze.create")
                         .order_by(AuditEvent.id.desc())).first()
    assert event.after["view"] == "http://lab.example/compounds?c_min=3"
    # The moment matters: a compound registered afterwards is not in the frozen set.
    client.post("/api/v1/compounds", json={"smiles": "CCCCCOc1ccc(OCCCCC)cc1"}, headers=w)
    got = client.get(f"/api/v1/freezes/{r.json()['id']}", headers=w).json()
    assert [c["compound"] for c in got["compounds"]] == [more[1]]
    # Views the caller cannot use are refused naming the field; nothing is stored.
    for view, says in (("c_min=lots", "c_min"), ("c_min=90", "no compounds"), ("sort=colour", "sort")):
        r = client.post("/api/v1/freezes", json={"name": f"bad {view}", "view": view}, headers=w)
        assert r.status_code == 422 and r.json()["field"] == "view" and says in r.json()["detail"], r.text
    r = client.post("/api/v1/freezes", json={"name": "both", "view": "c_min=3", "compounds": [more[0]]}, headers=w)
    assert r.status_code == 422 and r.json()["field"] == "view"
    assert client.post("/api/v1/freezes", json={"name": "neither"}, headers=w).status_code == 422
    assert len(client.get("/api/v1/freezes", headers=w).json()["items"]) == 2


def test_a_freeze_from_a_view_sees_only_what_the_caller_may(client, session, world):
    """The view is asked as the caller: an embargoed compound is in a member's frozen view. (Every account
    that may freeze sees embargoed compounds, access.py, so the structure filter is the only boundary; the
    view query itself applies it through access.structure_condition, tested in tests/trust/test_embargo.py.)"""
    csrf = login_as(client, session, role="member", name="mia")
    r = client.post("/freezes", data={"name": "from the page", "view": "/compounds?sort=code&dir=asc",
                                      "csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303, r.text
    got = client.get(r.headers["location"].replace("/freezes/", "/api/v1/freezes/"), headers={"X-CSRF-Token": csrf})
    assert [c["compound"] for c in got.json()["compounds"]] == sorted(world["codes"])
    # The registry's "freeze these" link fills the form with the view.
    from tests.factories import soup

    page = soup(client.get("/compounds?c_min=1").text)
    link = page.select_one("a.freezelink")["href"]
    form = soup(client.get(link).text).select_one("form[action='/freezes'] input[name=view]")
    assert form["value"] == "/compounds?c_min=1"


def test_a_freeze_keeps_the_images_it_held(client, session, world):
    """Images on the compound and its batch at freeze time go into the freeze (archived ones left out);
    archiving one later changes neither the record nor the pack; the embargoed compound's images go to
    nobody who may not see it."""
    from tests.api.test_attachments import micrograph

    w, (code, secret) = world["w"], world["codes"]
    batch = f"{code}-B01"  # its one batch (codes: <compound>-Bnn)
    shown = {}
    for where, seed in ((f"compounds/{code}", 1), (f"batches/{batch}", 2), (f"compounds/{secret}", 3)):
        raw = micrograph("PNG", size=(60, 40), seed=seed)
        a = client.post(f"/api/v1/{where}/attachments", files={"file": ("pom.png", raw, "image/png")},
                        data={"caption": f"image {seed}", "scale_bar": "50 um"}, headers=w).json()
        shown[a["id"]] = raw
    before = client.post(f"/api/v1/compounds/{code}/attachments", headers=w,
                         files={"file": ("old.png", micrograph("PNG", size=(60, 40), seed=4), "image/png")}).json()
    client.post(f"/api/v1/attachments/{before['id']}/archive", json={"reason": "wrong crystal"}, headers=w)
    fid = client.post("/api/v1/freezes", json={"name": "with images", "compounds": [code, secret]},
                      headers=w).json()["id"]
    ids = sorted(shown)
    rows = session.exec(select(PaperFreezeCompound).where(PaperFreezeCompound.freeze_id == fid)
                        .order_by(PaperFreezeCompound.id)).all()
    assert [sorted(a["id"] for a in r.attachments) for r in rows] == [ids[:2], ids[2:]]  # not the archived one
    # Archived after the freeze: still frozen, bytes still in the pack, reported as archived since.
    client.post(f"/api/v1/attachments/{ids[0]}/archive", json={"reason": "superseded by a sharper image"}, headers=w)
    seen = client.get(f"/api/v1/freezes/{fid}", headers=w).json()
    first = seen["compounds"][0]
    assert sorted(a["id"] for a in first["attachments"]) == ids[:2]
    assert first["differences"]["attachments_archived_since"] == [ids[0]]
    assert {a["caption"] for a in first["attachments"]} == {"image 1", "image 2"}
    assert all(a["scale_bar_um"] == pytest.approx(50) for a in first["attachments"])
    z = zipfile.ZipFile(io.BytesIO(client.get(f"/api/v1/freezes/{fid}/pack.zip", headers=w).content))
    manifest = json.loads(z.read("manifest.json"))
    frozen = {a["id"]: a for a in manifest["frozen_attachments"]}
    assert sorted(frozen) == ids
    for aid, raw in shown.items():
        assert z.read(frozen[aid]["path"]) == raw and frozen[aid]["sha256"] == hashlib.sha256(raw).hexdigest()
    assert frozen[ids[2]]["compound"] == secret
    # The current report pack inside leaves the image archived since out; the frozen copy stays.
    assert not any(p.startswith(f"current/{code}/attachments/{ids[0]}-") for p in z.namelist())
    assert any(p.startswith(f"current/{code}/attachments/{ids[1]}-") for p in z.namelist())
    # Embargo: the upload token gets the secret compound's code only, and no pack at all.
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    hidden = client.get(f"/api/v1/freezes/{fid}", headers=up)
    assert hidden.json()["compounds"][1] == {"compound": secret, "withheld": True}
    assert "image 3" not in hidden.text and client.get(f"/api/v1/freezes/{fid}/pack.zip", headers=up).status_code == 403
