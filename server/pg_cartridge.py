"""The RDKit PostgreSQL cartridge as packaged: find its install script, detect the known defect, fix it on request.

Debian's ``postgresql-15-rdkit`` 202209.3 ships ``rdkit--4.2.0.sql`` whose ``CREATE OPERATOR @=``
statements (for ``mol`` and ``reaction``) name ``=`` as their commutator and ``<>`` as their
negator. PostgreSQL 15 refuses that script: ``CREATE EXTENSION rdkit`` fails with
"commutator operator = is already the commutator of operator =" (the ``=`` operator of the
same types already has its own commutator). Upstream fixed it by making ``@=`` its own
commutator and dropping the negator (rdkit/rdkit pull request #7596, "Fix @= operator
definitions in the PostgreSQL cartridge"). :func:`fixed_script` applies exactly that edit, to
the ``CREATE OPERATOR @=`` blocks only.

Nothing here edits a system file by itself: :func:`apply_fix` is called only by
``remanence setup postgres --apply``, which an administrator runs on the database server
(it keeps the original beside the file as ``<name>.remanence-orig``).
"""

from __future__ import annotations

import glob
import re
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

__all__ = [
    "DEFECT_MESSAGE",
    "ScriptCheck",
    "extension_dirs",
    "check_scripts",
    "find_defect",
    "fixed_script",
    "apply_fix",
    "is_known_defect",
    "fix_instructions",
]

# What PostgreSQL answers to CREATE EXTENSION rdkit with the defective script.
DEFECT_MESSAGE = "is already the commutator of operator"
BACKUP_SUFFIX = ".remanence-orig"

_BLOCK = re.compile(r"^CREATE OPERATOR @= \(\n.*?^\);", re.MULTILINE | re.DOTALL)
_BAD_COMMUTATOR = re.compile(r"^(\s*COMMUTATOR\s*=\s*)'='", re.MULTILINE)
_NEGATOR_LINE = re.compile(r"^\s*NEGATOR\s*=\s*'<>',?\n", re.MULTILINE)


@dataclass(frozen=True)
class ScriptCheck:
    """One rdkit extension script: where it is, and the line numbers of defective ``@=`` definitions."""

    path: Path
    defect_lines: tuple[int, ...]

    @property
    def defective(self) -> bool:
        return bool(self.defect_lines)


def find_defect(sql: str) -> tuple[int, ...]:
    """1-based line numbers of ``COMMUTATOR = '='`` inside ``CREATE OPERATOR @= (...)`` blocks."""
    lines = []
    for block in _BLOCK.finditer(sql):
        for bad in _BAD_COMMUTATOR.finditer(block.group(0)):
            lines.append(sql.count("\n", 0, block.start() + bad.start()) + 1)
    return tuple(lines)


def fixed_script(sql: str) -> str:
    """The script with every ``@=`` operator its own commutator and without a negator (idempotent)."""

    def fix(block: re.Match) -> str:
        text = _BAD_COMMUTATOR.sub(r"\1'@='", block.group(0))
        return _NEGATOR_LINE.sub("", text)

    return _BLOCK.sub(fix, sql)


def extension_dirs() -> list[Path]:
    """PostgreSQL extension folders on this machine: ``pg_config --sharedir``, else Debian's layout."""
    found: list[Path] = []
    pg_config = shutil.which("pg_config")
    if pg_config:
        out = subprocess.run([pg_config, "--sharedir"], capture_output=True, text=True, check=False).stdout.strip()
        if out:
            found.append(Path(out) / "extension")
    found += [Path(p) for p in sorted(glob.glob("/usr/share/postgresql/*/extension"))]
    unique: list[Path] = []
    for p in found:
        if p.is_dir() and p.resolve() not in [u.resolve() for u in unique]:
            unique.append(p)
    return unique


def check_scripts(dirs: list[Path]) -> list[ScriptCheck]:
    """Every ``rdkit--*.sql`` script in ``dirs`` with its defect lines (backups are not scripts)."""
    out = []
    for d in dirs:
        for path in sorted(Path(d).glob("rdkit--*.sql")):
            out.append(ScriptCheck(path, find_defect(path.read_text())))
    return out


def apply_fix(path: Path) -> bool:
    """Fix one script in place, keeping the original as ``<path>.remanence-orig``; False if it needed nothing.

    Raises
    ------
    PermissionError
        When the file cannot be written (run as the owner of the PostgreSQL installation, usually root).
    """
    sql = path.read_text()
    new = fixed_script(sql)
    if new == sql:
        return False
    backup = path.with_name(path.name + BACKUP_SUFFIX)
    if not backup.exists():
        shutil.copy2(path, backup)
    tmp = path.with_name(path.name + ".remanence-new")
    tmp.write_text(new)
    shutil.copymode(path, tmp)
    tmp.replace(path)
    return True


def is_known_defect(message: str) -> bool:
    """True when a CREATE EXTENSION rdkit error is the packaged-script defect this module fixes."""
    return DEFECT_MESSAGE in message


def fix_instructions() -> str:
    """What an administrator runs on the database server, word for word."""
    return (
        "The packaged RDKit cartridge's install script has a known defect (operator @= names '=' as its "
        "commutator; fixed upstream in rdkit/rdkit PR #7596). On the PostgreSQL server, as root, run:\n"
        "    remanence setup postgres            # shows what it would change\n"
        "    remanence setup postgres --apply    # fixes the script (original kept as *.remanence-orig),\n"
        "                                        # creates the extension and the structure table\n"
        "Without remanence on that machine, the same edit is:\n"
        "    sed -i \"/^CREATE OPERATOR @= (/,/^);/{s/COMMUTATOR = '='/COMMUTATOR = '@='/;/NEGATOR = '<>',/d}\" "
        "/usr/share/postgresql/15/extension/rdkit--4.2.0.sql\n"
        "then run `remanence setup postgres --apply` (or `remanence init`) from an app machine."
    )
