"""Static files with versioned addresses, so browsers may keep them for a year.

Templates ask :func:`static_url` for an asset (``static_url("css/remanence.css")``) and get
``/static/css/remanence.css?v=<12 hex digits of the file's SHA-256>``. The address changes
whenever the file's bytes change, so :class:`VersionedStaticFiles` can answer a request whose
``v`` matches the file as it is now with ``Cache-Control: public, max-age=31536000, immutable``;
any other request for a static file (no ``v``, an old ``v``) gets ``no-cache`` and is
revalidated with its ETag. A new release therefore reaches every browser on its first page.

The plotting library is the partial "basic" bundle of plotly.js (npm ``plotly.js-basic-dist-min``,
MIT licence beside it), which draws scatter, bar and pie traces: every figure of the app is made
of scatter traces (``server/plots/``), and ``tests/web/test_assets.py`` checks that no builder
uses another trace type. Pages load it only when they hold a figure.
"""

from __future__ import annotations

import hashlib
from functools import lru_cache
from pathlib import Path

from starlette.staticfiles import StaticFiles
from starlette.types import Scope

from ..package_files import static_dir

PLOTLY_BUNDLE = "vendor/plotly.js-basic-dist-min-4.1.1/plotly-basic.min.js"
PLOTLY_TRACE_TYPES = frozenset({"scatter", "bar", "pie"})  # what the basic bundle draws
LONG_CACHE = "public, max-age=31536000, immutable"
REVALIDATE = "no-cache"


@lru_cache(maxsize=256)
def _digest(path: Path, mtime_ns: int, size: int) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:12]


def file_version(relative: str) -> str:
    """The version tag of ``static/<relative>``: the start of its SHA-256 (re-read when the file changes)."""
    path = (static_dir() / relative).resolve()
    if static_dir().resolve() not in path.parents:
        raise ValueError(f"{relative!r} is not inside static/")
    stat = path.stat()  # FileNotFoundError for a missing asset: a page must not link to nothing
    return _digest(path, stat.st_mtime_ns, stat.st_size)


def static_url(relative: str) -> str:
    """The versioned address of ``static/<relative>`` for templates."""
    return f"/static/{relative}?v={file_version(relative)}"


class VersionedStaticFiles(StaticFiles):
    """Starlette's StaticFiles that marks current versioned addresses as cacheable for a year."""

    def file_response(self, full_path, stat_result, scope: Scope, status_code: int = 200):  # noqa: ANN001
        response = super().file_response(full_path, stat_result, scope, status_code)
        response.headers["Cache-Control"] = LONG_CACHE if self._current(scope) else REVALIDATE
        return response

    def _current(self, scope: Scope) -> bool:
        query = scope.get("query_string", b"").decode("latin-1")
        sent = dict(part.partition("=")[::2] for part in query.split("&") if part).get("v")
        if not sent:
            return False
        relative = self.get_path(scope)
        try:
            return sent == file_version(relative)
        except (OSError, ValueError):
            return False
