"""Speed and quality of the kernel smoothers' bandwidths against statsmodels' KernelReg.

One run, Gaussian kernel, both smoothers, on a 2-core machine (read ratios under load):

1. fixed bandwidth (Silverman's rule per column): fit on n = 2000 rows with d = 2, then
   predict at 500 points; ratio KernelReg time / ours, target >= 20;
2. ``LocalLinearRegressor().fit`` with the default ``bandwidth="cv"`` at n = 1000 for
   d = 1, 2, 5, 10, 14 (columns beyond the second are noise); goals d = 5 <= 0.5 s,
   d = 14 <= 1.5 s; then n = 10,000, d = 2, goal <= 3 s;
3. the leave-one-out error at the chosen bandwidths against ``KernelReg(bw="cv_ls")``'s
   (never worse) and, for d <= 2, against the best of a dense grid (within 0.5%), at
   ``--quality-n`` rows (KernelReg's search is slow), with the time ratio.

The numba kernels are compiled (or loaded from cache) before timing.

Usage: python benchmarks/bench_smoothers.py [--repeat 5] [--skip-cv] [--quality-n 300]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
from statsmodels.nonparametric.kernel_regression import KernelReg

from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor
from hedgerow.kernels import loo_cv_error, silverman_bandwidth

SMOOTHERS = {"lc": NadarayaWatsonRegressor, "ll": LocalLinearRegressor}
TARGET = 20.0
CV_GOALS = {5: 0.5, 14: 1.5}  # seconds for LocalLinearRegressor().fit at n = 1000
LARGE_GOAL = 3.0  # seconds at n = 10,000, d = 2


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


def _wide_data(n, d, seed):
    """Columns 0 and 1 carry the signal (column 0 alone for d = 1); the rest are noise."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 3, size=(n, d))
    y = np.sin(2 * X[:, 0]) + rng.normal(scale=0.3, size=n)
    if d > 1:
        y += np.cos(1.5 * X[:, 1])
    return X, y


def bench_cv_speed(repeat, dims, n):
    print(f"LocalLinearRegressor().fit (bandwidth='cv'), n={n}; goals: d=5 <= "
          f"{CV_GOALS[5]} s, d=14 <= {CV_GOALS[14]} s")
    LocalLinearRegressor().fit(*_wide_data(60, 3, 0))  # compile / load numba kernels
    for d in dims:
        X, y = _wide_data(n, d, 10 + d)
        model = LocalLinearRegressor()
        t = _median_time(lambda model=model, X=X, y=y: model.fit(X, y), repeat)
        goal = CV_GOALS.get(d)
        verdict = "" if goal is None else (
            f"  ({'ok' if t <= goal else 'ABOVE GOAL'}, goal {goal:g} s)")
        curve = model.cv_curve_
        evaluations = curve.grid_loo_error.size + curve.path_loo_error.size
        print(f"  d={d:2d}  {t:7.3f} s  evaluations {evaluations:3d}  columns used "
              f"{model.n_features_used_:2d}{verdict}")


def bench_cv_large(repeat):
    X, y = _data(10_000, 3)
    for kernel in ("gaussian", "epanechnikov"):
        model = LocalLinearRegressor(kernel=kernel)
        t = _median_time(lambda model=model: model.fit(X, y), max(1, repeat // 2))
        ok = "ok" if t <= LARGE_GOAL else "ABOVE GOAL"
        curve = model.cv_curve_
        evaluations = curve.grid_loo_error.size + curve.path_loo_error.size
        print(f"LocalLinearRegressor(kernel={kernel!r}).fit (bandwidth='cv'), n=10000, d=2: "
              f"{t:.2f} s  ({ok}, goal {LARGE_GOAL:g} s), {evaluations} evaluations")


def _dense_grid_best(X, y, degree, points):
    """Best leave-one-out error over a log grid of per-column multiples of the s.d."""
    sd = X.std(axis=0)
    axis = np.geomspace(0.02, 20.0, points)
    best = np.inf
    for factors in np.stack(np.meshgrid(*([axis] * X.shape[1])), -1).reshape(-1, X.shape[1]):
        best = min(best, loo_cv_error(X, y, factors * sd, "gaussian", degree))
    return best


def bench_cv_quality(n, dims, grid_points):
    print(f"bandwidth selection against KernelReg(bw='cv_ls') and a dense grid "
          f"({grid_points} points per column, d <= 2), n={n}; objective = leave-one-out MSE")
    for d in dims:
        X, y = _wide_data(n, d, 20 + d)
        for reg_type, est_cls in SMOOTHERS.items():
            degree = int(reg_type == "ll")
            t = time.perf_counter()
            model = est_cls().fit(X, y)
            t_ours = time.perf_counter() - t
            keep = ~model.ignored_features_
            ours = loo_cv_error(X[:, keep], y, model.bandwidth_[keep], "gaussian", degree)
            t = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                kr = KernelReg(y, X, var_type="c" * d, reg_type=reg_type, bw="cv_ls")
            t_ref = time.perf_counter() - t
            theirs = loo_cv_error(X, y, kr.bw, "gaussian", degree)
            line = (f"  d={d} {est_cls.__name__:24s} ours {ours:.6f} ({t_ours:6.2f} s)  "
                    f"KernelReg {theirs:.6f} ({t_ref:6.1f} s, ratio {t_ref / t_ours:6.1f}x)  "
                    f"{'ok' if ours <= theirs * (1 + 1e-6) else 'WORSE THAN KernelReg'}")
            if d <= 2:
                best = _dense_grid_best(X, y, degree, grid_points)
                gap = ours / best - 1.0
                line += (f"  dense grid {best:.6f} (ours {100 * gap:+.3f}%, "
                         f"{'ok' if gap <= 0.005 else 'ABOVE 0.5%'})")
            print(line)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--skip-cv", action="store_true", help="only the fixed-bandwidth part")
    parser.add_argument("--quality-n", type=int, default=300,
                        help="rows of the comparison with KernelReg's cv_ls (it is slow)")
    parser.add_argument("--grid-points", type=int, default=40)
    parser.add_argument("--quality-dims", type=int, nargs="+", default=[1, 2],
                        help="column counts of the KernelReg comparison (d=5 took 170 s)")
    args = parser.parse_args()
    bench_fixed(args.repeat)
    if not args.skip_cv:
        bench_cv_speed(args.repeat, (1, 2, 5, 10, 14), 1000)
        bench_cv_large(args.repeat)
        bench_cv_quality(args.quality_n, args.quality_dims, args.grid_points)


if __name__ == "__main__":
    main()
