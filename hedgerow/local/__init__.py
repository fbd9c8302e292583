"""The batched weighted local-constant / local-linear ridge solve shared by all smoothers."""

from hedgerow.local._solver import (
    COLLINEARITY_RCOND,
    LocalConstantFallbackWarning,
    LocalFit,
    LocalMoments,
    binary_scale,
    column_centre,
    default_scale,
    equivalent_kernel,
    local_moments,
    moment_features,
    moments_from_sums,
    solve_local,
    standardise,
    warn_fallback,
)

__all__ = [
    "COLLINEARITY_RCOND",
    "LocalConstantFallbackWarning",
    "LocalFit",
    "LocalMoments",
    "binary_scale",
    "column_centre",
    "default_scale",
    "equivalent_kernel",
    "local_moments",
    "moment_features",
    "moments_from_sums",
    "solve_local",
    "standardise",
    "warn_fallback",
]
