"""Errors of the use-case layer, mapped to HTTP by server.app."""

from __future__ import annotations

from ..errors import RemanenceError


class NotFound(RemanenceError):
    """404: the named thing does not exist (or is hidden from this caller)."""


class Duplicate(RemanenceError):
    """409: the thing exists already; ``existing`` names it."""

    def __init__(self, message: str, existing: str) -> None:
        super().__init__(message)
        self.existing = existing


class Archived(RemanenceError):
    """409: the thing is archived and takes no new data until it is restored."""


class Forbidden(RemanenceError):
    """403 raised from a service (e.g. an upload token limited to other kinds)."""


class TooLarge(RemanenceError):
    """413: the request's file is larger than the configured limit (the message names the limit)."""
