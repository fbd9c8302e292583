"""The four estimators, all with the scikit-learn API."""

from hedgerow.estimators._forest import HonestForestRegressor, TinyDataWarning
from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor
from hedgerow.estimators._local_linear_forest import LocalLinearForestRegressor

__all__ = [
    "HonestForestRegressor",
    "LocalLinearForestRegressor",
    "LocalLinearRegressor",
    "NadarayaWatsonRegressor",
    "TinyDataWarning",
]
