"""The ranges of the whole numbers a request may carry, in one place.

Every integer that arrives in a path, query string or form is checked against a range from
this module before it reaches the database: a number past the back end's integer type makes
the driver raise (SQLite: ``OverflowError``) instead of answering "nothing found", and an
absurd value (a side chain of 10^30 carbons) is an input error a chemist can act on, answered
422 with the parameter named.

The ranges are common practice for this science, not measured limits: side chains in a
molecular-ferroelectric campaign are short (the registry builds linear chains of 1-30 carbons;
``CARBONS`` leaves room for perceived chains of imported structures), and row ids and offsets
are 32-bit signed integers on both back ends.
"""

from __future__ import annotations

import re

from .errors import InputError

MAX_ROW_ID = 2_147_483_647  # the largest 32-bit signed integer (SQL INTEGER on PostgreSQL)
BUILT_CHAIN_CARBONS = (1, 30)  # linear chains the registry builds onto a scaffold
CARBONS = (0, 100)  # carbons of one side chain: filters c_min, c_max, main_c
PAGE = (1, 1_000_000)  # registry pages

# Bounds on queued work (issue 12, item 10). Common practice for a group's shared server, not
# measured limits: a campaign of one scaffold is tens to a few hundred compounds, and one xtb
# estimate takes minutes, so more than this many waiting jobs of one account is a mistake or abuse.
MAX_BULK_ESTIMATES = 200  # compounds one bulk-estimate request may name (413 beyond)
MAX_ACTIVE_JOBS_PER_ACCOUNT = 100  # queued + running jobs one account or token may have (429 beyond)
# Image attachments (issue 23, item 2): a microscope or lab camera gives 1-50 megapixels (common
# practice, not a measured limit); a header claiming more is refused before any pixel is decoded,
# since a few kilobytes of compressed PNG can claim gigabytes of pixels (a decompression bomb).
MAX_IMAGE_PIXELS = 60_000_000
THUMBNAIL_PX = 320  # the longer side of an attachment's thumbnail
SIGNED_DIGITS = re.compile(r"[+-]?[0-9]{1,12}")  # ASCII digits only: no "1_000", no other scripts' digits


def whole_number(name: str, text: str, *, lo: int, hi: int) -> int:
    """``text`` as an integer in ``[lo, hi]``, or an :class:`InputError` naming ``name``."""
    text = text.strip()
    if not SIGNED_DIGITS.fullmatch(text):
        shown = text if len(text) <= 40 else text[:40] + "..."
        raise InputError(f"{shown!r} is not a whole number from {lo} to {hi}", field=name)
    value = int(text)
    if not lo <= value <= hi:
        raise InputError(f"{value} is outside {lo}-{hi}", field=name)
    return value
