"""The result protocol of the analysis modules: flags, and one serialiser for every result.

Every analysis module exposes

* ``METHOD``: a short human sentence naming the published method (shown on pages),
* ``VERSION``: a string such as ``"hysteresis/1.0"``; bump it when results can change,
  so stored measurements know which code produced them and ``remanence reanalyze``
  can report what moved,
* one or more pure functions returning a frozen dataclass that derives from :class:`Result`
  (so ``to_dict()`` is JSON-ready, units in key names), with ``flags`` and, where the method
  defines one, ``verdict``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, is_dataclass
from typing import Any, ClassVar, Optional

import numpy as np


def jsonable(value: Any) -> Any:
    """Turn dataclasses, numpy scalars/arrays, tuples and NaN into JSON-ready values.

    NaN and infinities become ``None`` (JSON has no NaN); callers that must not pass
    a NaN on silently should flag it before it gets here. A dataclass with ``to_dict()``
    is serialised by it, any other dataclass field by field.
    """
    if is_dataclass(value) and not isinstance(value, type):
        if hasattr(value, "to_dict"):
            return jsonable(value.to_dict())
        return {f.name: jsonable(getattr(value, f.name)) for f in fields(value)}
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return [jsonable(v) for v in value.tolist()]
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return f if math.isfinite(f) else None
    return value


class Result:
    """Base of the analysis result dataclasses: one ``to_dict()`` for all of them.

    By default the JSON holds every dataclass field in declaration order, less those named in
    ``JSON_OMIT`` (plot arrays, coordinates, fit internals). A class whose published keys differ
    from its fields (order, a derived value such as ``verdict``) lists them in ``JSON_KEYS``: each a
    field or a property. Values go through :func:`jsonable` (numpy -> Python, NaN -> None,
    tuples -> lists, nested results by their own ``to_dict()``).
    """

    JSON_KEYS: ClassVar[Optional[tuple[str, ...]]] = None
    JSON_OMIT: ClassVar[tuple[str, ...]] = ()

    def to_dict(self) -> dict[str, Any]:
        keys = self.JSON_KEYS
        if keys is None:
            keys = tuple(f.name for f in fields(self) if f.name not in self.JSON_OMIT)  # type: ignore[arg-type]
        return {key: jsonable(getattr(self, key)) for key in keys}


@dataclass(frozen=True)
class Flag(Result):
    """A reason not to take a result at face value.

    ``code`` is a stable snake_case identifier (tests and filters use it);
    ``message`` explains it to a chemist in one sentence.
    """

    code: str
    message: str
