"""Kernel functions, sparse kernel weight matrices, dense weighted sums, bandwidth rules."""

from hedgerow.kernels._bandwidth import (
    CV_BANDWIDTH_RANGE,
    CV_FLAT_FROM,
    CV_FLAT_TOLERANCE,
    CV_GRID_FACTORS,
    LOO_DIRECT_LEVERAGE,
    CVCurve,
    loo_cv_error,
    loo_cv_gradient,
    loo_residuals,
    select_bandwidth_cv,
    silverman_bandwidth,
)
from hedgerow.kernels._kernels import (
    GAUSSIAN_TRUNCATION,
    KERNELS,
    KernelRows,
    kernel_profile,
    kernel_sums,
    kernel_weights,
    warm_up,
)

__all__ = [
    "CV_BANDWIDTH_RANGE",
    "CV_FLAT_FROM",
    "CV_FLAT_TOLERANCE",
    "CV_GRID_FACTORS",
    "CVCurve",
    "GAUSSIAN_TRUNCATION",
    "KERNELS",
    "KernelRows",
    "LOO_DIRECT_LEVERAGE",
    "kernel_profile",
    "kernel_sums",
    "kernel_weights",
    "loo_cv_error",
    "loo_cv_gradient",
    "loo_residuals",
    "select_bandwidth_cv",
    "silverman_bandwidth",
    "warm_up",
]
