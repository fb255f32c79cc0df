"""verify, backup and restore round trips (SQLite and PostgreSQL)."""

from __future__ import annotations

import uuid

import pytest
import sqlalchemy as sa
from sqlalchemy.engine import make_url
from sqlmodel import Session, select

from server.cli import main
from server.db import make_engine, upgrade
from server.ingest.table import to_csv_bytes
from server.models import Compound, Measurement, RawFile
from server.services.backup import BackupError, backup, restore, verify
from server.synth.ferro import miller_loop
from tests.factories import bearer, make_token


@pytest.fixture
def filled(client, session, settings):
    h = bearer(make_token(session, scope="write"))
    for smi in ("CCO", "CCCO", "COc1ccccc1"):
        client.post("/api/v1/compounds", json={"smiles": smi}, headers=h)
    client.post("/api/v1/compounds/RVZ-00003/batches", json={}, headers=h)
    for amp in (250, 300):
        client.post("/api/v1/batches/RVZ-00003-B01/measurements", data={"kind": "pe_loop"},
                    files={"file": ("l.csv", to_csv_bytes(miller_loop(10, 8, 50, amp)))}, headers=h)
    return settings


def _empty_target(settings, tmp_path):
    if settings.is_sqlite:
        return f"sqlite:///{tmp_path / 'restored.db'}"
    server = make_url(settings.database_url)
    name = f"remanence_restore_{uuid.uuid4().hex[:8]}"
    admin = sa.create_engine(server.set(database="postgres"), isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    admin.dispose()
    return server.set(database=name).render_as_string(hide_password=False)


def test_round_trip(filled, tmp_path, engine_for):
    settings = filled
    src = engine_for(settings.database_url)
    checked, bad = verify(src)
    assert (checked, bad) == (2, [])
    manifest = backup(src, settings.database_url, tmp_path / "bk")
    assert manifest["counts"]["compound"] == 3 and len(manifest["raw_files_sha256"]) == 2
    target_url = _empty_target(settings, tmp_path)
    upgrade(target_url)  # an empty, migrated database (restore also accepts a blank one)
    dst = engine_for(target_url)
    restore(dst, target_url, tmp_path / "bk")
    with Session(src) as a, Session(dst) as b:
        assert [c.inchikey for c in a.exec(select(Compound).order_by(Compound.id))] == \
            [c.inchikey for c in b.exec(select(Compound).order_by(Compound.id))]
        assert [bytes(r.data) for r in a.exec(select(RawFile).order_by(RawFile.id))] == \
            [bytes(r.data) for r in b.exec(select(RawFile).order_by(RawFile.id))]
        assert [m.results for m in a.exec(select(Measurement).order_by(Measurement.id))] == \
            [m.results for m in b.exec(select(Measurement).order_by(Measurement.id))]
    with pytest.raises(BackupError, match="not empty"):
        restore(dst, target_url, tmp_path / "bk")


def test_verify_finds_a_changed_byte(filled, engine_for, monkeypatch, capsys):
    settings = filled
    eng = engine_for(settings.database_url)
    with eng.begin() as conn:
        data = conn.execute(sa.select(RawFile.data).where(RawFile.id == 1)).scalar_one()
        conn.execute(sa.update(RawFile).where(RawFile.id == 1).values(data=bytes(data)[:-1] + b"!"))
    monkeypatch.setenv("REMANENCE_DATABASE_URL", settings.database_url)
    assert main(["verify"]) == 1
    assert "raw file 1: stored sha256" in capsys.readouterr().out


def test_damaged_backup_is_refused(filled, tmp_path, engine_for):
    settings = filled
    src = engine_for(settings.database_url)
    manifest = backup(src, settings.database_url, tmp_path / "bk")
    snap = tmp_path / "bk" / manifest["snapshot"]
    snap.write_bytes(snap.read_bytes()[:-10])
    target_url = _empty_target(settings, tmp_path)
    with pytest.raises(BackupError, match="damaged"):
        restore(engine_for(target_url), target_url, tmp_path / "bk")
    with pytest.raises(BackupError, match="not empty"):
        backup(src, settings.database_url, tmp_path / "bk")
