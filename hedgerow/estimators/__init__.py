"""The four estimators, all with the scikit-learn API."""

from hedgerow.estimators._forest import HonestForestRegressor

__all__ = ["HonestForestRegressor"]
