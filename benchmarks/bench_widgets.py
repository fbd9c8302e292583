"""Python side of one interaction in the explorer: probe move and ridge-slider step.

n = 10,000, d = 10 (make_friedman1), 1000 trees. Times, without a browser, the handler
a drag end calls (`ProbeView._on_probe_moved`: diagnostics plus every mark update of the
views that follow the probe), a drag step (`_on_probe_dragged`: weights and local line
only, printed as a ratio to the drag end) and one ridge-slider step (`session.ridge_penalty = λ`:
everything redrawn without refitting; the out-of-bag interval-width readout follows from
a background thread, and the time until it is shown is printed too). Budgets: probe move
<= 30 ms median, ridge step <= 250 ms. The browser round trip (mouse-up to readout) is measured by
tests/browser/test_explore_in_lab.py and written to tests/browser/artifacts/timings.json.

The kernel smoothers are fitted here with Silverman bandwidths (`--bandwidth cv` to use
cross-validation, slow at this n): per-interaction cost does not depend on how the
bandwidth was chosen.

`--probe-scale` times `diagnostics.probe` alone (no smoothers: kernel weights touch every
row by nature) at n = 10,000 and 100,000 (`--probe-trees`, default 500 trees), and with
`--million` at 1,000,000 too (`--million-trees`, default 50: a probe's cost follows the
rows with weight, about trees x leaf size, and a 1M-row forest of 500 trees would not fit
in this machine's memory beside other work). Printed per n: the median and p95 over 41
probe points (each new, so no query cache helps), the goals (<= 6 ms at 100k, <= 10 ms at
1M, median) and two references measured in the same run: the probe at 10,000 rows with
the same trees (the ratio says whether the probe grows with n) and the per-call numpy work
the probe did before over every training row (`X.std` and the dense offset (X - x) / sd).

Usage: python benchmarks/bench_widgets.py [--n 10000] [--trees 1000] [--bandwidth silverman]
       python benchmarks/bench_widgets.py --probe-scale [--probe-trees 500] [--million]
"""

from __future__ import annotations

import argparse
import json
import pathlib
import time

import numpy as np
from sklearn.datasets import make_friedman1


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=10_000)
    p.add_argument("--trees", type=int, default=1000)
    p.add_argument("--bandwidth", default="silverman")
    p.add_argument("--probe-scale", action="store_true",
                   help="time diagnostics.probe at 10k and 100k rows instead")
    p.add_argument("--probe-trees", type=int, default=500)
    p.add_argument("--million", action="store_true", help="with --probe-scale: 1M rows too")
    p.add_argument("--million-trees", type=int, default=50)
    args = p.parse_args(argv)
    if args.probe_scale:
        probe_scale(args)
        return

    from hedgerow import LocalLinearForestRegressor, LocalLinearRegressor, NadarayaWatsonRegressor
    from hedgerow.widgets import explore

    X, y = make_friedman1(n_samples=args.n, n_features=10, noise=1.0, random_state=0)
    llf = LocalLinearForestRegressor(n_estimators=args.trees, random_state=0, n_jobs=2)
    llf.fit(X, y)
    app = explore(X, y, model=llf, compare=False)
    # the comparison smoothers, fitted once (see the module docstring)
    app.session._smoothers = [NadarayaWatsonRegressor(bandwidth=args.bandwidth).fit(X, y),
                              LocalLinearRegressor(bandwidth=args.bandwidth).fit(X, y)]
    # the explorer just opened: let its background interval-width readout finish first
    assert app.tuning_view.wait_for_width(120)
    view = app.probe_view
    j = app.session.feature_names.index(view.feature)
    xs = np.quantile(X[:, j], np.linspace(0.02, 0.98, 41))
    times = []
    for x in xs:
        t = time.perf_counter()
        view._on_probe_moved(view.probe_mark, {"event": "drag_end", "point": {"x": float(x),
                                                                              "y": 0.0}})
        times.append(time.perf_counter() - t)
    assert view.error == "", view.error
    move = 1e3 * float(np.median(times[1:]))
    print(f"probe move, median of {len(times) - 1}: {move:.1f} ms, p95 "
          f"{1e3 * float(np.percentile(times[1:], 95)):.1f} ms   (budget <= 30 ms median)")
    # a drag step draws only the weights and the local line (diagnostics.probe_sketch);
    # the release above is its reference, measured in the same run
    steps = []
    for x in xs[::-1]:
        view._sketched_at = -np.inf  # every step drawn (no throttle)
        t = time.perf_counter()
        view._on_probe_dragged(view.probe_mark, {"event": "drag", "point": {"x": float(x),
                                                                            "y": 0.0}})
        steps.append(time.perf_counter() - t)
    assert view.error == "", view.error
    step_ms = 1e3 * float(np.median(steps[1:]))
    print(f"probe drag step (weights and local line only), median of {len(steps) - 1}: "
          f"{step_ms:.1f} ms = {step_ms / move:.2f} x the release's drawing")
    view._on_probe_moved(view.probe_mark, {"event": "drag_end", "point": {"x": float(xs[0]),
                                                                          "y": 0.0}})
    lams = np.geomspace(1e-3, 3.0, 9)
    times, filled = [], []
    for lam in lams:
        t = time.perf_counter()
        app.session.ridge_penalty = float(lam)
        times.append(time.perf_counter() - t)
        # the interval-width readout (little-bags errors of every training row) is filled
        # by a background thread; wait for it so steps do not overlap
        assert app.tuning_view.wait_for_width(120)
        filled.append(time.perf_counter() - t)
    step = 1e3 * float(np.median(times))
    print(f"ridge-slider step, median of {len(times)}: {step:.1f} ms, p95 "
          f"{1e3 * float(np.percentile(times, 95)):.1f} ms   (budget <= 250 ms median)")
    print(f"  ... until the interval-width readout is filled too: "
          f"{1e3 * float(np.median(filled)):.1f} ms")
    root = pathlib.Path(__file__).resolve().parent.parent
    timings = root / "tests/browser/artifacts/timings.json"
    if timings.exists():
        rec = json.loads(timings.read_text())
        for what, key in (("probe drag", "probe_drag_round_trips_s"),
                          ("ridge slider", "ridge_round_trips_s")):
            rt = np.asarray(rec.get(key) or [], dtype=float)
            if rt.size:
                print(f"browser {what}, mouse-up to readout (last browser test run, its "
                      f"small demo model, {rt.size} drags): p50 "
                      f"{1e3 * np.median(rt):.0f} ms, p95 {1e3 * np.percentile(rt, 95):.0f} "
                      f"ms (goal on a quiet machine: p95 <= "
                      f"{150 if what == 'probe drag' else 300} ms)")


