"""Text no database column can hold: the NUL character (U+0000), refused at the door with 422.

PostgreSQL's text types cannot store U+0000 at all (the driver raises ``DataError``), and SQLite
stores it but every C-string consumer (RDKit, gemmi, most export readers) silently truncates at it.
No field of ours has a use for it, so rather than constrain hundreds of string fields one by one,
one check runs before any handler:

* the path and every query-string name and value;
* a JSON body (``application/json``): every key and string value, reported by its location
  (``compounds.3``, ``conditions.area``);
* an urlencoded form body.

Multipart bodies are left alone: their files are raw bytes that may hold NUL legitimately (the
ingest layer sniffs binary files itself), and their text fields are short; any NUL that still reaches
PostgreSQL is answered 422 by the ``DataError`` handler in ``server.app`` as a last line.

The check is cheap: a body is parsed only when its bytes contain a NUL or its JSON escape.
"""

from __future__ import annotations

import json
from typing import Any, Iterator
from urllib.parse import parse_qsl

NUL = "\x00"
_RAW_MARKERS = (b"\x00", b"\\u0000")  # a raw NUL byte, or JSON's escape for it (hex digits are all 0)
_FORM_MARKERS = (b"%00", b"\x00")


def _nul_locations(value: Any, where: tuple[str, ...] = ()) -> Iterator[str]:
    """Dotted locations of strings (keys or values) holding NUL in a decoded JSON document."""
    if isinstance(value, str):
        if NUL in value:
            yield ".".join(where) or "body"
    elif isinstance(value, dict):
        for key, item in value.items():
            if NUL in str(key):
                yield ".".join((*where, repr(str(key)))) + " (a key)"
            yield from _nul_locations(item, (*where, str(key)))
    elif isinstance(value, list):
        for i, item in enumerate(value):
            yield from _nul_locations(item, (*where, str(i)))


def nul_in_query(path: str, query: list[tuple[str, str]]) -> str | None:
    """The first path or query-string field holding NUL, or None."""
    if NUL in path:
        return "path"
    for name, value in query:
        if NUL in name or NUL in value:
            return name.replace(NUL, "\\0") or "query"
    return None


def _kind(content_type: str) -> str:
    return content_type.split(";", 1)[0].strip().lower()


def reads(content_type: str) -> bool:
    """Whether :func:`nul_in_body` reads bodies of this type (so the middleware buffers only those)."""
    kind = _kind(content_type)
    return kind == "application/json" or kind.endswith("+json") or kind == "application/x-www-form-urlencoded"


def nul_in_body(content_type: str, body: bytes) -> str | None:
    """The first JSON or form field holding NUL, or None (None too for bodies this module does not read)."""
    kind = _kind(content_type)
    if kind == "application/json" or kind.endswith("+json"):
        if not any(marker in body.lower() for marker in _RAW_MARKERS):
            return None
        try:
            document = json.loads(body)
        except ValueError:
            return "body" if b"\x00" in body else None  # malformed JSON is the handler's to refuse
        return next(_nul_locations(document), None)
    if kind == "application/x-www-form-urlencoded":
        if not any(marker in body.upper() for marker in _FORM_MARKERS):
            return None
        pairs = parse_qsl(body.decode("latin-1"), keep_blank_values=True)
        return nul_in_query("", pairs)
    return None


def refusal(field: str) -> str:
    return f"{field}: text may not contain the NUL character (U+0000)"
