"""Time from ``explore(...)`` to a drawn explorer, with the comparison smoothers pending.

Pump demo (n = 1000, d = 14 by default), one forest fitted beforehand and passed in, so
that only what ``explore`` itself does is timed. Printed, all measured in this run:

- open, compare=False: the reference (forest views only);
- open, compare=True: the smoothers are submitted to the session's background runner
  and the explorer returns at once; the ratio to the reference should be close to 1;
- until the smoothers are in: from the same call until their job was delivered and the
  views redrew with them (``session.wait_for("smoothers")``);
- the two bandwidth searches fitted directly, one after the other: what a synchronous
  explorer would have added to its opening time;
- the probe view alone (session + ``ProbeView``), with and without the smoothers
  pending: the first drawn figure.

The whole explorer's opening time is dominated by the verdict the tuning and verdict
views compute as they are built (cross-fitted forests), not by the smoothers; with them
pending it also shares the two cores with their bandwidth search.

Usage: python benchmarks/bench_explore_open.py [--n 1000] [--trees 200] [--repeats 3]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=1000)
    p.add_argument("--trees", type=int, default=200)
    p.add_argument("--repeats", type=int, default=3)
    args = p.parse_args(argv)
    warnings.filterwarnings("ignore", message="X does not have valid feature names")

    from hedgerow import LocalLinearForestRegressor, LocalLinearRegressor, NadarayaWatsonRegressor
    from hedgerow.datasets import load_pump_demo, split_demo
    from hedgerow.widgets import ExploreSession, ProbeView, explore

    X, y, _ = split_demo(load_pump_demo(args.n, random_state=0))
    forest = LocalLinearForestRegressor(n_estimators=args.trees, random_state=0).fit(X, y)
    explore(X, y, model=forest, compare=False).close()  # warm-up: kernels compiled

    ref, opened, ready, direct, probe_ref, probe_pending = [], [], [], [], [], []
    for _ in range(args.repeats):
        for compare, out in ((False, probe_ref), (True, probe_pending)):
            t = time.perf_counter()
            session = ExploreSession(X, y, model=forest, compare=compare)
            ProbeView(session)
            out.append(time.perf_counter() - t)
            assert not compare or session.compared == []  # drawn before the smoothers
            session.close()
            session.wait_for("smoothers", 60)
        t = time.perf_counter()
        app = explore(X, y, model=forest, compare=False)
        ref.append(time.perf_counter() - t)
        app.close()
        t = time.perf_counter()
        app = explore(X, y, model=forest)
        opened.append(time.perf_counter() - t)
        assert app.session.latest_job("smoothers").outcome in ("waiting", "running", "done")
        assert app.session.wait_for("smoothers", 600) == "done"
        ready.append(time.perf_counter() - t)
        assert all(v.error == "" for v in app.views)
        notes = app.session.probe_report().column_use_notes()
        app.close()
        t = time.perf_counter()
        NadarayaWatsonRegressor().fit(X, y)
        LocalLinearRegressor().fit(X, y)
        direct.append(time.perf_counter() - t)

    med = {k: float(np.median(v)) for k, v in
           (("ref", ref), ("open", opened), ("ready", ready), ("direct", direct),
            ("probe_ref", probe_ref), ("probe_pending", probe_pending))}
    print(f"pump demo n={args.n}, d={X.shape[1]}, {args.trees} trees, "
          f"median of {args.repeats}")
    print(f"open, compare=False (reference)      {med['ref']:7.2f} s")
    print(f"open, compare=True (smoothers queued) {med['open']:7.2f} s   "
          f"ratio {med['open'] / med['ref']:.2f}")
    print(f"until the smoothers are in            {med['ready']:7.2f} s   "
          f"ratio {med['ready'] / med['ref']:.2f}")
    print(f"the two bandwidth searches, direct    {med['direct']:7.2f} s")
    print(f"probe view drawn, compare=False       {med['probe_ref']:7.3f} s")
    print(f"probe view drawn, smoothers pending   {med['probe_pending']:7.3f} s   "
          f"ratio {med['probe_pending'] / med['probe_ref']:.2f}")
    print("readout notes: " + "; ".join(notes))


if __name__ == "__main__":
    main()
