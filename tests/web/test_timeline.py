"""The lab timeline (issue 22 item 11): batches on their day made, samples, measurements with kind and
key result, verdict changes and other records, newest first in one list; embargo respected (SQLite and
PostgreSQL)."""

from __future__ import annotations

from datetime import datetime

from server.access import Actor
from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.models import Compound
from server.services.timeline import lab_timeline
from server.synth.ferro import miller_loop
from sqlmodel import select
from tests.factories import bearer, login_as, make_token, soup


def _compound_with_history(client, session, *, embargoed: bool = False) -> str:
    h = bearer(make_token(session, scope="write"))
    r = client.post("/api/v1/compounds", json={"smiles": "COc1ccc(OCCCCCC)cc1OC", "label": "tl ether",
                                               "embargoed": embargoed}, headers=h)  # an invented test ether
    code = r.json()["code"]
    assert client.post(f"/api/v1/compounds/{code}/batches", json={"made_on": "2026-01-05"}, headers=h).status_code == 201
    assert client.post(f"/api/v1/compounds/{code}/batches", json={}, headers=h).status_code == 201
    r = client.post(f"/api/v1/batches/{code}-B01/samples", json={"form": "pellet", "thickness": "150 um",
                                                                  "electrode_area": "1 mm^2"}, headers=h)
    assert r.status_code == 201, r.text
    sample = r.json()["code"]
    for t_K in (300, 320):
        loop = to_csv_bytes(miller_loop(10, 6.0, 50, 300), {"temperature": f"{t_K} K"})
        r = client.post(f"/api/v1/samples/{sample}/measurements", data={"kind": "pe_loop"},
                        files={"file": (f"loop_{t_K}.csv", loop)}, headers=h)
        assert r.status_code == 201, r.text
    return code


def test_lab_timeline_lists_every_lab_step_newest_first(client, session):
    code = _compound_with_history(client, session)
    login_as(client, session)
    page = soup(client.get(f"/compounds/{code}/timeline").text)
    items = page.select("ol.lab-timeline li")
    whats = [li["data-what"] for li in items]
    assert {"batch", "sample", "measurement", "verdict", "record"} <= set(whats)
    stamps = [datetime.fromisoformat(li.time["datetime"]) for li in items]
    # newest first; day-only stamps (a batch's made_on) compare as that day's start
    as_naive = [s.replace(tzinfo=None) for s in stamps]
    assert as_naive == sorted(as_naive, reverse=True)
    # the batch with a day made sits on that day, shown without a time, and is the oldest entry
    made = next(li for li in items if li["data-what"] == "batch" and "2026-01-05" in li.text)
    assert made.time["datetime"] == "2026-01-05" and made is items[-1]
    # each measurement names its kind and its key result, and links to its page
    loops = [li for li in items if li["data-what"] == "measurement"]
    assert len(loops) == 2
    for li in loops:
        assert li.strong.text.strip() == KINDS["pe_loop"].label
        assert li.select_one("[data-field=key-result]").text.strip().startswith("Pr ")
        assert li.a["href"].startswith("/measurements/")
    # the verdict change names old and new class, newer than the loop that caused it
    verdict = next(li for li in items if li["data-what"] == "verdict")
    assert "untested →" in verdict.strong.text
    assert items.index(verdict) < items.index(loops[-1])
    # the registration is a record, and creations are not listed twice
    records = [li.strong.text.strip() for li in items if li["data-what"] == "record"]
    assert "compound create" in records
    assert not {"batch create", "sample create", "measurement create"} & set(records)


def test_lab_timeline_of_an_embargoed_compound_for_a_caller_who_may_not_see_it(client, session):
    code = _compound_with_history(client, session, embargoed=True)
    compound = session.exec(select(Compound).where(Compound.code == code)).one()
    token = Actor(kind="token", name="xrd-pc", scope="upload", token_id=1)
    member = Actor(kind="user", name="ana", role="member")
    seen, hidden = lab_timeline(session, compound, actor=member), lab_timeline(session, compound, actor=token)
    assert [e.what for e in seen] == [e.what for e in hidden]  # the receipts stay: what happened and when
    full = [e.measurement for e in seen if e.what == "measurement"]
    receipts = [e.measurement for e in hidden if e.what == "measurement"]
    assert all(m["results"] for m in full) and not any(m["results"] for m in receipts)
    assert any(e.detail for e in seen if e.what == "verdict")
    assert not any(e.detail for e in hidden if e.what == "verdict")  # the reason quotes structure-derived values
