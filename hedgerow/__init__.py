"""hedgerow: interactive smoothing diagnostics for forest-based regression."""

from hedgerow._explore import explore
from hedgerow.estimators import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    LocalLinearRegressor,
    NadarayaWatsonRegressor,
    TreatmentEffectForest,
)

__all__ = [
    "HonestForestRegressor",
    "LocalLinearForestRegressor",
    "LocalLinearRegressor",
    "NadarayaWatsonRegressor",
    "TreatmentEffectForest",
    "explore",
]
__version__ = "0.1.0.dev0"
