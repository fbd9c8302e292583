"""A soak of the explorer: thousands of random events on a kernel-like event loop.

The session is built inside a running asyncio loop, as in a Jupyter kernel: background
results reach the views through ``call_soon_threadsafe`` while the test keeps sending
front-end events (probe drags, row pins, ridge steps, column switches, refits asked for
and cancelled, coverage readouts started and stopped). Afterwards the views must show
the current model's numbers, no render may have drawn a state older than one already
drawn, no worker thread may be left running, and traced memory may grow by at most
``MEMORY_GROWTH_BOUND`` between the end of a warm-up and the end of the run.
"""

import asyncio
import gc
import random
import threading
import tracemalloc

import numpy as np
import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bqplot")

from hedgerow import diagnostics as D  # noqa: E402
from hedgerow.datasets import load_orchard_demo  # noqa: E402
from hedgerow.widgets import explore  # noqa: E402

pytestmark = [pytest.mark.slow,
              pytest.mark.filterwarnings("ignore::RuntimeWarning")]

N_EVENTS = 2000
WARM_UP = 200
#: Traced bytes the run may add after the warm-up. The session's cache holds at most 64
#: entries (scenes, probe reports, out-of-bag summaries, fold fits of one forest), so
#: memory must level off once it is full; a leak of even one scene per event (about
#: 30 kB) would pass 50 MB over 1,800 events.
MEMORY_GROWTH_BOUND = 50 * 2**20

EVENTS = (("drag", 30), ("pin", 6), ("coordinate", 6), ("ridge", 24), ("column", 8),
          ("refit", 7), ("cancel refit", 5), ("coverage", 4), ("stop coverage", 4),
          ("surface", 2), ("surface cell", 2), ("stop surface", 1), ("pause", 6))


def _worker_threads():
    return [t for t in threading.enumerate() if t.name.startswith("hedgerow")
            or "runner" in t.name.lower()]


class DrawLog:
    """Wraps each view's draw to record what state it drew, in order."""

    def __init__(self, app):
        self.app, self.stale = app, []
        self.probe_draws = self.tuning_draws = self.coverage_draws = 0
        s = app.session
        pv, tv = app.probe_view, app.tuning_view
        draw_probe, draw_tuning, done_cov = pv._draw, tv._draw, tv._coverage_done
        self.last_generation = s.generation
        self.last_coverage = -1

        def probe(scene):
            self.probe_draws += 1
            if not np.array_equal(scene.report.x, np.asarray(pv.probe_x)):
                self.stale.append(("probe at an old point", list(scene.report.x)))
            self._generation("probe")
            return draw_probe(scene)

        def tuning(summary, *args, **kwargs):
            self.tuning_draws += 1
            if summary["ridge_penalty"] != pytest.approx(s.ridge_penalty, rel=1e-12):
                self.stale.append(("tuning at an old penalty", summary["ridge_penalty"],
                                   s.ridge_penalty))
            self._generation("tuning")
            return draw_tuning(summary, *args, **kwargs)

        def coverage(rep, settings):
            self.coverage_draws += 1
            job = s.latest_job("coverage")
            order = job._order if job is not None else -1
            if order < self.last_coverage:
                self.stale.append(("older coverage readout after a newer one", order))
            self.last_coverage = order
            return done_cov(rep, settings)

        pv._draw, tv._draw, tv._coverage_done = probe, tuning, coverage

    def _generation(self, view):
        g = self.app.session.generation
        if g < self.last_generation:
            self.stale.append((f"{view} drew forest {g} after {self.last_generation}",))
        self.last_generation = g


async def _settle(session, timeout=300.0):
    """Let the loop deliver until no background job is waiting or running."""
    loop = asyncio.get_running_loop()
    end = loop.time() + timeout
    while loop.time() < end:
        busy = [k for k in ("refit", "smoothers", "interval width", "verdict", "coverage",
                            "surface column")
                if (j := session.latest_job(k)) is not None and j.is_alive()]
        if session.surface_pending():
            busy.append("surface columns")
        if not busy:
            await asyncio.sleep(0.05)  # deliveries queued by the last job
            return
        await asyncio.sleep(0.05)
    raise TimeoutError(f"background jobs still running after {timeout} s: {busy}")


