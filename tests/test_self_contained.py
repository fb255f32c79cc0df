"""The repository documents itself: no file points at notes kept outside it.

Methods, sources and check values live in docs/methods.md; code shape lives in DEVELOPERS.md.
A docstring or comment that sends the reader to a team's private notes (or to a folder beside
the checkout) breaks for everyone who has only the repository. The patterns are assembled from
pieces so that this file does not match itself.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
SKIP_DIRS = {".git", ".venv", "var", "build", "dist", "node_modules", "__pycache__", ".pytest_cache"}

OUTSIDE = re.compile(
    "|".join([
        r"\bREFERENCES" + r"\.md\b",       # the team's check-value notes
        r"\bSTYLE" + r"\.md\b",            # the team's code-shape notes
        r"\.\./" + r"shared\b",            # a folder beside the checkout
        r"/work" + r"/(?:shared|main|wt)\b",  # absolute paths of one machine
    ]),
    re.IGNORECASE,
)


def _repository_files() -> list[Path]:
    """Tracked files plus new ones not ignored; without git, every file outside SKIP_DIRS."""
    if shutil.which("git") and (REPO / ".git").exists():
        out = subprocess.run(["git", "ls-files", "-z", "--cached", "--others", "--exclude-standard"],
                             cwd=REPO, capture_output=True, check=True).stdout
        return [REPO / name for name in out.decode().split("\0") if name and (REPO / name).is_file()]
    return [p for p in REPO.rglob("*") if p.is_file() and not SKIP_DIRS & set(p.relative_to(REPO).parts)]


def test_the_pattern_catches_what_it_should():
    for text in ("see " + "REFERENCES" + ".md", "(STYLE" + ".md, example 7)", "../" + "shared/notes",
                 "/work" + "/shared/x"):
        assert OUTSIDE.search(text), text
    for text in ("docs/methods.md", "DEVELOPERS.md", "a shared session", "../../etc/passwd"):
        assert not OUTSIDE.search(text), text


def test_no_file_points_outside_the_repository():
    files = _repository_files()
    assert len(files) > 50, "the file listing found almost nothing; the check would prove nothing"
    hits = []
    for path in files:
        text = path.read_bytes().decode("utf-8", errors="replace")
        for number, line in enumerate(text.splitlines(), start=1):
            if OUTSIDE.search(line):
                hits.append(f"{path.relative_to(REPO)}:{number}: {line.strip()[:120]}")
    assert not hits, "files point outside the repository (cite the source or docs/methods.md):\n" + "\n".join(hits)


@pytest.mark.parametrize("section", ["Constants", "P-E hysteresis loops", "PUND", "Dielectric permittivity", "DSC",
                                     "Kinetics", "Calibration", "GFN2-xTB", "Bowl geometry", "Crystal structures"])
def test_methods_file_has_each_section_the_code_cites(section):
    headings = [line[3:] for line in (REPO / "docs" / "methods.md").read_text().splitlines() if line.startswith("## ")]
    assert any(h.startswith(section) for h in headings), (section, headings)
