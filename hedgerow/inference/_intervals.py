"""Pointwise normal confidence intervals."""

from __future__ import annotations

import functools

import numpy as np
from scipy.stats import norm
from scipy.stats import t as t_dist

from hedgerow._validation import check_level

__all__ = ["normal_interval", "student_interval_half_width"]


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


def student_interval_half_width(std, df, level: float = 0.95) -> np.ndarray:
    """Return t_{(1+level)/2, df} * std elementwise (NaN df gives NaN)."""
    level = check_level(level)
    std = np.asarray(std, dtype=np.float64)
    df = np.asarray(df, dtype=np.float64)
    q = np.full(np.broadcast(std, df).shape, np.nan)
    ok = np.broadcast_to(np.isfinite(df), q.shape)
    q[ok] = t_dist.ppf(0.5 + level / 2.0, np.broadcast_to(df, q.shape)[ok])
    return q * std
