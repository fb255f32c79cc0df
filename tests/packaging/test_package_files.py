"""server.package_files in a checkout: the repository's top-level folders (the wheel layout is
covered by test_wheel.py, which installs a built wheel)."""

from __future__ import annotations

from pathlib import Path

import pytest

from server.package_files import BUNDLED_FOLDERS, bundled_dir, migrations_dir, static_dir, templates_dir

REPO = Path(__file__).resolve().parents[2]


def test_a_checkout_uses_its_top_level_folders():
    assert templates_dir() == REPO / "templates" and (templates_dir() / "base.html").is_file()
    assert static_dir() == REPO / "static" and (static_dir() / "css" / "remanence.css").is_file()
    assert migrations_dir() == REPO / "migrations" and (migrations_dir() / "env.py").is_file()
    assert set(BUNDLED_FOLDERS) == {"templates", "static", "migrations"}


def test_an_unknown_folder_is_refused():
    with pytest.raises(ValueError, match="bundled folders"):
        bundled_dir("uploads")
