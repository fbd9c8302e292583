"""Speed of the diagnostics that sit under sliders (probe, slices, ridge re-solve).

n = 10,000, d = 10 (make_friedman1), 1000 trees, fitted once; prints medians and the
budgets they are held to:
- probe (all methods, intervals, slopes)                        <= 20 ms median
- a slice of 200 grid points for all four methods               <= 150 ms
- out-of-bag RMSE re-solved for a new ridge penalty             <= 200 ms
- a 5 × 8 tuning surface at n = 5000: wall time and share spent refitting.
The reference here is the budget itself (a drag must feel live), not another library.

Usage: python benchmarks/bench_diagnostics.py [--n 10000] [--trees 1000] [--bandwidth cv]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from sklearn.datasets import make_friedman1


def _median_ms(fn, repeat):
    times = []
    for i in range(repeat):
        t = time.perf_counter()
        fn(i)
        times.append(time.perf_counter() - t)
    return 1e3 * float(np.median(times))


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=10_000)
    p.add_argument("--trees", type=int, default=1000)
    p.add_argument("--bandwidth", default="cv")
    p.add_argument("--skip-surface", action="store_true")
    args = p.parse_args(argv)

    from hedgerow import (
        LocalLinearForestRegressor,
        LocalLinearRegressor,
        NadarayaWatsonRegressor,
    )
    from hedgerow.diagnostics import probe, slices, tuning_surface
    from hedgerow.forest import warm_up

    warm_up()
    X, y = make_friedman1(n_samples=args.n, n_features=10, noise=1.0, random_state=0)
    t = time.perf_counter()
    llf = LocalLinearForestRegressor(n_estimators=args.trees, random_state=0, n_jobs=2).fit(X, y)
    print(f"fit local linear forest: {time.perf_counter() - t:.1f} s")
    bw = args.bandwidth if args.bandwidth in ("cv", "silverman") else float(args.bandwidth)
    t = time.perf_counter()
    nw = NadarayaWatsonRegressor(bandwidth=bw).fit(X, y)
    ll = LocalLinearRegressor(bandwidth=bw).fit(X, y)
    print(f"fit both kernel smoothers (bandwidth={args.bandwidth!r}): "
          f"{time.perf_counter() - t:.1f} s")
    rng = np.random.default_rng(0)
    points = rng.uniform(size=(40, 10))

    ms = _median_ms(lambda i: probe(llf, points[i], compare=(nw, ll)), 40)
    print(f"probe, median of 40 moves: {ms:.1f} ms   (budget <= 20 ms)")
    grid = np.linspace(0, 1, 200)
    four = {"llf": llf, "hf": _LocalAverage(llf), "nw": nw, "ll": ll}
    ms = _median_ms(lambda i: slices(four, points[i], 0, grid), 10)
    print(f"slice, 200 grid points, four methods, median of 10: {ms:.1f} ms   "
          f"(budget <= 150 ms)")
    lams = np.geomspace(1e-3, 10, 12)
    ms = _median_ms(lambda i: llf.ridge_path([lams[i]]), 12)
    print(f"out-of-bag RMSE for a new ridge penalty, median of 12: {ms:.1f} ms   "
          f"(budget <= 200 ms)")
    if not args.skip_surface:
        X5, y5 = X[:5000], y[:5000]
        ts = tuning_surface(X5, y5, np.linspace(0.1, 0.5, 5), np.geomspace(1e-3, 3, 8),
                            n_estimators=args.trees, n_jobs=2, progress=False)
        print(f"tuning surface 5 x 8 at n = 5000: {ts.total_seconds:.1f} s wall, "
              f"{100 * ts.refit_seconds / ts.total_seconds:.0f}% refitting")


class _LocalAverage:
    """The honest forest on the local linear forest's own trees, as a predictor."""

    def __init__(self, forest):
        self.forest = forest
        self.n_features_in_ = forest.n_features_in_

    def predict(self, X, return_std=False):
        return self.forest.local_average(X, return_std=return_std)


if __name__ == "__main__":
    main()
