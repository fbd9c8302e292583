"""Speed of LocalLinearForestRegressor against scikit-learn's random forest, one run.

Prints ratios measured in this process on make_friedman1(n_samples=10_000,
n_features=10), 1000 trees:
- fit (ridge-residual splits on the correction columns) / RandomForestRegressor fit
  (n_estimators=1000, max_samples=0.25, min_samples_leaf=5, n_jobs=2)   target <= 1.0
- predict(X, return_std=True) for 10,000 queries / sklearn predict       target <= 3
- re-solving the same queries for a new ridge penalty / first predict    target <= 0.1

Usage: python benchmarks/bench_local.py [--n 10000] [--trees 1000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from sklearn.datasets import make_friedman1
from sklearn.ensemble import RandomForestRegressor


def _timed(fn):
    t = time.perf_counter()
    out = fn()
    return time.perf_counter() - t, out


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=10_000)
    p.add_argument("--trees", type=int, default=1000)
    args = p.parse_args(argv)

    from hedgerow import LocalLinearForestRegressor
    from hedgerow.forest import warm_up

    warm_up()
    X, y = make_friedman1(n_samples=args.n, n_features=10, noise=1.0, random_state=0)
    Xq, _ = make_friedman1(n_samples=args.n, n_features=10, noise=1.0, random_state=1)
    llf = LocalLinearForestRegressor(n_estimators=args.trees, random_state=0, n_jobs=2)
    ref = RandomForestRegressor(
        n_estimators=args.trees, max_samples=0.25, min_samples_leaf=5, max_features=1.0,
        n_jobs=2, random_state=0,
    )
    t_fit, _ = _timed(lambda: llf.fit(X, y))
    t_ref, _ = _timed(lambda: ref.fit(X, y))
    print(f"correction columns {llf.correction_features_.tolist()}, "
          f"ridge_penalty_ {llf.ridge_penalty_}")
    print(f"fit: hedgerow {t_fit:.2f} s (includes lasso screening and the out-of-bag ridge "
          f"choice), sklearn {t_ref:.2f} s, ratio {t_fit / t_ref:.3f}  (target <= 1.0)")
    t_pred, _ = _timed(lambda: llf.predict(Xq, return_std=True))
    t_skl, _ = _timed(lambda: ref.predict(Xq))
    print(f"predict(return_std=True), {args.n} queries: {t_pred:.2f} s, sklearn predict "
          f"{t_skl:.2f} s, ratio {t_pred / t_skl:.3f}  (target <= 3)")
    new_lam = llf.ridge_penalty_ * 3 + 0.01
    t_re, _ = _timed(lambda: llf.predict(Xq, ridge_penalty=new_lam))
    print(f"re-solve for a new ridge penalty: {t_re:.3f} s, ratio to first predict "
          f"{t_re / t_pred:.3f}  (target <= 0.1)")
    t_first_plain, _ = _timed(lambda: llf.predict(Xq[::-1].copy()))
    print(f"(first plain predict on new queries: {t_first_plain:.2f} s; "
          f"re-solve / that = {t_re / t_first_plain:.3f})")
    assert np.isfinite(t_re)


if __name__ == "__main__":
    main()
