"""Private files and archived batches (issue 12, item 19).

* The SQLite database, its -wal and -shm files, backups and the secret key are mode 0600 (their
  folders 0700), whatever the umask, because they hold unpublished structures.
* An archived batch (or a batch of an archived compound) refuses uploads with 409, and nothing
  is stored.
"""

from __future__ import annotations

import os
import stat

import sqlalchemy as sa

from server.db import make_engine, upgrade
from server.services import backup
from server.settings import Settings
from tests.factories import bearer

from .conftest import counts, loop_bytes, new_token, seed_batch


def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def test_sqlite_files_and_backups_are_private(tmp_path):
    old = os.umask(0o022)  # the common default, which would give 0644
    try:
        db = tmp_path / "data" / "remanence.db"
        url = f"sqlite:///{db}"
        upgrade(url)
        engine = make_engine(url)
        with engine.begin() as conn:
            conn.execute(sa.text("INSERT INTO sitesetting (key, value, updated_by, updated_at) "
                                 "VALUES ('x', '1', 't', '2026-01-01 00:00:00')"))
            for suffix in ("", "-wal", "-shm"):
                assert _mode(f"{db}{suffix}") == 0o600, suffix
            manifest = backup.backup(engine, url, tmp_path / "backup-1")
        engine.dispose()
        assert _mode(tmp_path / "backup-1") == 0o700
        for name in os.listdir(tmp_path / "backup-1"):
            assert _mode(tmp_path / "backup-1" / name) == 0o600, name
        assert manifest["snapshot"] in os.listdir(tmp_path / "backup-1")
    finally:
        os.umask(old)


def test_an_existing_database_and_key_are_tightened(tmp_path):
    db = tmp_path / "old.db"
    upgrade(f"sqlite:///{db}")
    os.chmod(db, 0o644)
    (tmp_path / "secret_key").write_text("an-old-key-copied-in-with-loose-rights\n")
    os.chmod(tmp_path / "secret_key", 0o644)
    make_engine(f"sqlite:///{db}").dispose()
    settings = Settings(data_dir=tmp_path, database_url=f"sqlite:///{db}").resolved()
    assert settings.secret_key == "an-old-key-copied-in-with-loose-rights"
    assert _mode(db) == 0o600 and _mode(tmp_path / "secret_key") == 0o600


def test_new_secret_key_is_private(tmp_path):
    Settings(data_dir=tmp_path / "fresh", database_url="sqlite:///:memory:").resolved()
    assert _mode(tmp_path / "fresh" / "secret_key") == 0o600


def _upload(client, batch, token, i=0):
    return client.post(f"/api/v1/batches/{batch}/measurements", headers=bearer(token), data={"kind": "pe_loop"},
                       files={"file": (f"loop-{i}.csv", loop_bytes(i), "text/csv")})


def test_archived_batches_refuse_uploads_with_409(client, app, settings):
    engine = app.state.engine
    compound, batch = seed_batch(engine, settings)
    writer, uploader = new_token(engine, "write", "lims"), new_token(engine, "upload", "pe-pc")
    assert client.post(f"/api/v1/batches/{batch}/archive", headers=bearer(writer)).status_code == 200
    before = counts(engine)
    r = _upload(client, batch, uploader)
    assert r.status_code == 409 and "archived" in r.json()["detail"]
    assert counts(engine) == before  # nothing stored
    assert client.post(f"/api/v1/batches/{batch}/restore", headers=bearer(writer)).status_code == 200
    assert _upload(client, batch, uploader).status_code == 201


def test_batches_of_an_archived_compound_refuse_uploads(client, app, settings):
    engine = app.state.engine
    compound, batch = seed_batch(engine, settings)
    writer, uploader = new_token(engine, "write", "lims"), new_token(engine, "upload", "pe-pc")
    assert client.post(f"/api/v1/compounds/{compound}/archive", headers=bearer(writer)).status_code == 200
    assert _upload(client, batch, uploader, 1).status_code == 409
    assert counts(engine) == (0, 0)
