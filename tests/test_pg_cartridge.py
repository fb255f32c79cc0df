"""Detecting and fixing the packaged RDKit cartridge's install-script defect, on copies in a temp folder.

The defective form is Debian postgresql-15-rdkit 202209.3's ``rdkit--4.2.0.sql``: its
``CREATE OPERATOR @=`` blocks say ``COMMUTATOR = '='`` and ``NEGATOR = '<>'``; the upstream
fix (rdkit/rdkit PR #7596) makes ``@=`` its own commutator and drops the negator. The
independent reference for the edit is the ``sed`` line CI used before this step existed.
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from server import pg_cartridge
from server.cli import main

DEFECTIVE = """-- mol comparison
CREATE OPERATOR = (
    LEFTARG = mol,
    RIGHTARG = mol,
    PROCEDURE = mol_eq,
    COMMUTATOR = '=',
    NEGATOR = '<>',
    RESTRICT = eqsel,
    JOIN = eqjoinsel
);

CREATE OPERATOR @= (
    LEFTARG = mol,
    RIGHTARG = mol,
    PROCEDURE = mol_eq,
    COMMUTATOR = '=',
    NEGATOR = '<>',
    RESTRICT = eqsel,
    JOIN = eqjoinsel
);

CREATE OPERATOR @= (
    LEFTARG = reaction,
    RIGHTARG = reaction,
    PROCEDURE = reaction_eq,
    COMMUTATOR = '=',
    NEGATOR = '<>',
    RESTRICT = eqsel,
    JOIN = eqjoinsel
);
"""
# The sed of the former .ci/run, applied to a copy (the outside reference for the edit).
CI_SED = "/^CREATE OPERATOR @= (/,/^);/{s/COMMUTATOR = '='/COMMUTATOR = '@='/;/NEGATOR = '<>',/d}"


def test_defect_lines_are_the_commutators_of_the_at_equals_blocks():
    lines = DEFECTIVE.splitlines()
    found = pg_cartridge.find_defect(DEFECTIVE)
    assert len(found) == 2
    assert all(lines[n - 1].strip() == "COMMUTATOR = '='," for n in found)
    assert all(n > 12 for n in found)  # the '=' operator's own commutator is not a defect


@pytest.mark.skipif(shutil.which("sed") is None, reason="needs sed")
def test_fix_equals_the_sed_edit_and_is_idempotent(tmp_path):
    copy = tmp_path / "rdkit--4.2.0.sql"
    copy.write_text(DEFECTIVE)
    subprocess.run(["sed", "-i", CI_SED, str(copy)], check=True)
    fixed = pg_cartridge.fixed_script(DEFECTIVE)
    assert fixed == copy.read_text()
    assert pg_cartridge.find_defect(fixed) == ()
    assert pg_cartridge.fixed_script(fixed) == fixed
    assert fixed.count("NEGATOR = '<>'") == 1  # only the '=' operator keeps its negator


def test_installed_script_if_any_is_read_without_error():
    for check in pg_cartridge.check_scripts(pg_cartridge.extension_dirs()):
        fixed = pg_cartridge.fixed_script(check.path.read_text())
        assert pg_cartridge.find_defect(fixed) == ()


def test_known_defect_message_is_recognised():
    assert pg_cartridge.is_known_defect("commutator operator = is already the commutator of operator =")
    assert not pg_cartridge.is_known_defect('could not open extension control file "rdkit.control"')
    text = pg_cartridge.fix_instructions()
    assert "remanence setup postgres --apply" in text and CI_SED in text


@pytest.fixture
def sharedir(tmp_path, monkeypatch) -> Path:
    d = tmp_path / "extension"
    d.mkdir()
    (d / "rdkit--4.2.0.sql").write_text(DEFECTIVE)
    monkeypatch.setenv("REMANENCE_DATABASE_URL", f"sqlite:///{tmp_path / 'r.db'}")
    monkeypatch.setenv("REMANENCE_DATA_DIR", str(tmp_path))
    return d


def test_setup_without_apply_reports_and_changes_nothing(sharedir, capsys):
    assert main(["setup", "postgres", "--sharedir", str(sharedir)]) == 1
    out = capsys.readouterr().out
    assert "FIX" in out and "--apply" in out
    assert (sharedir / "rdkit--4.2.0.sql").read_text() == DEFECTIVE
    assert not list(sharedir.glob("*.remanence-orig"))


def test_setup_with_apply_fixes_and_keeps_the_original(sharedir, capsys):
    script = sharedir / "rdkit--4.2.0.sql"
    script.chmod(0o644)
    assert main(["setup", "postgres", "--sharedir", str(sharedir), "--apply"]) == 0
    assert pg_cartridge.find_defect(script.read_text()) == ()
    assert (sharedir / "rdkit--4.2.0.sql.remanence-orig").read_text() == DEFECTIVE
    assert script.stat().st_mode & 0o777 == 0o644
    assert main(["setup", "postgres", "--sharedir", str(sharedir)]) == 0  # nothing left to fix
    assert "no defect" in capsys.readouterr().out


def test_setup_without_a_script_says_what_to_install(tmp_path, capsys):
    assert main(["setup", "postgres", "--sharedir", str(tmp_path)]) == 1
    assert "postgresql-15-rdkit" in capsys.readouterr().out
