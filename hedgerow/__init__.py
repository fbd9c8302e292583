"""hedgerow: interactive smoothing diagnostics for forest-based regression."""

from hedgerow.estimators import HonestForestRegressor

__all__ = ["HonestForestRegressor"]
__version__ = "0.1.0.dev0"
