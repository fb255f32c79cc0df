"""Files only the server's own account may read: the database, its WAL, backups, the secret key.

Unpublished structures live in these files, so they are created with mode 0600 (folders 0700)
rather than whatever the process umask allows (commonly 0644, readable by every local user).
SQLite creates its ``-wal`` and ``-shm`` files with the permissions of the database file
(SQLite documentation, "Write-Ahead Logging", and the unix VFS), so a database created 0600
keeps its companions 0600 too; existing files are tightened when the engine is made.
"""

from __future__ import annotations

import os
from pathlib import Path

FILE_MODE = 0o600
DIR_MODE = 0o700
SQLITE_COMPANIONS = ("", "-wal", "-shm", "-journal")


def private_dir(path: Path) -> Path:
    """Make ``path`` (and missing parents) a folder; a folder made here is 0700."""
    path = Path(path)
    if not path.exists():
        path.mkdir(parents=True, mode=DIR_MODE)
        os.chmod(path, DIR_MODE)  # mkdir's mode is filtered by the umask
    return path


def private_file(path: Path) -> Path:
    """Create ``path`` empty with mode 0600 if it is missing; tighten it to 0600 if it exists."""
    path = Path(path)
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, FILE_MODE)
        os.close(fd)
    except FileExistsError:
        os.chmod(path, FILE_MODE)
    return path


def write_private_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path``, which ends up with mode 0600 (created so, never readable by others)."""
    private_file(path)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(text)


def private_sqlite(database: str) -> None:
    """Create the SQLite file 0600 if missing, and tighten it and its companions to 0600."""
    base = Path(database)
    private_dir(base.parent)
    private_file(base)
    for suffix in SQLITE_COMPANIONS[1:]:
        companion = Path(str(base) + suffix)
        if companion.exists():
            os.chmod(companion, FILE_MODE)
