"""The compound-verdict vocabulary: every code, its labels, its rank and its colours, in one table.

Everything that names or shows a compound verdict reads this module: the rules that decide it
(:mod:`server.analysis.verdict`), the registry filter and exports, the status page, the explorer,
the side-chain outcome map, the templates (badge and cell colours are rendered from here) and the
demo and benchmark seeds. A code is stable once stored; renaming one needs an Alembic migration
that rewrites stored rows (see migration 0006, which replaced the former top code).

The verdict is a screening judgement, not a proof: the top code says the evidence *supports* a
polar phase that switches (IEEE Std 180-1986 defines a ferroelectric by a spontaneous polarisation
that a field can reverse; a registry of measurements can only gather evidence for that).

Colours: each badge border is an Okabe-Ito hue (:mod:`server.palette`) or, for verdicts that found
nothing polar, a neutral grey; ``ink`` is a darker shade of the same hue for the badge text (at least
4.5:1 contrast on white, WCAG 2.1 success criterion 1.4.3); ``cell`` is a light tint for the outcome
map. ``hatched`` marks a cell with stripes so that conflicts do not rely on colour alone.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

from .palette import OKABE_ITO

#: Border for verdicts that found nothing polar: a mid grey (not one of the Okabe-Ito hues on purpose).
NEUTRAL_BORDER = "#999999"


@dataclass(frozen=True)
class VerdictCode:
    """One verdict: ``code`` (stored, exported), ``label`` (sentence), ``short`` (tables, map cells)."""

    code: str
    label: str
    short: str
    border: Optional[str]  # badge border colour; None: the page's default line colour
    ink: Optional[str]  # badge text colour; None: the page's default text colour
    cell: str  # outcome-map cell background
    hatched: bool = False

    @property
    def rank(self) -> int:
        """Strength of the outcome: 0 is the strongest (the order of :data:`VERDICTS`)."""
        return CODES.index(self.code)


#: Strongest outcome first: an outcome-map cell takes the colour of the first of these reached.
VERDICTS: tuple[VerdictCode, ...] = (
    VerdictCode("polar_switching_supported", "Evidence supports a polar phase that switches",
                "polar, switches", OKABE_ITO["green"], "#0b5a43", "#b3e3d3"),
    VerdictCode("switching_phase_unknown", "Switches, but the switching phase's structure is unknown",
                "switches, phase unknown", OKABE_ITO["sky"], "#0b5d7a", "#cbe7f8"),
    VerdictCode("loop_switching_only", "Saturated loops only: switching not confirmed by PUND",
                "loop only", OKABE_ITO["blue"], "#004a7f", "#c6dcef"),
    VerdictCode("polar_unswitched", "Polar structure, no switching seen",
                "polar, not switched", OKABE_ITO["orange"], "#7a5200", "#f8e0b0"),
    VerdictCode("transition_only", "Phase transition, no polarity evidence",
                "transition only", OKABE_ITO["purple"], "#7a3b63", "#efd3e3"),
    VerdictCode("conflicting", "Conflicting evidence: needs review",
                "conflicting", OKABE_ITO["vermillion"], "#a3261b", "#f6c9a8", hatched=True),
    VerdictCode("no_switching_seen", "No switching seen, structure unknown",
                "no switching seen", NEUTRAL_BORDER, "#555555", "#e4e4e4"),
    VerdictCode("nonpolar", "Non-polar structure, no switching",
                "non-polar", NEUTRAL_BORDER, "#555555", "#d0d0d0"),
    VerdictCode("untested", "No conclusive evidence yet",
                "untested", None, None, "#ffffff"),
)

CODES: tuple[str, ...] = tuple(v.code for v in VERDICTS)
BY_CODE: dict[str, VerdictCode] = {v.code: v for v in VERDICTS}
#: code -> sentence label, strongest first.
LABELS: dict[str, str] = {v.code: v.label for v in VERDICTS}
#: code -> short label, strongest first.
SHORT: dict[str, str] = {v.code: v.short for v in VERDICTS}

#: Codes no longer issued -> the code that replaced them (stored rows were rewritten by migration 0006);
#: an API client that still sends one is told the new name.
RETIRED: dict[str, str] = {"proven_ferroelectric": "polar_switching_supported"}

#: Verdicts the status page counts as hits: switching seen (by PUND or, weaker, by saturated loops alone),
#: with or without a known polar structure; the page shows each hit's class beside it.
HITS: tuple[str, ...] = ("polar_switching_supported", "switching_phase_unknown", "loop_switching_only")
UNTESTED = "untested"
CONFLICTING = "conflicting"


def effective(override_code: Optional[str], computed_code: str) -> str:
    """The verdict that counts: a reviewed override, else the computed one.

    The SQL form of the same rule is :data:`server.services.verdicts.EFFECTIVE_CODE`.
    """
    return override_code or computed_code


def strongest(codes) -> str:  # noqa: ANN001 - any iterable of codes
    """The strongest of ``codes`` (by :data:`VERDICTS` order); unknown codes rank last."""
    return min(codes, key=lambda c: CODES.index(c) if c in BY_CODE else len(CODES))
