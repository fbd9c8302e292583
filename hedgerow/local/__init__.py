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
    ridge_path_intercepts,
    solve_local,
    standardise,
    subset_moments,
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
    "ridge_path_intercepts",
    "solve_local",
    "subset_moments",
    "standardise",
    "warn_fallback",
]
