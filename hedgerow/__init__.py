"""hedgerow: interactive smoothing diagnostics for forest-based regression."""

from hedgerow.estimators import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    LocalLinearRegressor,
    NadarayaWatsonRegressor,
)

__all__ = [
    "HonestForestRegressor",
    "LocalLinearForestRegressor",
    "LocalLinearRegressor",
    "NadarayaWatsonRegressor",
]
__version__ = "0.1.0.dev0"
