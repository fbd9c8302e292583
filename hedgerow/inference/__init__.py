"""Variance of predictions and confidence intervals."""

from hedgerow.inference._intervals import normal_interval
from hedgerow.inference._little_bags import (
    LittleBagsVariance,
    linearisation_coefficients,
    linearised_from_leaf_means,
    linearised_tree_predictions,
    little_bags_variance,
    truncated_normal_mean,
)

__all__ = [
    "LittleBagsVariance",
    "linearisation_coefficients",
    "linearised_from_leaf_means",
    "linearised_tree_predictions",
    "little_bags_variance",
    "normal_interval",
    "truncated_normal_mean",
]