def _probe_times(model, X, j, repeats=41):
    """Median and p95 (ms) of diagnostics.probe at ``repeats`` new points along column j."""
    from hedgerow import diagnostics as D

    base = np.median(X, axis=0)
    D.probe(model, base)  # the fit-scoped caches (leaf means, lines) once
    times = []
    for v in np.quantile(X[:, j], np.linspace(0.02, 0.98, repeats)):
        x = base.copy()
        x[j] = v
        t = time.perf_counter()
        D.probe(model, x)
        times.append(time.perf_counter() - t)
    return 1e3 * float(np.median(times)), 1e3 * float(np.percentile(times, 95))


def _full_row_work(X, x, w, repeats=11):
    """Median (ms) of the per-call work the probe did over every training row before."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        sd = X.std(axis=0)
        sd = np.where(sd > 0, sd, 1.0)
        diff = (X - x) / sd
        w @ diff, w @ np.abs(diff)
        times.append(time.perf_counter() - t)
    return 1e3 * float(np.median(times))


def probe_scale(args):
    import warnings

    from hedgerow import LocalLinearForestRegressor

    warnings.simplefilter("ignore")  # few bags at --million-trees; not what is timed

    sizes = [(10_000, args.probe_trees), (100_000, args.probe_trees)]
    if args.million:
        sizes += [(10_000, args.million_trees), (1_000_000, args.million_trees)]
    goals = {100_000: 6.0, 1_000_000: 10.0}
    small = {}
    for n, trees in sizes:
        X, y = make_friedman1(n_samples=n, n_features=10, noise=1.0, random_state=0)
        t = time.perf_counter()
        llf = LocalLinearForestRegressor(n_estimators=trees, random_state=0, n_jobs=2)
        llf.fit(X, y)
        fit_s = time.perf_counter() - t
        med, p95 = _probe_times(llf, X, 0)
        w = llf.neighbour_weights(np.median(X, axis=0)[None, :]).toarray().ravel()
        full = _full_row_work(X, np.median(X, axis=0), w)
        nnz = int(np.count_nonzero(w))
        line = (f"n={n:>9,} trees={trees:>4}: probe median {med:.2f} ms, p95 {p95:.2f} ms "
                f"({nnz} rows with weight; fit {fit_s:.0f} s)")
        if n in goals:
            verdict = "met" if med <= goals[n] else "MISSED"
            line += f"   goal <= {goals[n]:.0f} ms median: {verdict}"
        print(line)
        print(f"    old per-call work over every row: {full:.2f} ms -> probe / it = "
              f"{med / full:.2f}")
        if n == 10_000:
            small[trees] = med
        elif trees in small:
            print(f"    probe at n={n:,} / probe at n=10,000 (same trees) = "
                  f"{med / small[trees]:.2f}")
        del llf


if __name__ == "__main__":
    main()
