"""Record forest predictions on seeded cases, before an engine change (run once).

tests/unit/test_engine_baseline.py (which imports ``predictions`` from here) checks
that the engine still gives these bits.
"""

import numpy as np

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor


def cases():
    """Yield (name, X, y, Xq) seeded cases."""
    for seed, (n, d) in enumerate([(300, 3), (500, 5)]):
        rng = np.random.default_rng(100 + seed)
        X = rng.uniform(-1, 1, size=(n, d))
        y = np.sin(2 * X[:, 0]) + X[:, 1] ** 2 + rng.normal(scale=0.3, size=n)
        Xq = rng.uniform(-1, 1, size=(50, d))
        yield f"case{seed}", X, y, Xq


def predictions():
    out = {}
    for name, X, y, Xq in cases():
        hf = HonestForestRegressor(n_estimators=40, random_state=3).fit(X, y)
        out[name + "_honest"] = hf.predict(Xq)
        llf = LocalLinearForestRegressor(n_estimators=40, random_state=3).fit(X, y)
        out[name + "_llf"] = llf.predict(Xq)
    return out


if __name__ == "__main__":
    np.savez("tests/data/engine_baseline.npz", **predictions())
