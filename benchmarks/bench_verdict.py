"""Cost of the cross-fitted verdict against one default fit of the same forest.

Goal: the 5-fold verdict (plain honest forest, scikit-learn's forest, no smoothers) costs
at most 6x one ``LocalLinearForestRegressor().fit`` on the same rows with the same thread
budget. The verdict's fold forests grow ``FOLD_TREES`` (500) trees of ours and
``SKLEARN_FOREST`` (200) of scikit-learn's; that their numbers match the full forests' is
checked in tests/reference/test_verdict_cost.py. Also printed: the parts (one fold's fits),
the variants (the full forests, ``fold_trees=None`` with a 500-tree scikit-learn forest;
split_rule="mean", where the plain forest's trees are the correction's trees; no
scikit-learn forest; the preview)
and one ``RandomForestRegressor(**SKLEARN_FOREST).fit`` as an outside reference measured
in the same run. Best of ``--repeat`` runs each.

Usage: python benchmarks/bench_verdict.py [--n 1000] [--trees 2000] [--n-jobs 1] [--repeat 2]
"""

from __future__ import annotations

import argparse
import time


def _best(fn, repeat):
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def _full(verdict, V, mock, X, y, forest, nj):
    with mock.patch.dict(V.SKLEARN_FOREST, {"n_estimators": 500}):
        return verdict(X, y, forest=forest, smoothers=None, n_jobs=nj, progress=False,
                       fold_trees=None)


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=1000)
    p.add_argument("--trees", type=int, default=2000)
    p.add_argument("--n-jobs", type=int, default=1)
    p.add_argument("--repeat", type=int, default=2)
    args = p.parse_args(argv)

    from unittest import mock

    from sklearn.ensemble import RandomForestRegressor

    from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
    from hedgerow.datasets import load_pump_demo, split_demo
    from hedgerow.diagnostics import _verdict as V
    from hedgerow.diagnostics import verdict
    from hedgerow.diagnostics._verdict import FOLD_TREES, SKLEARN_FOREST
    from hedgerow.forest import warm_up

    warm_up()
    X, y, _ = split_demo(load_pump_demo(args.n, random_state=0))
    X, y = X.to_numpy(float), y.to_numpy(float)
    nj = args.n_jobs

    def llf(**kw):
        return LocalLinearForestRegressor(n_estimators=args.trees, random_state=0, n_jobs=nj,
                                          **kw)

    cut = int(0.8 * len(y))
    fit = _best(lambda: llf().fit(X, y), args.repeat)
    k = min(args.trees, FOLD_TREES)
    parts = {
        f"one fold: local linear forest ({k} trees)": _best(lambda: LocalLinearForestRegressor(
            n_estimators=k, random_state=0, n_jobs=nj).fit(X[:cut], y[:cut]), args.repeat),
        f"one fold: plain honest forest ({k} trees)": _best(lambda: HonestForestRegressor(
            n_estimators=k, random_state=0, n_jobs=nj).fit(X[:cut], y[:cut]),
            args.repeat),
        f"one fold: scikit-learn forest ({SKLEARN_FOREST['n_estimators']} trees)": _best(
            lambda: RandomForestRegressor(**SKLEARN_FOREST, random_state=0, n_jobs=nj).fit(
                X[:cut], y[:cut]), args.repeat),
    }
    runs = {
        "verdict, 5 folds (default baselines)": lambda: verdict(
            X, y, forest=llf(), smoothers=None, n_jobs=nj, progress=False),
        "verdict, 5 folds, full forests (fold_trees=None, 500 sklearn trees)": lambda: _full(
            verdict, V, mock, X, y, llf(), nj),
        "verdict, 5 folds, split_rule='mean' (trees reused)": lambda: verdict(
            X, y, forest=llf(split_rule="mean"), smoothers=None, n_jobs=nj, progress=False),
        "verdict, 5 folds, no scikit-learn forest": lambda: verdict(
            X, y, forest=llf(), smoothers=None, baseline=False, n_jobs=nj, progress=False),
        "verdict preview (selection not held out)": lambda: verdict(
            X, y, forest=llf(), smoothers=None, scoring="preview", n_jobs=nj,
            progress=False),
    }
    print(f"pump demo, n = {len(y)}, d = {X.shape[1]}, {args.trees} trees, n_jobs = {nj}")
    print(f"one default fit (reference): {fit:.2f} s")
    for name, t in parts.items():
        print(f"  {name:<52s} {t:6.2f} s  {t / fit:5.2f} x fit")
    for name, fn in runs.items():
        t = _best(fn, args.repeat)
        flag = "" if "5 folds (default" not in name else (
            "  (goal <= 6x: met)" if t / fit <= 6 else "  (goal <= 6x: NOT met)")
        print(f"{name:<54s} {t:6.2f} s  {t / fit:5.2f} x fit{flag}")


if __name__ == "__main__":
    main()
