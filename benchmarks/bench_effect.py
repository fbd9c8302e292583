"""Fit time of the treatment-effect forest against the regression forest, one run.

Both grow the same number of trees on the same invented field-trial data
(``hedgerow.datasets.load_trial_demo``); the effect forest's fit includes its two
centring forests. Prints the ratio; the target is at most 2.5.

    .venv/bin/python benchmarks/bench_effect.py [n_rows] [n_trees]
"""

import sys
import time

from hedgerow import HonestForestRegressor, TreatmentEffectForest
from hedgerow.datasets import load_trial_demo
from hedgerow.forest import warm_up

TARGET = 2.5


def best_of(fn, repeats=3):
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 5000
    trees = int(sys.argv[2]) if len(sys.argv) > 2 else 500
    X, y, w, _ = load_trial_demo(n, random_state=0)
    warm_up()
    reg = best_of(lambda: HonestForestRegressor(n_estimators=trees, random_state=0,
                                                n_jobs=1).fit(X, y))
    eff = best_of(lambda: TreatmentEffectForest(n_estimators=trees, random_state=0,
                                                n_jobs=1).fit(X, y, w))
    ratio = eff / reg
    print(f"n={n} trees={trees}: regression forest {reg:.3f}s, effect forest {eff:.3f}s")
    print(f"ratio effect/regression {ratio:.2f} (target <= {TARGET}): "
          f"{'ok' if ratio <= TARGET else 'OVER'}")
    # predictions per 1000 queries, the regression forest's predict on the same trees
    # (the effect forest's trees, read as a regression forest of y: same leaves, same rows)
    effect = TreatmentEffectForest(n_estimators=trees, random_state=0, n_jobs=1).fit(X, y, w)
    regression = HonestForestRegressor(n_estimators=trees, random_state=0, n_jobs=1).fit(X, y)
    regression._set_forest_state(X, y, effect.forest_, effect.trees_per_bag_,
                                 effect.max_features_, effect.subsample_size_)
    Q = load_trial_demo(1000, random_state=1)[0]
    effect.predict_effect(Q[:10])
    regression.predict(Q[:10])
    t_eff = best_of(lambda: effect.predict_effect(Q))
    t_reg = best_of(lambda: regression.predict(Q))
    t_unc = best_of(lambda: effect.predict_effect(Q, corrected=False))
    print(f"per 1000 queries: predict_effect {t_eff * 1e3:.1f} ms (uncorrected "
          f"{t_unc * 1e3:.1f} ms), regression predict on the same trees "
          f"{t_reg * 1e3:.2f} ms: ratio {t_eff / t_reg:.0f}")


if __name__ == "__main__":
    main()
