"""Effect-interval coverage on a family of designs, by the coverage readout's standard.

Seeded designs of our own (those of ``bench_effect_family.py`` plus a confounded
observational design, a skewed non-uniform design and a smooth effect in two columns):
one fit per design with default settings (``n_estimators`` as given, leaves of 5), then
``diagnostics.effect_coverage_readout(truth=tau)``: X and w kept, the outcome redrawn
around the known effect, the forest refitted per replication. Printed per design and
interval method: coverage overall / edge band / interior (binomial 95% interval of the
overall one), mean width, rms bias, mean estimated sd against the sd across
replications, coverage with the bias removed, and the readout's flag.

Goal (the trial design's, from the effect issue; common practice for a nominal 95%
interval): 0.93-0.97 overall, >= 0.90 in the edge band for the default interval. The
step design is there to show what a discontinuous effect does, not to meet the goal.

    .venv/bin/python benchmarks/bench_effect_coverage.py [reps] [trees] [n_eval]
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_effect_family import DESIGNS, uniform  # noqa: E402

from hedgerow import TreatmentEffectForest  # noqa: E402
from hedgerow.diagnostics import effect_coverage_readout  # noqa: E402


def skewed(n, d, rng):
    # beta(2, 5) columns mapped to [-1, 1]: dense on the left, thin on the right edge
    return 2 * rng.beta(2.0, 5.0, (n, d)) - 1


#: name, d, n, X generator, effect, propensity (None: randomised at 0.5)
EXTRA = [
    ("confounded d4 n2000", 4, 2000, uniform, lambda X: 1 + X[:, 0],
     lambda X: 1 / (1 + np.exp(-(X[:, 0] + X[:, 1])))),
    ("skewed X d3 n2000", 3, 2000, skewed, lambda X: np.sin(2 * X[:, 0]), None),
    ("two-column smooth d5 n3000", 5, 3000, uniform,
     lambda X: 0.8 * X[:, 0] - 0.6 * X[:, 1] ** 2 + 0.5 * X[:, 0] * X[:, 1], None),
]


def family():
    for name, d, n, gen, tau in DESIGNS:
        yield name, d, n, gen, tau, None
    yield from EXTRA


def main():
    reps = int(sys.argv[1]) if len(sys.argv) > 1 else 20
    trees = int(sys.argv[2]) if len(sys.argv) > 2 else 500
    n_eval = int(sys.argv[3]) if len(sys.argv) > 3 else 100
    only = sys.argv[4].split(",") if len(sys.argv) > 4 else None
    print(f"{reps} replications, {trees} trees, {n_eval} evaluation rows per design; "
          f"outcome x1 + w tau(x) + N(0, 0.5^2)")
    head = (f"{'design':<28}{'interval':<16}{'all [95% CI]':<22}{'edge':>6}{'inter':>7}"
            f"{'width':>7}{'bias':>7}{'sd/sd_x':>12}{'no-bias':>8}  flag")
    print(head)
    for k, (name, d, n, gen, tau, prop) in enumerate(family()):
        if only and not any(o in name for o in only):
            continue
        rng = np.random.default_rng(2000 + k)
        X = gen(n, d, rng)
        e = np.full(n, 0.5) if prop is None else prop(X)
        w = (rng.random(n) < e).astype(float)
        y = X[:, 1] + w * tau(X) + rng.normal(scale=0.5, size=n)
        t0 = time.perf_counter()
        f = TreatmentEffectForest(n_estimators=trees, random_state=k).fit(X, y, w)
        rep = effect_coverage_readout(f, X, y, w, truth=tau, reps=reps, n_eval=n_eval,
                                      random_state=k, progress=False)
        fr = rep.to_frame()
        for m in fr["interval"].unique():
            g = fr[fr["interval"] == m].set_index("part")
            a = g.loc["all"]
            print(f"{name:<28}{m:<16}{a['coverage']:.3f} [{a['lower']:.3f}, {a['upper']:.3f}]"
                  f"{g.loc['edge', 'coverage']:>8.3f}{g.loc['interior', 'coverage']:>7.3f}"
                  f"{a['mean_width']:>7.3f}{a['rms_bias']:>7.3f}"
                  f"{a['mean_sd']:>6.3f}/{a['sd_across']:.3f}"
                  f"{a['coverage_bias_removed']:>8.3f}  "
                  f"{'; '.join(x for x in g['flag'] if x)}", flush=True)
        print(f"{'':<28}(correction columns {[int(c) for c in f.correction_features_]}, ridge "
              f"{f.ridge_penalty_:g}, {time.perf_counter() - t0:.0f} s)", flush=True)


if __name__ == "__main__":
    main()
