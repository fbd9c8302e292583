"""Demo data (invented scenarios) and the simulation designs used by the checks.

``load_orchard_demo`` is an invented scenario for demos and notebooks only: no real
orchard, farm, person or survey stands behind it. ``make_softplus_design`` is the
simulation design of Friedberg, Tibshirani, Athey & Wager (2021, eq. 1), used by the
statistical checks.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.utils import check_random_state

__all__ = ["load_orchard_demo", "make_softplus_design", "softplus_truth"]


def load_orchard_demo(
    n_samples: int = 800, random_state: int = 7
) -> tuple[pd.DataFrame, pd.Series]:
    """Return ``(X, y)``: an invented hillside-orchard yield table for demos.

    Columns: ``slope_deg`` (terrain slope), ``sun_hours`` (daily sunshine),
    ``soil_moisture`` (share), ``tree_age`` (years), ``row_spacing_m``. The yield
    ``fruit_kg`` rises smoothly with sunshine and saturates, falls off steeply on the
    steepest ground (an edge of the data where a forest's steps bend inward), and has
    heavy noise. Invented numbers; demos only, never a check value.
    """
    rng = check_random_state(random_state)
    n = int(n_samples)
    slope = rng.uniform(0.0, 35.0, n)
    sun = rng.uniform(3.0, 11.0, n)
    moisture = rng.beta(2.0, 2.5, n)
    age = rng.uniform(2.0, 40.0, n)
    spacing = rng.choice([3.0, 3.5, 4.0, 4.5, 5.0], n)
    mean = (
        40.0 * np.log1p(np.exp(0.9 * (sun - 7.0)))
        - 0.04 * np.maximum(slope - 15.0, 0.0) ** 2
        + 12.0 * moisture
        + 6.0 * np.tanh((age - 10.0) / 8.0)
    )
    y = mean + rng.normal(0.0, 12.0, n)
    X = pd.DataFrame(
        {
            "slope_deg": slope,
            "sun_hours": sun,
            "soil_moisture": moisture,
            "tree_age": age,
            "row_spacing_m": spacing,
        }
    )
    return X, pd.Series(y, name="fruit_kg")


def softplus_truth(X: np.ndarray) -> np.ndarray:
    """Return the true mean log(1 + exp(6 x_1)) of ``make_softplus_design``."""
    return np.logaddexp(0.0, 6.0 * np.asarray(X)[:, 0])


def make_softplus_design(
    n_samples: int = 1000, n_features: int = 20, noise_var: float = 20.0, random_state=None
):
    """Return ``(X, y, mean)``: X ~ U[0,1]^d, y = log(1 + exp(6 X_1)) + N(0, noise_var).

    Friedberg, Tibshirani, Athey & Wager (2021), Local Linear Forests, JCGS 30(2), eq. 1:
    a smooth signal in one column among many noise columns, where a forest's
    piecewise-constant fit is biased at both ends of X_1.
    """
    rng = check_random_state(random_state)
    X = rng.uniform(0.0, 1.0, size=(int(n_samples), int(n_features)))
    mean = softplus_truth(X)
    y = mean + rng.normal(0.0, np.sqrt(noise_var), size=X.shape[0])
    return X, y, mean
