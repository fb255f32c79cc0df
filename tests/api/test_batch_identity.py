"""A batch's identity confirmation: the API, the batch page, the registry column and filter, the audit
trail (SQLite and PostgreSQL). The compound is the invented hexamethoxybenzene C12H18O6 of
tests/api/test_identity_uploads.py (its calculated values are checked there against NIST masses)."""

from __future__ import annotations

import numpy as np
from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.models import AuditEvent, Batch, CompoundStats
from server.synth.identity import elemental_file, hrms_profile
from tests.api.test_measurements import batch, post, uploader  # noqa: F401 - fixtures
from tests.factories import bearer, login_as, make_token, soup


def _writer(session):
    return bearer(make_token(session, scope="write", name="confirmer-pc"))


def test_confirm_needs_a_reason_without_agreeing_evidence_then_withdraw(client, session, batch):  # noqa: F811
    w = _writer(session)
    r = client.post(f"/api/v1/batches/{batch}/identity/confirm", json={}, headers=w)
    assert r.status_code == 422 and r.json()["field"] == "note", r.text
    assert session.exec(select(AuditEvent).where(AuditEvent.action.like("batch.identity%"))).all() == []
    r = client.post(f"/api/v1/batches/{batch}/identity/confirm",
                    json={"note": "1H and 13C NMR match the reference batch"}, headers=w)
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["identity_confirmed"] is True and body["status"] == "no identity evidence"
    assert body["confirmation"]["note"] == "1H and 13C NMR match the reference batch"
    assert client.get(f"/api/v1/batches/{batch}", headers=w).json()["identity_confirmed"] is True
    session.expire_all()
    assert session.get(CompoundStats, session.exec(select(Batch)).one().compound_id).identity_status == "confirmed"
    # Confirming again changes nothing and writes no second event.
    again = client.post(f"/api/v1/batches/{batch}/identity/confirm", json={"note": "x"}, headers=w)
    assert again.status_code == 200
    assert len(session.exec(select(AuditEvent).where(AuditEvent.action == "batch.identity_confirm")).all()) == 1
    # A withdrawal always says why.
    r = client.post(f"/api/v1/batches/{batch}/identity/withdraw", json={}, headers=w)
    assert r.status_code == 422 and r.json()["field"] == "note"
    r = client.post(f"/api/v1/batches/{batch}/identity/withdraw", json={"note": "EA of the dried batch fails"},
                    headers=w)
    assert r.status_code == 200 and r.json()["identity_confirmed"] is False and r.json()["confirmation"] is None
    events = session.exec(select(AuditEvent).where(AuditEvent.action.like("batch.identity%"))
                          .order_by(AuditEvent.id)).all()
    assert [e.action for e in events] == ["batch.identity_confirm", "batch.identity_withdraw"]
    assert events[1].before["identity_confirmed"] is True and events[1].after["note"] == "EA of the dried batch fails"
    session.expire_all()
    assert session.get(CompoundStats, session.exec(select(Batch)).one().compound_id).identity_status == "unconfirmed"


def test_agreeing_evidence_confirms_without_a_note_and_the_registry_filters(client, session, batch,  # noqa: F811
                                                                            uploader):  # noqa: F811
    frame = hrms_profile("C12H18O6", "[M+Na]+", rng=np.random.default_rng(21), error_ppm=0.8)
    assert post(client, batch, "hrms", to_csv_bytes(frame, {"ion": "[M+Na]+"}), uploader).status_code == 201
    assert post(client, batch, "elemental", elemental_file({"C": 55.62, "H": 7.11}), uploader).status_code == 201
    w = _writer(session)
    # A second compound with a batch and no confirmation, for the filter's other side.
    client.post("/api/v1/compounds", json={"smiles": "COc1ccc(OC)cc1"}, headers=w)
    client.post("/api/v1/compounds/RVZ-00002/batches", json={"chemist": "lab"}, headers=w)
    r = client.post(f"/api/v1/batches/{batch}/identity/confirm", json={}, headers=w)
    assert r.status_code == 200 and r.json()["status"] == "HRMS and elemental analysis agree", r.text
    codes = lambda q: [c["code"] for c in client.get(f"/api/v1/compounds?{q}", headers=w).json()["items"]]  # noqa: E731
    assert codes("identity=confirmed") == ["RVZ-00001"]
    assert codes("identity=unconfirmed") == ["RVZ-00002"]
    bad = client.get("/api/v1/compounds?identity=maybe", headers=w)
    assert bad.status_code == 422 and bad.json()["field"] == "identity"


def test_batch_page_shows_evidence_state_and_history_and_a_member_confirms(client, session, batch,  # noqa: F811
                                                                           uploader):  # noqa: F811
    assert post(client, batch, "elemental", elemental_file({"C": 55.70, "H": 7.10}), uploader).status_code == 201
    csrf = login_as(client, session, "member")
    page = soup(client.get(f"/batches/{batch}").text)
    assert page.select_one("[data-field=identity-status]").text == "partial evidence agrees"
    assert page.select_one("[data-field=identity-confirmed]").text == "identity not confirmed"
    # C 55.81 calculated (by hand, see tests/api/test_identity_uploads.py), found 55.70: -0.11.
    row = page.select_one("#identity-evidence tr[data-element=C]")
    assert "55.81" in row.text and "55.70" in row.text and "-0.11" in row.text
    assert "Anal. Calcd for C12H18O6" in page.select_one("#si-text").text
    r = client.post(f"/batches/{batch}/identity", data={"action": "confirm", "note": "", "csrf_token": csrf},
                    follow_redirects=False)
    assert r.status_code == 303, r.text
    page = soup(client.get(f"/batches/{batch}").text)
    assert page.select_one("[data-field=identity-confirmed]").text == "identity confirmed"
    assert [td.text for td in page.select("#identity-history tbody tr td")][1:3] == ["confirmed", "user:member1"]
    bad = client.post(f"/batches/{batch}/identity", data={"action": "withdraw", "note": "", "csrf_token": csrf})
    assert bad.status_code == 422 and "why" in soup(bad.text).find(role="alert").text
    compound = soup(client.get("/compounds/RVZ-00001").text)
    assert compound.select_one(f"#batches a[href='/batches/{batch}']") is not None


