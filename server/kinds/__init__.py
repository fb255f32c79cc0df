"""The measurement kinds: one module per upload ``kind``, and the registry built from them.

Each module of this package (except :mod:`server.kinds.base`) declares one ``KIND``, a
:class:`~server.kinds.base.Kind`: what it reads, the analysis it calls, its result labels,
its evidence for the verdict, its derived rows and CompoundStats figures, its figure,
summary and example file. :data:`KINDS` is built by importing every module here; a module
without ``KIND``, a kind whose name differs from its module's, or a kind that lacks a part
(:func:`~server.kinds.base.check_kind`) stops the import with the reason.

To add a kind, add one module here and its tests (DEVELOPERS.md, "Adding a kind").
"""

from __future__ import annotations

import importlib
import pkgutil

from .base import Context, Evidence, Example, Kind, Need, ResultKey, check_kind

__all__ = ["KINDS", "Context", "Evidence", "Example", "Kind", "Need", "ResultKey", "check_kind", "kind_modules",
           "needed_by"]


def kind_modules() -> list[str]:
    """The names of the kind modules of this package, sorted."""
    return sorted(m.name for m in pkgutil.iter_modules(__path__) if m.name != "base" and not m.name.startswith("_"))


def _build() -> dict[str, Kind]:
    kinds: dict[str, Kind] = {}
    for name in kind_modules():
        module = importlib.import_module(f"{__name__}.{name}")
        kind = getattr(module, "KIND", None)
        if not isinstance(kind, Kind):
            raise ImportError(f"server/kinds/{name}.py declares no KIND")
        if kind.name != name:
            raise ImportError(f"server/kinds/{name}.py declares the kind {kind.name!r}; name the module after it")
        problems = check_kind(kind)
        if problems:
            raise ImportError(f"kind {name!r} is incomplete: " + "; ".join(problems))
        kinds[name] = kind
    return kinds


#: Upload kind name -> Kind, in the order of the upload form (the order of ``ORDER``, then any others).
ORDER = ("pe_loop", "pund", "dielectric", "dsc", "nmr_rates", "crystal")
_ALL = _build()
KINDS: dict[str, Kind] = {**{n: _ALL[n] for n in ORDER if n in _ALL}, **_ALL}


def needed_by() -> dict[str, tuple[str, ...]]:
    """Condition field -> the kinds that use it (the upload form's hints)."""
    from ..ingest.conditions import CONDITION_FIELDS

    return {f: tuple(k.name for k in KINDS.values() if f in k.condition_fields) for f in CONDITION_FIELDS}
