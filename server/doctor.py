"""`remanence doctor`: is this installation in working order? Each check is OK or says what to fix.

Checks, in order: the database (reachable, migrated to the newest revision), the structure
search back end (the RDKit cartridge on PostgreSQL), the workers (jobs waiting with nobody
heartbeating), the data folder (owner-only permissions, free space) and the age of the newest
backup. Nothing is changed: the cartridge probe runs ``CREATE EXTENSION`` inside a transaction
that is rolled back.

The thresholds are common practice for a small group server, not from a standard: a backup
at least daily (26 h leaves room for a nightly timer's jitter), at least 2 GiB free, a queued
job left waiting five minutes with no worker heartbeat in that time.
"""

from __future__ import annotations

import json
import os
import shutil
import stat
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Optional

from sqlalchemy import text
from sqlalchemy.engine import Engine
from sqlalchemy.exc import DBAPIError, OperationalError

from .settings import Settings

__all__ = ["Check", "run_checks", "MIN_FREE_BYTES", "MAX_BACKUP_AGE", "WORKER_WAIT"]

MIN_FREE_BYTES = 2 * 1024**3
MAX_BACKUP_AGE = timedelta(hours=26)
WORKER_WAIT = timedelta(minutes=5)


@dataclass(frozen=True)
class Check:
    name: str
    ok: bool
    detail: str

    def line(self) -> str:
        return f"{'OK ' if self.ok else 'FIX'}  {self.name}: {self.detail}"


def _now() -> datetime:
    return datetime.now(timezone.utc)


def _aware(moment: datetime) -> datetime:
    return moment if moment.tzinfo else moment.replace(tzinfo=timezone.utc)


def _span(delta: timedelta) -> str:
    s = delta.total_seconds()
    if s < 120:
        return f"{s:.0f} s"
    if s < 7200:
        return f"{s / 60:.0f} min"
    if s < 172800:
        return f"{s / 3600:.1f} h"
    return f"{s / 86400:.1f} days"


def _ago(delta: timedelta) -> str:
    return _span(delta) + " ago"


def check_database(engine: Engine, database_url: str) -> Check:
    from alembic.runtime.migration import MigrationContext
    from alembic.script import ScriptDirectory

    from .db import alembic_config

    try:
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
            current = set(MigrationContext.configure(conn).get_current_heads())
    except OperationalError as exc:
        return Check("database", False, f"cannot connect ({str(exc.orig).strip().splitlines()[0]}); check "
                                        "REMANENCE_DATABASE_URL and that the server runs")
    heads = set(ScriptDirectory.from_config(alembic_config(database_url)).get_heads())
    if current != heads:
        return Check("database", False, f"at revision {', '.join(sorted(current)) or 'none'}, the code needs "
                                        f"{', '.join(sorted(heads))}: run `remanence init`")
    return Check("database", True, f"{engine.dialect.name} reachable, migrated ({', '.join(sorted(heads))})")


def check_cartridge(engine: Engine) -> Check:
    from . import pg_cartridge
    from .services.search import STRUCTURE_TABLE

    if engine.dialect.name != "postgresql":
        return Check("structure search", True, f"{engine.dialect.name}: in-process index (no cartridge needed)")
    with engine.connect() as conn:
        installed = conn.execute(text("SELECT extversion FROM pg_extension WHERE extname = 'rdkit'")).scalar()
        table = conn.execute(text("SELECT to_regclass(:t)"), {"t": STRUCTURE_TABLE}).scalar()
        available = conn.execute(text("SELECT 1 FROM pg_available_extensions WHERE name = 'rdkit'")).first()
        if installed and table:
            return Check("structure search", True, f"RDKit cartridge {installed}, table {STRUCTURE_TABLE} present")
        if installed:
            return Check("structure search", False, f"RDKit cartridge {installed} but no {STRUCTURE_TABLE} table "
                                                    "(search runs in process): run `remanence init`")
        if available is None:
            return Check("structure search", False, "no RDKit cartridge on the PostgreSQL server (search runs in "
                                                    "process, one index per app process): install the Debian "
                                                    "package postgresql-15-rdkit there, then `remanence init`")
        conn.rollback()
        trans = conn.begin()
        try:
            conn.execute(text("CREATE EXTENSION rdkit"))
            error = ""
        except DBAPIError as exc:
            error = str(exc.orig).strip().splitlines()[0]
        finally:
            trans.rollback()
    if pg_cartridge.is_known_defect(error):
        return Check("structure search", False, "CREATE EXTENSION rdkit fails with the packaged script's known "
                                                f"defect ({error}).\n" + pg_cartridge.fix_instructions())
    if error:
        return Check("structure search", False, f"CREATE EXTENSION rdkit fails ({error}); as a PostgreSQL "
                                                "superuser, fix that, then run `remanence init`")
    return Check("structure search", False, "the RDKit cartridge can be created but is not: run `remanence init` "
                                            "as a database user allowed to CREATE EXTENSION")