def test_verdict_criterion_follows_the_identity_confirmation(client, session, batch, uploader):  # noqa: F811
    # Issue 17: the verdict's evidence says when physical data rest on an unconfirmed identity.
    from server.kinds import KINDS

    r = post(client, batch, "pund", KINDS["pund"].example().raw, uploader, filename="pund.csv", temperature="300 K")
    assert r.status_code == 201, r.text
    w = _writer(session)
    code = "RVZ-00001"

    def criterion():
        body = client.get(f"/api/v1/compounds/{code}", headers=w).json()
        crit = {c["name"]: c for c in body["verdict_evidence"]["criteria"]}
        return crit["identity of every measured batch confirmed"], body["verdict_evidence"]["computed"]

    crit, computed = criterion()
    assert crit["state"] == "unmet" and crit["measurements"] == [r.json()["id"]]
    assert "unmet: identity of every measured batch confirmed" in computed["conclusion"]["text"]
    before = computed["code"]
    assert client.post(f"/api/v1/batches/{batch}/identity/confirm", json={"note": "1H NMR matches"},
                       headers=w).status_code == 200
    crit, computed = criterion()
    assert crit["state"] == "met" and computed["code"] == before


def _pund_file(seed: int, t_K: float) -> bytes:
    """A switching PUND train (server/synth/ferro.pund_train: Pr 0.7, Ps 0.8 uC/cm^2, Ec 19 kV/cm, pulses at 88 kV/cm)
    with 1 % noise of Pr and a background of eps_r 6, as the area and thickness of a pellet would give it."""
    from server.kinds.base import EXAMPLE_AREA_CM2, EXAMPLE_THICKNESS_UM
    from server.synth.ferro import pund_train

    frame = pund_train(0.7, 0.8, 19.0, 88.0, eps_r_background=6.0, points=3000, noise_uC_cm2=0.007,
                       rng=np.random.default_rng(seed), area_cm2=EXAMPLE_AREA_CM2, thickness_um=EXAMPLE_THICKNESS_UM)
    return to_csv_bytes(frame, {"area": f"{EXAMPLE_AREA_CM2} cm^2", "thickness": f"{EXAMPLE_THICKNESS_UM:g} um",
                                "temperature": f"{t_K:g} K"})


def test_confirming_and_withdrawing_identity_rederive_the_stored_verdict(client, session, batch, uploader):  # noqa: F811
    """The identity criterion is part of the verdict: confirming or withdrawing a batch's identity derives the
    stored verdict again (measurements.refresh_derived, as an upload does), so its criterion, its conclusion and
    its time follow at once, for each of two batches of one compound, and the stored verdict is the one the
    rules give from scratch. PUND switching (Scott, J. Phys.: Condens. Matter 20, 021001 (2008)) on each batch."""
    from server.analysis.results import jsonable
    from server.models import Compound
    from server.services import verdicts

    w = _writer(session)
    second = client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=w).json()["code"]
    ids = {}
    for b, seed, t_K in ((batch, 31, 300.0), (second, 32, 310.0)):
        r = post(client, b, "pund", _pund_file(seed, t_K), uploader, filename=f"pund-{seed}.csv")
        assert r.status_code == 201 and r.json()["verdict"] == "switching", r.text
        ids[b] = r.json()["id"]

    def stored():
        session.expire_all()
        c = session.exec(select(Compound).where(Compound.code == "RVZ-00001")).one()
        crit = {k["name"]: k for k in c.verdict["criteria"]}["identity of every measured batch confirmed"]
        fresh = verdicts.decide_for(session, c, verdicts.evidence_for(session, c))
        assert c.verdict["criteria"] == jsonable(fresh.to_dict())["criteria"]  # stored = derived from scratch
        return crit["state"], sorted(crit["measurements"]), c.verdict["conclusion"]["text"], c.verdict_at

    state, unmet, text, at0 = stored()
    assert state == "unmet" and unmet == sorted(ids.values()) and "unmet: identity" in text
    assert client.post(f"/api/v1/batches/{batch}/identity/confirm", json={"note": "1H NMR matches"},
                       headers=w).status_code == 200
    state, unmet, text, at1 = stored()
    assert (state, unmet) == ("unmet", [ids[second]]) and at1 > at0
    assert client.post(f"/api/v1/batches/{second}/identity/confirm", json={"note": "HRMS and 1H NMR match"},
                       headers=w).status_code == 200
    state, unmet, text, at2 = stored()
    assert state == "met" and "unmet: identity" not in text and at2 > at1
    assert client.post(f"/api/v1/batches/{batch}/identity/withdraw", json={"note": "EA of the dried batch fails"},
                       headers=w).status_code == 200
    state, unmet, text, _ = stored()
    assert (state, unmet) == ("unmet", [ids[batch]]) and "unmet: identity" in text
    # the page the member reads says the same
    body = client.get("/api/v1/compounds/RVZ-00001", headers=w).json()["verdict_evidence"]
    crit = {k["name"]: k for k in body["criteria"]}["identity of every measured batch confirmed"]
    assert crit["state"] == "unmet" and crit["measurements"] == [ids[batch]]
