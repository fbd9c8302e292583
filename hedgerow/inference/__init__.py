"""Variance of predictions and confidence intervals."""

from hedgerow.inference._bias_aware import (
    bias_aware_half_width,
    curvature_bias_bound,
    curvature_moment,
    curvature_rule_of_thumb,
    folded_normal_quantile,
    worst_case_curvature_sum,
)
from hedgerow.inference._curvature_test import CURVATURE_TEST_LEVEL, curved_columns
from hedgerow.inference._intervals import normal_interval, student_interval_half_width
from hedgerow.inference._little_bags import (
    LittleBagsVariance,
    forest_monte_carlo_variance,
    linearisation_coefficients,
    linearised_from_leaf_means,
    linearised_tree_predictions,
    little_bags_variance,
    satterthwaite_df,
    truncated_normal_mean,
)

__all__ = [
    "CURVATURE_TEST_LEVEL",
    "LittleBagsVariance",
    "curved_columns",
    "forest_monte_carlo_variance",
    "satterthwaite_df",
    "student_interval_half_width",
    "bias_aware_half_width",
    "curvature_bias_bound",
    "curvature_moment",
    "curvature_rule_of_thumb",
    "folded_normal_quantile",
    "worst_case_curvature_sum",
    "linearisation_coefficients",
    "linearised_from_leaf_means",
    "linearised_tree_predictions",
    "little_bags_variance",
    "normal_interval",
    "truncated_normal_mean",
]
