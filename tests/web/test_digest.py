"""The weekly digest: exactly the changes made in a test's time window; Markdown; the Atom feed
(RFC 4287 namespace, read token, embargoed compounds by code only). SQLite and PostgreSQL."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from datetime import datetime, timedelta, timezone

from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.kinds import KINDS
from server.models import AuditEvent, Batch, Compound, Measurement
from server.synth.ferro import leaky_capacitor, miller_loop
from tests.factories import bearer, login_as, make_token, soup

ATOM = "{http://www.w3.org/2005/Atom}"


def _age(session, days: int) -> None:
    """Move every row made so far ``days`` into the past (the changes before the test's window)."""
    past = datetime.now(timezone.utc) - timedelta(days=days)
    for model in (Compound, Batch, Measurement):
        for row in session.exec(select(model)).all():
            row.created_at = past
            session.add(row)
    for e in session.exec(select(AuditEvent)).all():
        e.at = past
        session.add(e)
    session.commit()


def _upload(client, batch, raw, headers):
    r = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                    files={"file": ("loop.csv", raw, "text/csv")}, headers=headers)
    assert r.status_code == 201, r.text


def test_digest_lists_exactly_the_changes_in_the_window(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    # before the window: one compound with a batch and a lossy-dielectric ellipse (no switching)
    client.post("/api/v1/compounds", json={"smiles": "COc1ccccc1OC", "label": "old bowl"}, headers=writer)
    old_batch = client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=writer).json()["code"]
    _upload(client, old_batch, to_csv_bytes(leaky_capacitor(10, 1, 100, frequency_Hz=1000).drop(columns=["t (s)"]),
                                                  {"temperature": "300 K", "frequency": "1000 Hz"}),
            writer)
    _age(session, 30)
    # in the window: a new embargoed compound and batch, and a switching loop on the old compound
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC", "label": "secret bowl",
                                           "embargoed": True}, headers=writer)
    client.post("/api/v1/compounds/RVZ-00002/batches", json={}, headers=writer)
    old_verdict = client.get("/api/v1/compounds/RVZ-00001", headers=writer).json()["verdict"]
    # Miller et al., J. Appl. Phys. 68, 6463 (1990) analytic loop: a ferroelectric switching loop
    _upload(client, old_batch, to_csv_bytes(miller_loop(10, 8, 50, 300), {"temperature": "300 K",
                                                                         "frequency": "100 Hz"}), writer)
    new_verdict = client.get("/api/v1/compounds/RVZ-00001", headers=writer).json()["verdict"]
    assert old_verdict != new_verdict

    since = (datetime.now(timezone.utc) - timedelta(days=7)).date().isoformat()
    login_as(client, session, role="member")
    page = soup(client.get(f"/digest?since={since}").text)
    sections = {s["data-section"]: [li.get_text() for li in s.find_all("li")]
                for s in page.select("section.digest-section")}
    [new] = sections["New compounds"]
    assert new.startswith("RVZ-00002 (secret bowl), registered by token:")
    assert [b.split(" of ")[1] for b in sections["New batches"]] == ["RVZ-00002"]
    assert sections["Measurements by kind"] == [f"{KINDS['pe_loop'].label}: 1"]
    [change] = sections["Verdict changes"]
    assert change.startswith("RVZ-00001 (old bowl): ") and "→" in change and "(computed)" in change
    assert sections["New conflicts"] == [] and sections["Estimates finished"] == []

    # the window before the changes: the older changes alone
    everything = soup(client.get("/digest?since=" + (datetime.now(timezone.utc) - timedelta(days=40))
                                 .date().isoformat()).text)
    assert len(everything.select('section[data-section="New compounds"] li')) == 2

    md = client.get(f"/digest.md?since={since}")
    assert md.status_code == 200 and md.headers["content-type"].startswith("text/markdown")
    assert f"# Remanence digest since {since}" in md.text and "## Verdict changes" in md.text
    assert "- RVZ-00002 (secret bowl)" in md.text

    assert client.get("/digest?since=2026-13-01").status_code == 422


def test_atom_feed_needs_a_read_token_and_names_embargoed_compounds_by_code(client, session):
    writer = bearer(make_token(session, scope="write", name="registrar"))
    client.post("/api/v1/compounds", json={"smiles": "COc1c(OC)c(OC)c(OC)c(OC)c1OC", "label": "secret bowl",
                                           "embargoed": True}, headers=writer)
    assert client.get("/api/v1/digest.atom").status_code == 401
    reader = bearer(make_token(session, scope="read", name="feed-reader"))
    r = client.get("/api/v1/digest.atom", headers=reader)
    assert r.status_code == 200 and r.headers["content-type"].startswith("application/atom+xml")
    feed = ET.fromstring(r.content)  # well-formed XML
    assert feed.tag == f"{ATOM}feed"
    # RFC 4287 4.1.1: a feed has id, title, updated; each entry id, title, updated
    for tag in ("id", "title", "updated"):
        assert feed.find(f"{ATOM}{tag}") is not None
    entries = feed.findall(f"{ATOM}entry")
    assert entries and all(e.find(f"{ATOM}{t}") is not None for e in entries for t in ("id", "title", "updated"))
    text = r.content.decode()
    assert "RVZ-00001" in text and "secret bowl" not in text
    assert client.get("/api/v1/digest.atom?since=yesterday", headers=reader).status_code == 422
