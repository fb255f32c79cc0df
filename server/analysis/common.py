"""Shared pieces of the analysis modules: flags and the result protocol.

Every analysis module exposes

* ``METHOD``: a short human sentence naming the published method (shown on pages),
* ``VERSION``: a string such as ``"hysteresis/1.0"``; bump it when results can change,
  so stored measurements know which code produced them and ``remanence reanalyze``
  can report what moved,
* one or more pure functions returning a frozen dataclass with ``to_dict()``
  (JSON-ready, units in key names), ``flags`` and, where the method defines one,
  ``verdict``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, is_dataclass
from typing import Any

import numpy as np


@dataclass(frozen=True)
class Flag:
    """A reason not to take a result at face value.

    ``code`` is a stable snake_case identifier (tests and filters use it);
    ``message`` explains it to a chemist in one sentence.
    """

    code: str
    message: str

    def to_dict(self) -> dict[str, str]:
        return {"code": self.code, "message": self.message}


def jsonable(value: Any) -> Any:
    """Turn dataclasses, numpy scalars/arrays, tuples and NaN into JSON-ready values.

    NaN and infinities become ``None`` (JSON has no NaN); callers that must not pass
    a NaN on silently should flag it before it gets here.
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
