"""Fit and forest-weight speed of HonestForestRegressor against scikit-learn, one run.

Prints ratios (ours / scikit-learn's) measured in this process on the same data:
make_friedman1(n_samples=10_000, n_features=10), 1000 trees, subsample_rate=0.5,
honest, min_samples_leaf=5, all features, against
RandomForestRegressor(n_estimators=1000, max_samples=0.25, min_samples_leaf=5, n_jobs=2)
(both grow trees on a quarter of the rows: ours grow on the honest half of a half-sample).
Also prints first-call compile time with an empty numba cache and the load time from the
cache in a new process.

Usage: python benchmarks/bench_fit.py [--n 10000] [--trees 1000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
import tracemalloc

import numpy as np
from sklearn.datasets import make_friedman1
from sklearn.ensemble import RandomForestRegressor


def _median_time(fn, repeat):
    times = []
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return float(np.median(times)), out


def compile_times():
    """Return ([imports, kernels] seconds with an empty cache, the same from the cache)."""
    # imports (numpy, scipy, scikit-learn, numba) are timed apart from the kernels
    code = (
        "import time; t0 = time.perf_counter(); import hedgerow, hedgerow.forest as f;"
        "t1 = time.perf_counter(); f.warm_up(); t2 = time.perf_counter();"
        "print(t1 - t0, t2 - t1)"
    )
    cache = tempfile.mkdtemp(prefix="hedgerow-numba-cache-")
    env = dict(os.environ, NUMBA_CACHE_DIR=cache)
    try:
        cold = [float(v) for v in
                subprocess.check_output([sys.executable, "-c", code], env=env).split()]
        warm = [float(v) for v in
                subprocess.check_output([sys.executable, "-c", code], env=env).split()]
    finally:
        shutil.rmtree(cache, ignore_errors=True)
    return cold, warm


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=10_000)
    p.add_argument("--trees", type=int, default=1000)
    p.add_argument("--repeat", type=int, default=3)
    args = p.parse_args(argv)

    from hedgerow import HonestForestRegressor
    from hedgerow.forest import warm_up

    cold, warm = compile_times()
    print(f"compile, empty cache     : {cold[1]:7.2f} s   (target <= 20 s)")
    print(f"load from cache, new proc: {warm[1]:7.2f} s   (target <= 1 s); "
          f"package imports before it: {warm[0]:.2f} s")
    warm_up()

    X, y = make_friedman1(n_samples=args.n, n_features=10, noise=1.0, random_state=0)
    Xq, _ = make_friedman1(n_samples=args.n, n_features=10, noise=1.0, random_state=1)
    ours = HonestForestRegressor(
        n_estimators=args.trees, subsample_rate=0.5, honest=True, min_samples_leaf=5,
        max_features=10, random_state=0, n_jobs=2,
    )
    ref = RandomForestRegressor(
        n_estimators=args.trees, max_samples=0.25, min_samples_leaf=5, max_features=1.0,
        n_jobs=2, random_state=0,
    )
    t_ours, _ = _median_time(lambda: ours.fit(X, y), args.repeat)
    t_ref, _ = _median_time(lambda: ref.fit(X, y), args.repeat)
    print(f"fit: hedgerow {t_ours:.2f} s, sklearn {t_ref:.2f} s, "
          f"ratio {t_ours / t_ref:.3f}  (target <= 0.5)")

    def cold_weights():
        # drop the query caches: every repeat traverses the trees again, as predict does
        ours._fit_cache.pop("leaves", None)
        return ours.neighbour_weights(Xq)

    t_w, W = _median_time(cold_weights, args.repeat)
    t_p, _ = _median_time(lambda: ref.predict(Xq), args.repeat)
    print(f"neighbour_weights({args.n} queries) {t_w:.2f} s, sklearn predict {t_p:.2f} s, "
          f"ratio {t_w / t_p:.3f}  (target <= 2); nnz per row {W.nnz / W.shape[0]:.0f}")

    tracemalloc.start()
    HonestForestRegressor(
        n_estimators=args.trees, subsample_rate=0.5, min_samples_leaf=5, max_features=10,
        random_state=0, n_jobs=2,
    ).fit(X, y)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"fitted forest arrays: {ours.forest_.nbytes / 2**20:.1f} MiB; "
          f"peak traced memory during fit: {peak / 2**20:.1f} MiB")


if __name__ == "__main__":
    main()
