"""Small shared fixtures: seeded reference data sets, built once per session."""

import numpy as np
import pytest
from sklearn.datasets import load_diabetes, make_friedman1


@pytest.fixture(scope="session")
def friedman_small():
    """Return (X, y): 300 rows of make_friedman1 (Friedman 1991), 6 columns, noise 1."""
    X, y = make_friedman1(n_samples=300, n_features=6, noise=1.0, random_state=11)
    return X, y


@pytest.fixture(scope="session")
def friedman_query():
    """Return 50 fresh query points of the make_friedman1 design (6 columns)."""
    X, _ = make_friedman1(n_samples=50, n_features=6, noise=1.0, random_state=12)
    return X


@pytest.fixture(scope="session")
def diabetes():
    """Return (X, y) of sklearn.datasets.load_diabetes (442 rows, 10 columns)."""
    X, y = load_diabetes(return_X_y=True)
    return np.ascontiguousarray(X), np.ascontiguousarray(y, dtype=np.float64)
