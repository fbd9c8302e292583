"""The one place the report turns a number into text (tables, captions, figure labels).

Every number on the page and in the figures goes through :func:`number`, so a change of
how numbers read is made here once.
"""

from __future__ import annotations

import numpy as np

__all__ = ["number"]


def number(value, digits: int = 4, *, percent: bool = False) -> str:
    """Return ``value`` as display text; '-' when it is missing or not finite.

    Parameters
    ----------
    value : number, bool, or anything else (shown as '-')
        Whole numbers are shown in full, other numbers with ``digits`` significant digits.
    digits : int
        Significant digits of a non-integer number.
    percent : bool
        ``value`` is a share (a gain, say): shown as a signed percentage with one
        decimal, ``+12.3%``.

    The text holds no character HTML must escape.
    """
    if isinstance(value, bool | np.bool_):
        return str(bool(value))
    if isinstance(value, int | np.integer) and not percent:
        return str(int(value))
    try:
        f = float(value)
    except (TypeError, ValueError):
        return "-"
    if not np.isfinite(f):
        return "-"
    return f"{100 * f:+.1f}%" if percent else f"{f:.{digits}g}"
