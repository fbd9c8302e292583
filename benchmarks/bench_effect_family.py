"""RMSE of the effect forest against a known effect, corrected vs uncorrected, on a family.

Seeded designs of our own (d, n, curvature, an edge-steep effect, a step, correlated
columns); randomised treatment at 0.5, outcome x1 + w tau(x) + N(0, 0.5^2). Per design the
mean RMSE over seeds of the uncorrected causal forest on the same trees, and the ratios of
the default corrected effect (screened columns, penalty by out-of-bag R-loss) and of the
correction on every column at ridge 0.1 (the former default) to it.

    .venv/bin/python benchmarks/bench_effect_family.py [seeds] [min_samples_leaf]
"""

import sys

import numpy as np

from hedgerow import TreatmentEffectForest


def uniform(n, d, rng):
    return rng.uniform(-1, 1, (n, d))


def correlated(n, d, rng):
    C = 0.6 * np.ones((d, d)) + 0.4 * np.eye(d)
    return np.clip(rng.normal(size=(n, d)) @ np.linalg.cholesky(C).T / 1.5, -2, 2)


DESIGNS = [
    ("linear d2 n2000", 2, 2000, uniform, lambda X: 3 * X[:, 0]),
    ("quadratic d6 n1000", 6, 1000, uniform, lambda X: 2 * X[:, 0] ** 2),
    ("sine d3 n4000", 3, 4000, uniform, lambda X: np.sin(2 * X[:, 0])),
    ("edge-steep d3 n1000", 3, 1000, uniform,
     lambda X: 1 + 1.5 * np.tanh(2 * X[:, 0]) + 0.5 * X[:, 0] ** 3),
    ("step d2 n2000", 2, 2000, uniform, lambda X: np.where(X[:, 0] > 0, 2.0, 0.0)),
    ("correlated d4 n2000", 4, 2000, correlated, lambda X: X[:, 0] + X[:, 1]),
    ("wide linear d10 n2000", 10, 2000, uniform, lambda X: 3 * X[:, 0]),
]


def main():
    seeds = int(sys.argv[1]) if len(sys.argv) > 1 else 3
    leaf = int(sys.argv[2]) if len(sys.argv) > 2 else 5
    print(f"{seeds} seeds, 200 trees, min_samples_leaf={leaf}")
    print("design                  | RMSE uncorrected | default / unc | all cols, 0.1 / unc")
    for name, d, n, gen, tau in DESIGNS:
        unc, dflt, old = [], [], []
        for seed in range(seeds):
            rng = np.random.default_rng(1000 + seed)
            X = gen(n, d, rng)
            w = (rng.random(n) < 0.5).astype(float)
            y = X[:, 1] + w * tau(X) + rng.normal(scale=0.5, size=n)
            Xq = gen(400, d, rng)
            t = tau(Xq)

            def rmse(e, t=t):
                return float(np.sqrt(np.mean((e - t) ** 2)))

            f = TreatmentEffectForest(n_estimators=200, random_state=seed,
                                      min_samples_leaf=leaf, n_jobs=1).fit(X, y, w)
            unc.append(rmse(f.predict_effect(Xq, corrected=False)))
            dflt.append(rmse(f.predict_effect(Xq)))
            g = TreatmentEffectForest(n_estimators=200, random_state=seed,
                                      min_samples_leaf=leaf, ridge_penalty=0.1,
                                      correction_features=None, n_jobs=1).fit(X, y, w)
            old.append(rmse(g.predict_effect(Xq)))
        u = np.mean(unc)
        print(f"{name:<24}| {u:16.3f} | {np.mean(dflt) / u:13.3f} | {np.mean(old) / u:.3f}",
              flush=True)


if __name__ == "__main__":
    main()
