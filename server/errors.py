"""Errors a user can act on.

Every error raised from ingest, chemistry or analysis code is an :class:`InputError`
(or a subclass) carrying a message written for a chemist, plus where the problem is:
a form/JSON ``field``, a file ``line`` (1-based, as an editor shows it) or a ``column``.
A ``detail`` (optional) carries a library's own words (RDKit's parse messages): part of the
text of the error, which a page may show apart from the plain message.
The API turns them into 422 responses; nothing is stored when one is raised.
"""

from __future__ import annotations


class RemanenceError(Exception):
    """Base class of the project's own errors."""


class InputError(RemanenceError):
    """Bad input from a user or an instrument file (HTTP 422)."""

    def __init__(
        self,
        message: str,
        *,
        field: str | None = None,
        line: int | None = None,
        column: str | None = None,
        detail: str | None = None,
    ) -> None:
        self.message = message
        self.field = field
        self.line = line
        self.column = column
        self.detail = detail
        super().__init__(str(self))

    def __str__(self) -> str:
        where = []
        if self.field is not None:
            where.append(f"field '{self.field}'")
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        text = f"{self.message} {self.detail}" if self.detail else self.message
        return f"{', '.join(where)}: {text}" if where else text

    def to_dict(self) -> dict:
        out: dict = {"detail": str(self)}
        for key in ("field", "line", "column"):
            value = getattr(self, key)
            if value is not None:
                out[key] = value
        return out


class ChemistryError(InputError):
    """A structure RDKit cannot accept (parse, valence, empty input)."""


class IngestError(InputError):
    """An instrument file that cannot be read into a table."""


class AnalysisError(InputError):
    """Data that were read but cannot be analysed (too few points, no zero crossing...)."""


class OverLimit(RemanenceError):
    """A request past one of the bounds on work (HTTP 413, or 429 for a per-account quota).

    ``limit`` names the bound (e.g. ``"cif_sites"``, ``"bulk_estimates"``, ``"job_quota"``) and
    ``value`` is its size, so a client can tell which limit it met; the message says the same for
    a person. Nothing is stored when one is raised.
    """

    status = 413

    def __init__(self, message: str, *, limit: str, value: float | int) -> None:
        self.message = message
        self.limit = limit
        self.value = value
        super().__init__(message)

    def __reduce__(self):  # noqa: ANN204 - keyword-only arguments: pickled whole (from an analysis child process)
        return _over_limit, (type(self), self.message, self.limit, self.value)

    def to_dict(self) -> dict:
        return {"detail": self.message, "limit": self.limit, "limit_value": self.value}


def _over_limit(cls: type, message: str, limit: str, value: float | int) -> OverLimit:
    return cls(message, limit=limit, value=value)


class QuotaExceeded(OverLimit):
    """A per-account (or per-caller) quota is used up for now (HTTP 429)."""

    status = 429
