"""Where the templates, static files and migrations are, in a checkout and in an installed wheel.

In the repository they are top-level folders beside ``server/``. A wheel carries them inside
the package (``site-packages/server/templates`` and so on; see setup.py). The packaged copy is
looked for first, beside this file, so an installed server never picks up a stray ``templates``
folder that happens to sit next to it in site-packages; a checkout (or an editable install,
whose ``server`` is the checkout's folder) has no such copy and uses the repository's folders.
"""

from __future__ import annotations

from pathlib import Path

PACKAGE_DIR = Path(__file__).resolve().parent
CHECKOUT_DIR = PACKAGE_DIR.parent

BUNDLED_FOLDERS = ("templates", "static", "migrations")


def bundled_dir(name: str) -> Path:
    """The folder ``name`` (one of :data:`BUNDLED_FOLDERS`), packaged copy first, else the checkout's.

    Raises ``FileNotFoundError`` naming both places when neither exists: a server without its
    templates must fail at start, not answer blank pages.
    """
    if name not in BUNDLED_FOLDERS:
        raise ValueError(f"{name!r} is not one of the bundled folders {BUNDLED_FOLDERS}")
    for candidate in (PACKAGE_DIR / name, CHECKOUT_DIR / name):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError(f"no {name}/ folder in {PACKAGE_DIR} (installed) or {CHECKOUT_DIR} (checkout)")


def templates_dir() -> Path:
    return bundled_dir("templates")


def static_dir() -> Path:
    return bundled_dir("static")


def migrations_dir() -> Path:
    return bundled_dir("migrations")
