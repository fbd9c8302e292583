"""The estimators, all with the scikit-learn API (fit/predict or fit/predict_effect)."""

from hedgerow.estimators._effect_forest import AverageEffect, TreatmentEffectForest
from hedgerow.estimators._forest import (
    MIN_INTERVAL_BAGS,
    FewBagsWarning,
    HonestForestRegressor,
    TinyDataWarning,
)
from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor
from hedgerow.estimators._local_linear_forest import LocalLinearForestRegressor

__all__ = [
    "MIN_INTERVAL_BAGS",
    "AverageEffect",
    "FewBagsWarning",
    "HonestForestRegressor",
    "LocalLinearForestRegressor",
    "LocalLinearRegressor",
    "NadarayaWatsonRegressor",
    "TinyDataWarning",
    "TreatmentEffectForest",
]
