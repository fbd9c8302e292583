"""Pointwise normal confidence intervals."""

from __future__ import annotations

import numpy as np
from scipy.stats import norm

from hedgerow._validation import check_level

__all__ = ["normal_interval"]


def normal_interval(mean, std, level: float = 0.95):
    """Return ``(lower, upper)``: mean -/+ z_{(1+level)/2} * std."""
    level = check_level(level)
    z = norm.ppf(0.5 + level / 2.0)
    mean = np.asarray(mean, dtype=np.float64)
    std = np.asarray(std, dtype=np.float64)
    return mean - z * std, mean + z * std