async def _soak(seed):
    rng = random.Random(seed)
    X, y = load_orchard_demo(250, random_state=seed)
    app = explore(X, y, n_estimators=40, refit_delay=0.02)
    s, pv, tv = app.session, app.probe_view, app.tuning_view
    log = DrawLog(app)
    names, kinds = s.feature_names, [k for k, _ in EVENTS]
    weights = [w for _, w in EVENTS]
    sent = dict.fromkeys(kinds, 0)
    tracemalloc.start()
    base = None
    try:
        for i in range(N_EVENTS):
            if i == WARM_UP:
                await _settle(s)
                gc.collect()
                base = tracemalloc.get_traced_memory()[0]
            kind = rng.choices(kinds, weights)[0]
            sent[kind] += 1
            j = names.index(pv.feature)
            col = s.X_train[:, j]
            if kind == "drag":
                x = float(np.quantile(col, rng.random()))
                pv._on_probe_moved(pv.probe_mark, {"event": "drag_end",
                                                   "point": {"x": x, "y": 0.0}, "index": 0})
            elif kind == "pin":
                pv.anchor_row = rng.randrange(-1, len(s.X_train))
            elif kind == "coordinate":
                box = rng.randrange(len(names))
                lo, hi = s.X_train[:, box].min(), s.X_train[:, box].max()
                pv._on_coordinate_edited(box, float(lo + (hi - lo) * rng.uniform(-0.2, 1.2)))
            elif kind == "ridge":
                tv.ridge_slider.value = 10.0 ** rng.uniform(-3.0, 0.5)
            elif kind == "column":
                pv.feature = rng.choice(names)
            elif kind == "refit":
                key = rng.choice(["n_estimators", "min_samples_leaf", "subsample_rate"])
                value = {"n_estimators": rng.choice([20, 30, 40, 50]),
                         "min_samples_leaf": rng.choice([3, 5, 8]),
                         "subsample_rate": rng.choice([0.3, 0.5, 0.7])}[key]
                tv._on_setting_changed(key, value)
            elif kind == "cancel refit":
                tv._on_cancel_clicked(None)
            elif kind == "coverage":
                tv.coverage_reps = 2
                tv._on_coverage_clicked(None)
            elif kind == "stop coverage":
                tv._on_coverage_cancel_clicked(None)
            elif kind == "surface":
                tv._on_surface_clicked(None)
            elif kind == "surface cell":
                tv.surface_cells[rng.choice(list(tv.surface_cells))].click()
            elif kind == "stop surface":
                tv._on_surface_cancel_clicked(None)
            await asyncio.sleep(rng.uniform(0.005, 0.05) if kind == "pause" else 0)
        tv.cancel_coverage()
        s.cancel_jobs("surface column")
        await _settle(s)
        gc.collect()
        grown = tracemalloc.get_traced_memory()[0] - base
    finally:
        tracemalloc.stop()
    return app, log, sent, grown


@pytest.fixture(scope="module")
def soaked():
    before = set(threading.enumerate())
    app, log, sent, grown = asyncio.run(_soak(seed=11))
    s = app.session
    print(f"\nsoak: {N_EVENTS} events {sent}; draws: probe {log.probe_draws}, tuning "
          f"{log.tuning_draws}, coverage {log.coverage_draws}; forests put in place "
          f"{s.generation}; refits ended {len(s.refit_log)}; traced memory growth after "
          f"the warm-up {grown / 2**20:.1f} MB (bound {MEMORY_GROWTH_BOUND / 2**20:.0f} MB)")
    return app, log, sent, grown, before


def test_every_kind_of_event_was_sent(soaked):
    _, log, sent, _, _ = soaked
    assert sum(sent.values()) == N_EVENTS
    assert all(n > 0 for n in sent.values()), sent
    assert log.probe_draws > 100 and log.tuning_draws > 50


def test_no_stale_render_landed(soaked):
    _, log, _, _, _ = soaked
    assert log.stale == []


def test_views_show_the_current_models_numbers(soaked):
    app, _, _, _, _ = soaked
    s, pv, tv = app.session, app.probe_view, app.tuning_view
    assert all(v.error == "" for v in app.views), [v.error for v in app.views]
    assert s.refit_status in ("idle", "cancelled")
    # the probe readout is the probe of the forest in place, at the penalty shown
    model = s.model.with_ridge_penalty(s.ridge_penalty)
    rep = D.probe(model, np.asarray(pv.probe_x), compare=s._smoothers)
    assert set(pv.readout) == {m.name for m in rep.methods}
    for m in rep.methods:
        assert pv.readout[m.name]["prediction"] == pytest.approx(m.prediction, rel=1e-9)
        assert pv.readout[m.name]["half_width"] == pytest.approx(
            (m.upper - m.lower) / 2, rel=1e-9)
    # the tuning readout is that forest's out-of-bag summary at that penalty
    summary = D.oob_summary(model, interval_width=False)
    from hedgerow.widgets._style import fmt
    assert fmt(summary["oob_rmse"]) in tv.readout_html.value
    assert fmt(s.ridge_penalty, 3) in tv.readout_html.value
    # the settings line names the forest in place
    assert s.describe_settings() in tv._settings_line.value.replace("&#x27;", "'")
    p = s.model.get_params()
    assert s.settings["n_estimators"] == p["n_estimators"]
    assert s.settings["subsample_rate"] == p["subsample_rate"]
    # every refit that ended was logged, and the forest in place is the last one done
    done = [params for params, outcome in s.refit_log if outcome == "done"]
    if done:
        assert {k: done[-1][k] for k in ("n_estimators", "subsample_rate",
                                         "min_samples_leaf")} == {
            k: p[k] for k in ("n_estimators", "subsample_rate", "min_samples_leaf")}


def test_no_thread_left_running(soaked):
    app, _, _, _, before = soaked
    app.close()
    for t in set(threading.enumerate()) - before:
        t.join(timeout=10)
    left = [t.name for t in set(threading.enumerate()) - before if t.is_alive()]
    assert left == []


def test_memory_levels_off(soaked):
    _, _, _, grown, _ = soaked
    assert grown < MEMORY_GROWTH_BOUND, f"traced memory grew by {grown / 2**20:.1f} MB"
