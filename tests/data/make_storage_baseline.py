"""Record seeded forest outputs and a tiny pickle before the storage change (run once).

Run with the code *before* the change on the path (``PYTHONPATH=<old checkout> python
tests/data/make_storage_baseline.py``). It writes

- ``storage_baseline.npz``: predictions, standard errors, intervals and out-of-bag values
  of seeded honest and local linear forests (``outputs`` computes the same names with
  whatever code is imported; tests/unit/test_storage_baseline.py compares them with ==);
- ``forest_layout1.pkl``: a tiny fitted honest forest pickled with the per-tree sample
  layout (layout 1), plus its outputs in the npz under ``layout1_*``, so that loading an
  old pickle is tested against what the old code gave.
"""

import pickle
import sys
from pathlib import Path

import numpy as np

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor

HERE = Path(__file__).resolve().parent

#: (name, n, d, forest settings): bags whose trees draw the whole half-sample (the
#: default rate), bags whose trees draw part of it, single-tree bags, a classical forest.
CASES = [
    ("shared", 400, 4, dict(n_estimators=40, trees_per_bag=10)),
    ("partial", 400, 4, dict(n_estimators=40, trees_per_bag=8, subsample_rate=0.3)),
    ("single", 300, 3, dict(n_estimators=30, trees_per_bag=1, subsample_rate=0.6)),
    ("classical", 300, 3, dict(n_estimators=24, trees_per_bag=4, subsample_rate=0.4,
                               honest=False)),
]


def data(n, d, seed):
    """Return (X, y, Xq): an invented smooth surface with noise, and fresh queries."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(-1, 1, size=(n, d))
    y = np.cos(1.5 * X[:, 0]) + 0.5 * X[:, 1] * X[:, 0] + rng.normal(scale=0.25, size=n)
    Xq = rng.uniform(-1.1, 1.1, size=(30, d))
    return X, y, Xq


def forest_outputs(prefix, est, Xq, with_std=True):
    """Return a dict of the outputs of a fitted forest (names start with ``prefix``)."""
    out = {prefix + "_predict": est.predict(Xq)}
    out[prefix + "_oob"] = est.oob_predict()
    if with_std:
        _, out[prefix + "_std"] = est.predict(Xq, return_std=True)
        for method in ("bias_corrected", "clt"):
            lo, hi = est.predict_interval(Xq, method=method)
            out[f"{prefix}_{method}_lower"] = lo
            out[f"{prefix}_{method}_upper"] = hi
        _, out[prefix + "_oob_std"] = est.oob_predict(return_std=True)
        parts = est.oob_interval_parts()
        out[prefix + "_oob_centre"] = parts.centre
        out[prefix + "_oob_interval_std"] = parts.std
    return out


def outputs():
    """Return the recorded outputs, computed with the code on the path."""
    import warnings

    out = {}
    for i, (name, n, d, settings) in enumerate(CASES):
        X, y, Xq = data(n, d, 200 + i)
        bagged = settings["trees_per_bag"] >= 2
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            hf = HonestForestRegressor(random_state=7, **settings).fit(X, y)
            out.update(forest_outputs(name + "_honest", hf, Xq, bagged))
            llf = LocalLinearForestRegressor(random_state=7, **settings).fit(X, y)
            out.update(forest_outputs(name + "_llf", llf, Xq, bagged))
    return out


def tiny_forest():
    """Return (fitted tiny honest forest, its queries)."""
    X, y, Xq = data(60, 2, 299)
    est = HonestForestRegressor(n_estimators=8, trees_per_bag=4, min_samples_leaf=2,
                                random_state=1).fit(X, y)
    return est, Xq


if __name__ == "__main__":
    rec = outputs()
    est, Xq = tiny_forest()
    assert not hasattr(est.forest_, "bag_rows"), "run this with the code before the change"
    rec["layout1_predict"], rec["layout1_std"] = est.predict(Xq, return_std=True)
    rec["layout1_oob"] = est.oob_predict()
    rec["layout1_queries"] = Xq
    rec["layout1_inbag"] = est.forest_.inbag(np.arange(est.X_train_.shape[0]))
    np.savez(HERE / "storage_baseline.npz", **rec)
    with open(HERE / "forest_layout1.pkl", "wb") as fh:
        pickle.dump(est, fh, protocol=4)
    print("wrote", len(rec), "arrays;", sys.modules["hedgerow"].__file__)
