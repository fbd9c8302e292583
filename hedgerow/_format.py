"""The one rule for turning a number into display text (views and report alike).

Plain notation at ordinary magnitudes, so that 1755.17 reads ``1755`` and not
``1.76e+03``: every digit left of the point is kept, and decimals are added until the
number shows ``digits`` significant digits. Scientific notation is kept for very small
and very large magnitudes, where plain notation would be a row of zeros. Full precision
stays in the data; only the text is rounded.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["format_number", "PLAIN_RANGE", "MISSING"]

#: Magnitudes shown in plain notation: ``PLAIN_RANGE[0] <= |x| < PLAIN_RANGE[1]``.
PLAIN_RANGE = (1e-3, 1e6)
#: The text shown for a missing or non-finite number.
MISSING = "-"


def format_number(value, digits: int = 4) -> str:
    """Return ``value`` as display text.

    Parameters
    ----------
    value : number, bool, or anything else
        Booleans read ``True``/``False``; whole numbers (Python or numpy integers) are
        shown in full; anything that is not a finite number reads ``-``.
    digits : int
        Significant digits of a non-integer number. Digits left of the decimal point
        are never dropped at ordinary magnitudes (see :data:`PLAIN_RANGE`).

    Examples
    --------
    >>> format_number(1755.174155439428)
    '1755'
    >>> format_number(2999.5, 3)
    '3000'
    >>> format_number(0.0012345)
    '0.001234'
    >>> format_number(2.5e-7)
    '2.5e-07'
    """
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    try:
        f = float(value)
    except (TypeError, ValueError):
        return MISSING
    if not math.isfinite(f):
        return MISSING
    digits = max(int(digits), 1)
    a = abs(f)
    if a == 0.0:
        return "0"
    if not (PLAIN_RANGE[0] <= a < PLAIN_RANGE[1]):
        return f"{f:.{digits}g}"
    whole_digits = math.floor(math.log10(a)) + 1
    decimals = max(digits - whole_digits, 0)
    text = f"{f:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    if text in ("-0", ""):
        text = "0"
    return text
