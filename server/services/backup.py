"""Backups, restores and the raw-file integrity check.

* ``verify``: re-hash every stored raw file and compare with its recorded SHA-256.
* ``backup``: a consistent snapshot plus ``manifest.json`` (row counts per table, the
  Alembic revision, the SHA-256 of every raw file and of the snapshot itself).
  SQLite uses the online backup API (readers and writers may go on meanwhile);
  PostgreSQL uses ``pg_dump --format=custom`` (one transaction, so consistent).
* ``restore``: into an EMPTY database only; then the same counts and checksums are
  verified against the manifest, so a restore that does not reproduce the content fails.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import sqlite3
import subprocess
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Engine, make_url

from .. import __version__
from ..models import RawFile, metadata, utcnow
from ..private_files import private_dir, private_file, private_sqlite, write_private_text

MANIFEST = "manifest.json"
SQLITE_FILE = "remanence.db"
PG_FILE = "remanence.pgdump"


class BackupError(Exception):
    """A backup or restore that cannot go ahead, with the reason."""


@dataclass(frozen=True)
class Mismatch:
    raw_file_id: int
    stored_sha256: str
    actual_sha256: str


def verify(engine: Engine) -> tuple[int, list[Mismatch]]:
    """(files checked, mismatches): every raw file re-hashed from the bytes in the database."""
    checked, bad = 0, []
    with engine.connect() as conn:
        result = conn.execution_options(yield_per=200).execute(
            sa.select(RawFile.id, RawFile.sha256, RawFile.data).order_by(RawFile.id))
        for rid, sha, data in result:
            checked += 1
            actual = hashlib.sha256(bytes(data)).hexdigest()
            if actual != sha:
                bad.append(Mismatch(rid, sha, actual))
    return checked, bad


def _counts(engine: Engine) -> dict[str, int]:
    with engine.connect() as conn:
        return {t.name: conn.execute(sa.select(sa.func.count()).select_from(t)).scalar_one()
                for t in metadata.sorted_tables}


def _raw_hashes(engine: Engine) -> dict[str, str]:
    with engine.connect() as conn:
        return {str(rid): sha for rid, sha in conn.execute(sa.select(RawFile.id, RawFile.sha256).order_by(RawFile.id))}


def _revision(engine: Engine) -> str | None:
    with engine.connect() as conn:
        try:
            return conn.execute(sa.text("SELECT version_num FROM alembic_version")).scalar()
        except sa.exc.DBAPIError:
            return None


def _file_sha(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _pg_args(url: str) -> tuple[list[str], dict[str, str]]:
    u = make_url(url)
    args = ["--host", u.host or "127.0.0.1", "--port", str(u.port or 5432), "--username", u.username or "postgres",
            "--dbname", u.database]
    env = dict(os.environ)
    if u.password:
        env["PGPASSWORD"] = u.password
    return args, env


def backup(engine: Engine, database_url: str, target: Path) -> dict[str, Any]:
    """Write a snapshot and its manifest into ``target`` (a new or empty folder)."""
    target = Path(target)
    if target.exists() and any(target.iterdir()):
        raise BackupError(f"{target} is not empty; back up into a new folder")
    private_dir(target)
    os.chmod(target, 0o700)
    backend = make_url(database_url).get_backend_name()
    if backend == "sqlite":
        snapshot = private_file(target / SQLITE_FILE)
        src = sqlite3.connect(make_url(database_url).database)
        dst = sqlite3.connect(snapshot)
        try:
            with dst:
                src.backup(dst)
        finally:
            dst.close()
            src.close()
    elif backend == "postgresql":
        if shutil.which("pg_dump") is None:
            raise BackupError("pg_dump is not installed (Debian package postgresql-client)")
        snapshot = private_file(target / PG_FILE)  # pg_dump truncates it and keeps the mode
        args, env = _pg_args(database_url)
        proc = subprocess.run(["pg_dump", "--format=custom", "--no-owner", "--file", str(snapshot), *args],
                              env=env, capture_output=True, text=True)
        if proc.returncode != 0:
            raise BackupError(f"pg_dump failed: {proc.stderr.strip()}")
    else:
        raise BackupError(f"no backup method for {backend}")
    manifest = {
        "made_at": utcnow().isoformat(),
        "remanence_version": __version__,
        "backend": backend,
        "snapshot": snapshot.name,
        "snapshot_sha256": _file_sha(snapshot),
        "alembic_revision": _revision(engine),
        "counts": _counts(engine),
        "raw_files_sha256": _raw_hashes(engine),
    }
    write_private_text(target / MANIFEST, json.dumps(manifest, indent=2, sort_keys=True))
    return manifest


def _is_empty(engine: Engine) -> bool:
    insp = sa.inspect(engine)
    names = set(insp.get_table_names())
    if "compound" not in names:
        return True
    counts = _counts(engine)
    return all(n == 0 for n in counts.values())


def restore(engine: Engine, database_url: str, source: Path) -> dict[str, Any]:
    """Restore a backup folder into an empty database, then check it against the manifest."""
    source = Path(source)
    try:
        manifest = json.loads((source / MANIFEST).read_text())
    except FileNotFoundError:
        raise BackupError(f"{source} has no {MANIFEST}: not a Remanence backup") from None
    snapshot = source / manifest["snapshot"]
    if _file_sha(snapshot) != manifest["snapshot_sha256"]:
        raise BackupError(f"{snapshot.name} does not match the checksum in the manifest: the backup is damaged")
    if not _is_empty(engine):
        raise BackupError("the target database is not empty; restore only into a new, empty database")
    backend = make_url(database_url).get_backend_name()
    if backend != manifest["backend"]:
        raise BackupError(f"the backup is from {manifest['backend']}, the target is {backend}")
    engine.dispose()
    if backend == "sqlite":
        path = Path(make_url(database_url).database)
        for suffix in ("-wal", "-shm"):
            Path(str(path) + suffix).unlink(missing_ok=True)
        private_sqlite(str(path))
        src = sqlite3.connect(snapshot)
        dst = sqlite3.connect(path)
        try:
            with dst:
                src.backup(dst)
        finally:
            dst.close()
            src.close()
    else:
        if shutil.which("pg_restore") is None:
            raise BackupError("pg_restore is not installed (Debian package postgresql-client)")
        args, env = _pg_args(database_url)
        # An empty target may still hold the migrated (empty) schema: --clean --if-exists replaces it.
        proc = subprocess.run(["pg_restore", "--no-owner", "--clean", "--if-exists", "--exit-on-error", *args,
                               str(snapshot)], env=env, capture_output=True, text=True)
        if proc.returncode != 0:
            raise BackupError(f"pg_restore failed: {proc.stderr.strip()}")
    counts, hashes = _counts(engine), _raw_hashes(engine)
    if counts != manifest["counts"]:
        diff = {k: (manifest["counts"].get(k), counts.get(k)) for k in set(counts) | set(manifest["counts"])
                if counts.get(k) != manifest["counts"].get(k)}
        raise BackupError(f"restored row counts differ from the manifest: {diff}")
    if hashes != manifest["raw_files_sha256"]:
        raise BackupError("restored raw-file checksums differ from the manifest")
    checked, bad = verify(engine)
    if bad:
        raise BackupError(f"{len(bad)} restored raw file(s) do not match their checksum")
    return manifest
