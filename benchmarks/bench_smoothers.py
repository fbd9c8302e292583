"""Speed of the kernel smoothers against statsmodels' KernelReg, one run.

Prints absolute medians and ratios (KernelReg time / ours) measured in this process on
the same data, Gaussian kernel, both smoothers:

1. fixed bandwidth (Silverman's rule per column): fit on n = 2000 rows with d = 2, then
   predict at 500 points; target ratio >= 20;
2. bandwidth selection by leave-one-out CV at n = 500, d = 2 (``bandwidth="cv"`` against
   ``KernelReg(bw="cv_ls")``); target ratio >= 20. KernelReg's search is run once (it
   takes tens of seconds); ours is the median of ``--repeat`` runs.

The numba kernels are compiled (or loaded from cache) before timing.

Usage: python benchmarks/bench_smoothers.py [--repeat 5] [--skip-cv]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
from statsmodels.nonparametric.kernel_regression import KernelReg

from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor
from hedgerow.kernels import silverman_bandwidth

SMOOTHERS = {"lc": NadarayaWatsonRegressor, "ll": LocalLinearRegressor}
TARGET = 20.0


def _median_time(fn, repeat):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return float(np.median(times))


def _data(n, seed):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 3, size=(n, 2))
    y = np.sin(2 * X[:, 0]) + np.cos(1.5 * X[:, 1]) + rng.normal(scale=0.3, size=n)
    return X, y


def _kernelreg(y, X, reg_type, bw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        return KernelReg(y, X, var_type="cc", reg_type=reg_type, bw=bw)


def bench_fixed(repeat):
    X, y = _data(2000, 0)
    Q = _data(500, 1)[0]
    bw = silverman_bandwidth(X)
    print(f"fixed bandwidth, n=2000, d=2, predict at 500 points, bw={np.round(bw, 4)}")
    for reg_type, est_cls in SMOOTHERS.items():
        model = est_cls(bandwidth=bw / X.std(axis=0))
        model.fit(X, y).predict(Q)  # compile / load numba kernels

        def ours(model=model):
            model.fit(X, y).predict(Q)

        def theirs(reg_type=reg_type):
            _kernelreg(y, X, reg_type, bw).fit(Q)

        t_ours = _median_time(ours, repeat)
        t_ref = _median_time(theirs, max(1, repeat // 2))
        ok = "ok" if t_ref / t_ours >= TARGET else "BELOW TARGET"
        print(
            f"  {est_cls.__name__:24s} ours {t_ours * 1e3:8.2f} ms   KernelReg "
            f"{t_ref * 1e3:8.1f} ms   ratio {t_ref / t_ours:6.1f}x  ({ok}, target {TARGET:g}x)"
        )


def bench_cv(repeat):
    X, y = _data(500, 2)
    print("bandwidth selection by leave-one-out CV, n=500, d=2")
    for reg_type, est_cls in SMOOTHERS.items():
        est_cls(bandwidth="cv").fit(X[:50], y[:50])  # compile / load numba kernels
        model = est_cls(bandwidth="cv")
        t_ours = _median_time(lambda model=model: model.fit(X, y), repeat)
        t = time.perf_counter()
        kr = _kernelreg(y, X, reg_type, "cv_ls")
        t_ref = time.perf_counter() - t
        ok = "ok" if t_ref / t_ours >= TARGET else "BELOW TARGET"
        print(
            f"  {est_cls.__name__:24s} ours {t_ours:8.3f} s    KernelReg {t_ref:8.2f} s    "
            f"ratio {t_ref / t_ours:6.1f}x  ({ok}, target {TARGET:g}x)"
        )
        print(
            f"  {'':24s} bandwidths ours {np.round(model.bandwidth_, 4)}  "
            f"KernelReg {np.round(kr.bw, 4)}"
        )


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--skip-cv", action="store_true", help="only the fixed-bandwidth part")
    args = parser.parse_args()
    bench_fixed(args.repeat)
    if not args.skip_cv:
        bench_cv(args.repeat)


if __name__ == "__main__":
    main()
