"""Record local linear forest and probe numbers on seeded cases (run once, before a change).

Written with the code before the local linear forest's fit caches were streamed and the
ridge path factored once (``PYTHONPATH=<old checkout> python tests/data/make_llf_baseline.py``
run outside the new checkout). tests/unit/test_llf_baseline.py imports ``values`` from here
and checks the numbers still come out the same.
"""

import warnings
from pathlib import Path

import numpy as np

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor


def cases():
    """Yield (name, estimator, X, y, Xq): seeded invented cases."""
    rng = np.random.default_rng(2026)
    n, d = 700, 4
    X = rng.uniform(-1, 1, size=(n, d))
    y = 2 * X[:, 0] + np.sin(3 * X[:, 1]) + 0.5 * X[:, 2] ** 2 + rng.normal(0, 0.3, n)
    Xq = np.vstack([rng.uniform(-1, 1, size=(30, d)), [[1.0, -1.0, 1.0, 0.0]],
                    [[-1.2, 0.0, 0.5, 0.9]]])
    yield ("auto", LocalLinearForestRegressor(n_estimators=60, random_state=5), X, y, Xq)
    yield ("mean_fixed", LocalLinearForestRegressor(
        n_estimators=48, split_rule="mean", ridge_penalty=0.1, correction_features=None,
        random_state=7, n_jobs=2), X, y, Xq)
    # a duplicated column makes some local systems collinear (the fallback path)
    rng = np.random.default_rng(11)
    n = 500
    x0 = rng.normal(size=n)
    X2 = np.column_stack([x0, x0, rng.normal(size=n)])
    y2 = x0 + 0.2 * X2[:, 2] + rng.normal(0, 0.2, n)
    yield ("collinear", LocalLinearForestRegressor(
        n_estimators=40, correction_features=[0, 1, 2], ridge_penalty=0.0, split_rule="mean",
        random_state=1), X2, y2, X2[:25])


def values():
    """Return {name: array} of every number the checks compare."""
    from hedgerow import diagnostics as D

    out = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name, est, X, y, Xq in cases():
            est.fit(X, y)
            out[f"{name}/predict"] = est.predict(Xq)
            mean, std = est.predict(Xq, return_std=True)
            out[f"{name}/predict_std"] = std
            for method in ("bias_corrected", "clt", "bias_bound"):
                lo, hi = est.predict_interval(Xq, method=method)
                out[f"{name}/interval_{method}"] = np.stack([lo, hi])
            out[f"{name}/slopes"] = est.local_slopes(Xq)
            out[f"{name}/slope_std"] = est.slope_std(Xq)
            om, os_ = est.oob_predict(return_std=True)
            out[f"{name}/oob"] = np.stack([om, os_])
            parts = est.oob_interval_parts()
            out[f"{name}/oob_interval"] = np.stack([parts.centre, parts.std])
            out[f"{name}/penalty"] = np.array([est.ridge_penalty_])
            grid = np.array([0.0, 1e-3, 0.05, 0.3, 2.0])
            out[f"{name}/ridge_path"] = est.ridge_path(grid)
            out[f"{name}/oob_at_0.3"] = est.oob_predict(ridge_penalty=0.3)
            if est.ridge_path_ is not None:
                out[f"{name}/ridge_path_"] = est.ridge_path_["oob_mse"]
            out[f"{name}/fallback"] = est.local_fit(Xq).fallback.astype(np.int64)
            for i, x in enumerate(Xq[[0, -2, -1]]):
                out.update(_probe_values(f"{name}/probe{i}", D.probe(est, x), X))
            out.update(_probe_values(f"{name}/sketch", D.probe_sketch(est, Xq[-1]), X))
        hf = HonestForestRegressor(n_estimators=40, random_state=3).fit(X, y)
        for i, x in enumerate(Xq[[0, -1]]):
            out.update(_probe_values(f"honest/probe{i}", D.probe(hf, x), X))
            out.update(_probe_values(f"honest/sketch{i}", D.probe_sketch(hf, x), X))
    return out


def _probe_values(key, rep, X):
    from hedgerow.diagnostics._interactive import neighbourhood_span, weight_profile

    name = rep.methods[0].name
    prof = weight_profile(rep, X, name)
    prof_all = weight_profile(rep, X, name, columns="all")
    return {
        f"{key}/neighbourhood": np.concatenate([rep.neighbour_offset, rep.neighbour_spread,
                                                [rep.ess, rep.top_share]]),
        f"{key}/span": np.array([neighbourhood_span(rep, X, j) for j in range(X.shape[1])]),
        f"{key}/methods": np.array([[m.prediction, m.lower, m.upper, m.ess]
                                    for m in rep.methods]),
        f"{key}/profile": prof[["row", "weight", "distance", "cumulative"]].to_numpy(),
        f"{key}/profile_all": prof_all["distance"].to_numpy(),
    }


def numeric_stack() -> str:
    """Return what decides the last bits of these numbers besides our code.

    numpy and scipy versions and the BLAS library with the kernel family it picked for
    this CPU at run time (OpenBLAS chooses per CPU: the same wheel rounds matrix products
    differently on a Haswell-class and an AVX-512 machine).
    """
    import scipy
    import threadpoolctl

    np.ones((4, 4)) @ np.ones((4, 4))  # loads the BLAS, so that it is listed
    blas = sorted(f"{i.get('internal_api')} {i.get('version')} {i.get('architecture')}"
                  for i in threadpoolctl.threadpool_info() if i.get("user_api") == "blas")
    return f"numpy {np.__version__}; scipy {scipy.__version__}; " + "; ".join(blas)


if __name__ == "__main__":
    import hedgerow

    print("recording with", hedgerow.__file__, "on", numeric_stack())
    np.savez_compressed(Path(__file__).with_name("llf_baseline.npz"),
                        _stack=np.array(numeric_stack()), **values())
