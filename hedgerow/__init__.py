"""hedgerow: interactive smoothing diagnostics for forest-based regression."""

from hedgerow.estimators import HonestForestRegressor, LocalLinearForestRegressor

__all__ = ["HonestForestRegressor", "LocalLinearForestRegressor"]
__version__ = "0.1.0.dev0"
