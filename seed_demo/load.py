"""Load the demo scenario into the configured database (grown as features land)."""

from __future__ import annotations

from server.settings import Settings


def load(settings: Settings) -> None:
    return None
