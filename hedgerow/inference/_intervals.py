"""Pointwise normal confidence intervals."""

from __future__ import annotations

import functools

import numpy as np
from scipy.stats import norm

from hedgerow._validation import check_level

__all__ = ["normal_interval"]


@functools.lru_cache(maxsize=64)
def _normal_quantile(p: float) -> float:
    # scipy's ppf costs tens of microseconds a call; a probe move asks for it often
    return float(norm.ppf(p))


def normal_interval(mean, std, level: float = 0.95):
    """Return ``(lower, upper)``: mean -/+ z_{(1+level)/2} * std."""
    level = check_level(level)
    z = _normal_quantile(0.5 + level / 2.0)
    mean = np.asarray(mean, dtype=np.float64)
    std = np.asarray(std, dtype=np.float64)
    return mean - z * std, mean + z * std
