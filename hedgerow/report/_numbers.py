"""The one place the report turns a number into text (tables, captions, figure labels).

Every number on the page and in the figures goes through :func:`number`, so a change of
how numbers read is made here once.
"""

from __future__ import annotations

import numpy as np

from hedgerow._format import format_number

__all__ = ["number"]


def number(value, digits: int = 4, *, percent: bool = False) -> str:
    """Return ``value`` as display text; '-' when it is missing or not finite.

    Parameters
    ----------
    value : number, bool, or anything else (shown as '-')
        Whole numbers are shown in full, other numbers by the shared plain-number rule
        (:func:`hedgerow._format.format_number`) with ``digits`` significant digits.
    digits : int
        Significant digits of a non-integer number.
    percent : bool
        ``value`` is a share (a gain, say): shown as a signed percentage with one
        decimal, ``+12.3%``.

    The text holds no character HTML must escape.
    """
    if not percent:
        return format_number(value, digits)
    try:
        f = float(value)
    except (TypeError, ValueError):
        return "-"
    if not np.isfinite(f):
        return "-"
    return f"{100 * f:+.1f}%"