def check_workers(engine: Engine, settings: Settings, now: Optional[datetime] = None) -> Check:
    now = now or _now()
    with engine.connect() as conn:
        queued, oldest = conn.execute(text("SELECT count(*), min(created_at) FROM job WHERE state = 'queued'")).one()
        beat = conn.execute(text("SELECT max(heartbeat_at) FROM job")).scalar()
    if isinstance(oldest, str):  # SQLite hands back text
        oldest = datetime.fromisoformat(oldest)
    if isinstance(beat, str):
        beat = datetime.fromisoformat(beat)
    seen = f"last heartbeat {_ago(now - _aware(beat))}" if beat else "no worker heartbeat recorded yet"
    if not queued:
        return Check("workers", True, f"no job waiting; {seen}")
    waited = now - _aware(oldest)
    recent = beat is not None and now - _aware(beat) <= WORKER_WAIT
    if waited > WORKER_WAIT and not recent:
        where = ("the embedded worker of `remanence serve` is on (REMANENCE_EMBEDDED_WORKER); is serve running?"
                 if settings.embedded_worker else "start `remanence worker` (systemd unit remanence-worker)")
        return Check("workers", False, f"{queued} job(s) waiting, the oldest for {_span(waited)}, {seen}: {where}")
    return Check("workers", True, f"{queued} job(s) waiting; {seen}")


def check_data_dir(data_dir: Path) -> Check:
    data_dir = Path(data_dir)
    if not data_dir.is_dir():
        return Check("data folder", False, f"{data_dir} does not exist: create it (mkdir -m 700) or set "
                                           "REMANENCE_DATA_DIR")
    problems = []
    mode = stat.S_IMODE(data_dir.stat().st_mode)
    if mode & 0o007:
        problems.append(f"other users may read it (mode {mode:04o}): chmod o-rwx {data_dir}")
    if not os.access(data_dir, os.W_OK | os.X_OK):
        problems.append("this user cannot write to it: chown it to the service user")
    free = shutil.disk_usage(data_dir).free
    if free < MIN_FREE_BYTES:
        problems.append(f"only {free / 1024**3:.1f} GiB free (want {MIN_FREE_BYTES / 1024**3:.0f} GiB): free space "
                        "or move REMANENCE_DATA_DIR")
    if problems:
        return Check("data folder", False, f"{data_dir}: " + "; ".join(problems))
    return Check("data folder", True, f"{data_dir}, mode {mode:04o}, {free / 1024**3:.1f} GiB free")


def check_backups(backups: Optional[Path], now: Optional[datetime] = None) -> Check:
    from .services.backup import MANIFEST

    now = now or _now()
    if backups is None:
        return Check("backups", False, "not checked: give the folder that `remanence backup` writes into "
                                       "(remanence doctor --backups DIR)")
    newest: Optional[tuple[datetime, Path]] = None
    for manifest in Path(backups).glob(f"*/{MANIFEST}"):
        try:
            made = _aware(datetime.fromisoformat(json.loads(manifest.read_text())["made_at"]))
        except (ValueError, KeyError, OSError):
            continue
        if newest is None or made > newest[0]:
            newest = (made, manifest.parent)
    if newest is None:
        return Check("backups", False, f"no backup in {backups}: schedule `remanence backup` (README, Deployment)")
    age = now - newest[0]
    if age > MAX_BACKUP_AGE:
        return Check("backups", False, f"newest backup {newest[1].name} is from {_ago(age)}: is the backup timer "
                                       "running? (systemctl status remanence-backup.timer)")
    return Check("backups", True, f"newest {newest[1].name}, {_ago(age)}")


def run_checks(settings: Settings, *, backups: Optional[Path] = None) -> list[Check]:
    """Every check, in order; the later database checks are left out when the database is unreachable."""
    from .db import make_engine

    engine = make_engine(settings.database_url)
    try:
        checks = [check_database(engine, settings.database_url)]
        if checks[0].ok or "revision" in checks[0].detail:
            checks.append(check_cartridge(engine))
            if checks[0].ok:
                checks.append(check_workers(engine, settings))
        checks.append(check_data_dir(settings.data_dir))
        checks.append(check_backups(backups))
    finally:
        engine.dispose()
    return checks
