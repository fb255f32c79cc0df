"""`remanence doctor`: each check OK on a sound installation and FIX, with what to do, on a broken one."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone

import pytest
from sqlmodel import Session

from server import doctor
from server.cli import main
from server.db import make_engine
from server.models import Job

NOW = datetime(2026, 12, 2, 12, 0, tzinfo=timezone.utc)


@pytest.fixture
def engine(settings):
    e = make_engine(settings.database_url)
    yield e
    e.dispose()


def test_database_migrated_and_cartridge(engine, settings):
    check = doctor.check_database(engine, settings.database_url)
    assert check.ok, check.detail
    cartridge = doctor.check_cartridge(engine)
    # The test PostgreSQL server has the (fixed) cartridge; SQLite needs none.
    assert cartridge.ok, cartridge.detail


def test_unmigrated_database_says_run_init(tmp_path):
    url = f"sqlite:///{tmp_path / 'empty.db'}"
    e = make_engine(url)
    try:
        check = doctor.check_database(e, url)
    finally:
        e.dispose()
    assert not check.ok and "remanence init" in check.detail


def test_unreachable_database(tmp_path):
    url = "postgresql+psycopg://nobody@127.0.0.1:1/none"
    e = make_engine(url)
    check = doctor.check_database(e, url)
    e.dispose()
    assert not check.ok and "cannot connect" in check.detail


def _job(session, *, created, state="queued", beat=None):
    session.add(Job(kind="xtb_estimate", state=state, created_at=created, heartbeat_at=beat))
    session.commit()


def test_waiting_jobs_without_a_worker_heartbeat(engine, settings):
    with Session(engine) as s:
        _job(s, created=NOW - timedelta(minutes=30))
    check = doctor.check_workers(engine, settings, now=NOW)
    assert not check.ok and "remanence worker" in check.detail and "1 job(s) waiting" in check.detail
    with Session(engine) as s:  # a worker heartbeating another job a minute ago: the queue moves
        _job(s, created=NOW - timedelta(minutes=40), state="running", beat=NOW - timedelta(minutes=1))
    assert doctor.check_workers(engine, settings, now=NOW).ok


def test_no_jobs_is_fine(engine, settings):
    check = doctor.check_workers(engine, settings, now=NOW)
    assert check.ok and "no job waiting" in check.detail


def test_data_folder_permissions(tmp_path):
    d = tmp_path / "data"
    d.mkdir(mode=0o700)
    d.chmod(0o700)
    assert doctor.check_data_dir(d).ok
    d.chmod(0o755)
    check = doctor.check_data_dir(d)
    assert not check.ok and f"chmod o-rwx {d}" in check.detail
    assert not doctor.check_data_dir(tmp_path / "missing").ok


def _backup(folder, name, made_at):
    (folder / name).mkdir(parents=True)
    (folder / name / "manifest.json").write_text(json.dumps({"made_at": made_at.isoformat()}))


def test_backup_age(tmp_path):
    assert not doctor.check_backups(None, now=NOW).ok
    assert not doctor.check_backups(tmp_path, now=NOW).ok  # none yet
    _backup(tmp_path, "2026-11-28", NOW - timedelta(days=4))
    old = doctor.check_backups(tmp_path, now=NOW)
    assert not old.ok and "2026-11-28" in old.detail and "4.0 days ago" in old.detail
    _backup(tmp_path, "2026-12-02", NOW - timedelta(hours=3))
    fresh = doctor.check_backups(tmp_path, now=NOW)
    assert fresh.ok and "2026-12-02" in fresh.detail


def test_doctor_command_exit_codes(settings, tmp_path, monkeypatch, capsys):
    data = tmp_path / "srv"
    data.mkdir()
    data.chmod(0o700)
    monkeypatch.setenv("REMANENCE_DATABASE_URL", settings.database_url)
    monkeypatch.setenv("REMANENCE_DATA_DIR", str(data))
    monkeypatch.setenv("REMANENCE_SECRET_KEY", "test-secret-key-not-for-production")
    backups = tmp_path / "backups"
    _backup(backups, "latest", datetime.now(timezone.utc) - timedelta(hours=1))
    assert main(["doctor", "--backups", str(backups)]) == 0, capsys.readouterr().out
    out = capsys.readouterr().out.splitlines()
    assert [line.split()[0] for line in out] == ["OK"] * 5
    assert main(["doctor"]) == 1  # backups not given: a line says what to do
    assert capsys.readouterr().out.splitlines()[-1].startswith("FIX  backups:")


def test_missing_structure_table_is_rebuilt_by_init(settings, engine, monkeypatch, capsys):
    """As after migration 0004 skipped the table (cartridge broken then), and the administrator fixed it since."""
    if engine.dialect.name != "postgresql":
        pytest.skip("the cartridge exists on PostgreSQL only")
    import sqlalchemy as sa

    from server.services import search as structure_search

    with engine.begin() as conn:
        conn.execute(sa.text("DROP TABLE compound_structure"))
    try:
        check = doctor.check_cartridge(engine)
        assert not check.ok and "remanence init" in check.detail
        monkeypatch.setenv("REMANENCE_DATABASE_URL", settings.database_url)
        monkeypatch.setenv("REMANENCE_DATA_DIR", str(settings.data_dir))
        assert main(["init"]) == 0
        assert "structure search: RDKit cartridge (structure table built" in capsys.readouterr().out
        assert doctor.check_cartridge(engine).ok
    finally:
        state = structure_search.enable_cartridge(engine)
        assert state.ready, state.error
