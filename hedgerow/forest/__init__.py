"""Tree growth (compiled), compact forest storage and forest weights."""

from hedgerow.forest._build import TreePlan, grow_forest, plan_samples, subsample_size
from hedgerow.forest._grow import (
    RULE_EFFECT_GRADIENT,
    RULE_MEAN,
    RULE_RIDGE_RESIDUAL,
    bag_order,
    grow_tree,
    presort,
)
from hedgerow.forest._storage import ForestArrays

__all__ = [
    "ForestArrays",
    "TreePlan",
    "RULE_EFFECT_GRADIENT",
    "RULE_MEAN",
    "RULE_RIDGE_RESIDUAL",
    "bag_order",
    "grow_forest",
    "grow_tree",
    "plan_samples",
    "presort",
    "subsample_size",
    "warm_up",
]


def warm_up() -> None:
    """Compile (or load from numba's cache) every kernel on a tiny problem."""
    import numpy as np

    rng = np.random.default_rng(0)
    X = rng.random((40, 2))
    y = X[:, 0] + rng.normal(size=40)
    for rule, rate in ((RULE_MEAN, 0.5), (RULE_RIDGE_RESIDUAL, 0.3),
                       (RULE_EFFECT_GRADIENT, 0.5)):
        plan = plan_samples(40, 4, 2, rate, True, 0)
        forest = grow_forest(
            X, y, plan, min_samples_leaf=2, max_features=2, rule=rule, Z=X[:, :1],
            ridge_penalty=0.1,
        )
    leaves = forest.apply(X)
    forest.weights(leaves)
    forest.weights(leaves, usable=~forest.inbag(np.arange(40)))
    forest.bag_inbag(np.arange(40))
    _ = forest.sample_rows
