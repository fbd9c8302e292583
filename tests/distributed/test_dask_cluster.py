"""The dask path (``hedgerow[dask]``) against the local computation, on a real LocalCluster.

Two worker processes of one thread each, started and closed by the module fixture. Every
distributed result is compared with the local one bit for bit; two tests SIGKILL a
worker process in the middle of real work (tree growth) and check that no tree or cell is
lost or counted twice.
"""

import os
import signal
import sys
import threading
import time
import warnings

import numpy as np
import pandas as pd
import pytest

from hedgerow import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    LocalLinearRegressor,
    NadarayaWatsonRegressor,
)
from hedgerow.datasets import make_softplus_design, softplus_truth
from hedgerow.diagnostics import coverage_readout, tuning_surface

if os.environ.get("CI") == "true":
    import dask.distributed  # noqa: F401  (CI installs the extra: fail, never skip)

distributed = pytest.importorskip(
    "distributed", reason="the dask path needs the extra: pip install hedgerow[dask]"
)
da = pytest.importorskip("dask.array")
dd = pytest.importorskip("dask.dataframe")

_ARRAYS = ("feature", "threshold", "left", "right", "node_start", "leaf_ptr", "leaf_rows",
           "leaf_start", "sample_ptr", "sample_rows")


def _warm(dask_worker=None):
    from hedgerow.forest import warm_up

    warm_up()  # numba kernels from the on-disk cache, once per worker process


@pytest.fixture(scope="module")
def client():
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as c:
        c.run(_warm)
        yield c


@pytest.fixture(scope="module")
def data():
    X, y, _ = make_softplus_design(300, n_features=4, random_state=5)
    return X, y


@pytest.fixture(scope="module")
def query():
    X, _, _ = make_softplus_design(90, n_features=4, random_state=6)
    return X


def _assert_same_forest(a, b):
    for name in _ARRAYS:
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


def _hedgerow_tasks(dask_scheduler):
    return [str(k) for k in dask_scheduler.tasks if str(k).startswith("hedgerow-")]


def _wait_until_no_hedgerow_tasks(client, timeout=10.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        left = client.run_on_scheduler(_hedgerow_tasks)
        if not left:
            return []
        time.sleep(0.1)
    return left


# -- bad input --------------------------------------------------------------------------
@pytest.mark.parametrize("bad", ["tcp://127.0.0.1:8786", 3, object()])
def test_client_must_be_a_client(data, bad):
    X, y = data
    est = HonestForestRegressor(n_estimators=8, random_state=0)
    with pytest.raises(TypeError, match=r"The 'client' parameter must be a "
                                        r"dask.distributed.Client or None. Got .* instead"):
        est.fit(X, y, client=bad)
    assert not hasattr(est, "forest_")
    with pytest.raises(TypeError, match="'client' parameter"):
        tuning_surface(X, y, [0.5], [0.1], n_estimators=8, progress=False, client=bad)
    model = LocalLinearForestRegressor(n_estimators=8, random_state=0).fit(X, y)
    with pytest.raises(TypeError, match="'client' parameter"):
        coverage_readout(model, reps=1, progress=False, client=bad)


def test_missing_extra_names_the_install_command(data, monkeypatch):
    X, y = data
    monkeypatch.setitem(sys.modules, "distributed", None)  # import now fails
    with pytest.raises(ImportError, match=r"pip install hedgerow\[dask\]"):
        HonestForestRegressor(n_estimators=8).fit(X, y, client=object())


def test_failed_fit_keeps_the_earlier_forest(client, data, monkeypatch):
    # a cluster that hands back a chunk with a tree missing must not give a smaller forest
    import hedgerow._distributed as hd

    X, y = data
    est = HonestForestRegressor(n_estimators=32, random_state=1).fit(X, y)
    before, pred = est.forest_, est.predict(X[:20])
    real = hd.run_tasks

    def lossy(*args, **kwargs):
        out = real(*args, **kwargs)
        out[0] = out[0][:-1]
        return out

    monkeypatch.setattr(hd, "run_tasks", lossy)
    with pytest.raises(RuntimeError, match="refusing to assemble an incomplete forest"):
        est.fit(X, y * 2.0, client=client)
    assert est.forest_ is before
    np.testing.assert_array_equal(est.predict(X[:20]), pred)


def test_worker_error_propagates_unchanged(client, data):
    X, y = data
    with pytest.raises(ValueError, match="'max_features' parameter must be at most"):
        tuning_surface(X, y, [0.05, 0.5], [0.1], n_estimators=8, max_features=40,
                       progress=False, client=client)
    assert _wait_until_no_hedgerow_tasks(client) == []


def test_tasks_get_inputs_in_memory_of_their_own(client, data):
    # arrays received from the network sat at odd addresses (17, 29 mod 64) and a 2-worker
    # tuning surface then differed from the local one in the 6th digit
    from hedgerow._distributed import run_tasks

    X, _ = data
    big = np.repeat(X, 20, axis=0)  # large enough to travel as its own frame
    out = run_tasks(client, lambda item, a: (a.ctypes.data % 16, a.flags.owndata,
                                             float(a.sum())),
                    list(range(4)), shared=(big,), what="probe")
    assert sorted(out) == [0, 1, 2, 3]
    assert all(v == (0, True, float(big.sum())) for v in out.values()), out


def test_lost_task_is_a_clear_error(client):
    # what the scheduler raises for a task whose workers died too often
    from hedgerow._distributed import run_tasks

    def doomed(item):
        import types

        import distributed

        if item == 2:
            gone = types.SimpleNamespace(address="tcp://gone:1")
            raise distributed.KilledWorker("task", gone, 3)
        return item

    with pytest.raises(RuntimeError, match="The dask cluster lost probe 2 of 4 .*KilledWorker"):
        run_tasks(client, doomed, [0, 1, 2, 3], what="probe")
    assert _wait_until_no_hedgerow_tasks(client) == []


# -- distributed fit --------------------------------------------------------------------
@pytest.mark.parametrize("make", [
    lambda: HonestForestRegressor(n_estimators=48, trees_per_bag=6, random_state=4),
    lambda: LocalLinearForestRegressor(n_estimators=48, random_state=4),
    lambda: LocalLinearForestRegressor(n_estimators=30, split_rule="mean",
                                       ridge_penalty=0.1, subsample_rate=0.7,
                                       random_state=9),
], ids=["honest", "local-linear", "local-linear-unbagged"])
def test_distributed_fit_equals_local(client, data, query, make):
    X, y = data
    local = make().fit(X, y)
    seen = []
    remote = make().fit(X, y, client=client, progress=seen.append)
    _assert_same_forest(remote.forest_, local.forest_)
    assert remote.forest_.node_start.shape[0] - 1 == local.n_estimators
    assert seen == sorted(seen) and seen[-1] == local.n_estimators
    np.testing.assert_array_equal(remote.predict(query), local.predict(query))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # rows drawn by every tree: NaN
        np.testing.assert_array_equal(remote.oob_predict(), local.oob_predict())
    assert _wait_until_no_hedgerow_tasks(client) == []


# -- lazy predictions -------------------------------------------------------------------
def _fitted(data):
    X, y = data
    return [
        HonestForestRegressor(n_estimators=40, random_state=2).fit(X, y),
        LocalLinearForestRegressor(n_estimators=40, random_state=2).fit(X, y),
        NadarayaWatsonRegressor(bandwidth=0.4).fit(X, y),
        LocalLinearRegressor(bandwidth=0.6).fit(X, y),
    ]


@pytest.fixture(scope="module")
def models(data):
    return _fitted(data)


@pytest.mark.parametrize("which", range(4), ids=["honest", "llf", "nw", "llr"])
@pytest.mark.parametrize("scheduler", ["cluster", "threads"])
def test_lazy_predict_on_dask_array(client, models, query, which, scheduler):
    import contextlib

    import dask

    from hedgerow._distributed import _scheduler_client

    model = models[which]
    # columns split in two chunks too: the model needs whole rows
    Xd = da.from_array(query, chunks=(25, 2))
    # "threads": no cluster involved (the model travels inside the graph as a Delayed)
    with (dask.config.set(scheduler="threads") if scheduler == "threads"
          else contextlib.nullcontext()):
        assert (_scheduler_client() is client) == (scheduler == "cluster")
        mean = model.predict(Xd)
        assert isinstance(mean, da.Array) and mean.shape == (query.shape[0],)
        np.testing.assert_array_equal(mean.compute(), model.predict(query))
        lazy_mean, lazy_std = model.predict(Xd, return_std=True)
        got_mean, got_std = da.compute(lazy_mean, lazy_std)
        want_mean, want_std = model.predict(query, return_std=True)
        np.testing.assert_array_equal(got_mean, want_mean)
        np.testing.assert_array_equal(got_std, want_std)
        lo, hi = model.predict_interval(Xd, level=0.9)
        want_lo, want_hi = model.predict_interval(query, level=0.9)
        got_lo, got_hi = da.compute(lo, hi)
    np.testing.assert_array_equal(got_lo, want_lo)
    np.testing.assert_array_equal(got_hi, want_hi)


def test_lazy_predict_on_dask_dataframe(client, data, query):
    X, y = data
    cols = [f"c{j}" for j in range(X.shape[1])]
    frame = pd.DataFrame(X, columns=cols)
    qframe = pd.DataFrame(query, columns=cols, index=np.arange(1000, 1000 + len(query)))
    ddf = dd.from_pandas(qframe, npartitions=4)
    for model in (LocalLinearForestRegressor(n_estimators=40, random_state=3),
                  HonestForestRegressor(n_estimators=40, random_state=3),
                  LocalLinearRegressor(bandwidth=0.6)):
        model.fit(frame, y)
        mean = model.predict(ddf)
        assert isinstance(mean, dd.Series)
        got = mean.compute()
        np.testing.assert_array_equal(got.index, qframe.index)
        np.testing.assert_array_equal(got.to_numpy(), model.predict(qframe))
        lo, hi = model.predict_interval(ddf)
        got_lo, got_hi = dd.compute(lo, hi)
        want_lo, want_hi = model.predict_interval(qframe)
        np.testing.assert_array_equal(got_lo.to_numpy(), want_lo)
        np.testing.assert_array_equal(got_hi.to_numpy(), want_hi)
        m, s = model.predict(ddf, return_std=True)
        np.testing.assert_array_equal(s.compute().to_numpy(),
                                      model.predict(qframe, return_std=True)[1])
        assert m.name == "mean" and s.name == "std"


def test_lazy_predict_local_linear_forest_penalty(client, models, query):
    model = models[1]
    Xd = da.from_array(query, chunks=(40, 4))
    np.testing.assert_array_equal(model.predict(Xd, ridge_penalty=3.0).compute(),
                                  model.predict(query, ridge_penalty=3.0))


def test_lazy_predict_bad_input(models, query, data):
    model = models[0]
    with pytest.raises(ValueError, match="X must be a 2-dimensional dask array with 4 columns"):
        model.predict(da.from_array(query[:, :3], chunks=(30, 3)))
    with pytest.raises(TypeError, match="X must be a NumPy-like array, a dask array or a "
                                        "dask DataFrame"):
        model.predict(dd.from_pandas(pd.Series(query[:, 0]), npartitions=2))
    ddf = dd.from_pandas(pd.DataFrame(query, columns=list("abcd")), npartitions=2)
    named = HonestForestRegressor(n_estimators=8, random_state=0).fit(
        pd.DataFrame(data[0], columns=list("wxyz")), data[1])
    with pytest.raises(ValueError, match="columns seen at fit"):
        named.predict(ddf)
    with pytest.raises(ValueError, match="'level' parameter"):
        model.predict_interval(da.from_array(query, chunks=(30, 4)), level=1.5)
    unbagged = HonestForestRegressor(n_estimators=7, random_state=0).fit(*data)
    with pytest.raises(ValueError, match="little bags"):
        unbagged.predict(da.from_array(query, chunks=(30, 4)), return_std=True)


# -- tuning surface and coverage readout ------------------------------------------------
def test_tuning_surface_equals_local(client, data):
    X, y = data
    kw = dict(n_estimators=40, progress=False, random_state=7)
    rates, lams = [0.2, 0.5, 0.35], [0.0, 0.1, 1.0]
    local = tuning_surface(X, y, rates, lams, **kw)
    remote = tuning_surface(X, y, rates, lams, client=client, **kw)
    assert remote.complete and len(remote.frame) == 9
    pd.testing.assert_index_equal(remote.frame.columns, local.frame.columns)
    np.testing.assert_array_equal(remote.frame.to_numpy(), local.frame.to_numpy())
    assert 0 < remote.refit_seconds
    assert _wait_until_no_hedgerow_tasks(client) == []


@pytest.mark.parametrize("truth", [None, softplus_truth], ids=["surrogate", "known"])
def test_coverage_readout_equals_local(client, data, truth):
    X, y = data
    model = LocalLinearForestRegressor(n_estimators=30, random_state=0).fit(X, y)
    kw = dict(truth=truth, reps=3, n_eval=40, progress=False, random_state=11)
    local = coverage_readout(model, **kw)
    remote = coverage_readout(model, client=client, **kw)
    assert remote.reps_done == local.reps_done == 3
    np.testing.assert_array_equal(remote.frame.to_numpy(), local.frame.to_numpy())


class _Interrupting:
    """A progress bar whose first update raises KeyboardInterrupt (a Ctrl-C mid-run)."""

    def __init__(self, *a, **k):
        self.closed = False

    def update(self, n=1):
        raise KeyboardInterrupt

    def close(self):
        self.closed = True


def test_tuning_surface_interrupt_cancels_outstanding(client, data, monkeypatch):
    import hedgerow.diagnostics._tuning as tuning

    X, y = data
    monkeypatch.setattr(tuning, "progress_bar", _Interrupting)
    ts = tuning_surface(X, y, [0.2, 0.3, 0.4, 0.5], [0.0, 1.0], n_estimators=40,
                        random_state=7, client=client)
    assert not ts.complete
    assert len(ts.frame) == 2 and ts.frame["subsample_rate"].nunique() == 1
    assert _wait_until_no_hedgerow_tasks(client) == []


def test_coverage_interrupt_returns_partial(client, data, monkeypatch):
    import hedgerow.diagnostics._coverage as coverage

    X, y = data
    model = LocalLinearForestRegressor(n_estimators=30, random_state=0).fit(X, y)
    monkeypatch.setattr(coverage, "progress_bar", _Interrupting)
    cr = coverage_readout(model, reps=4, n_eval=20, client=client)
    assert cr.reps_done == 1
    f = cr.frame.set_index(["method", "interval", "part"])
    assert f.loc[("honest forest", "clt", "all"), "n"] == 20
    assert _wait_until_no_hedgerow_tasks(client) == []


# -- worker loss ------------------------------------------------------------------------
def _run_in_thread(fn):
    box = {}

    def target():
        try:
            box["value"] = fn()
        except BaseException as exc:  # handed to the test thread
            box["error"] = exc

    thread = threading.Thread(target=target, daemon=True)
    thread.start()
    return thread, box


def _kill_a_busy_worker(client, prefix, ready=lambda: True, timeout=30.0):
    """SIGKILL a worker process while it runs a hedgerow task; return its pid."""
    pids = client.run(os.getpid)
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        busy = [w for w, keys in client.processing().items()
                if any(str(k).startswith(prefix) for k in keys)]
        if busy and ready():
            pid = pids[busy[0]]
            os.kill(pid, signal.SIGKILL)
            return pid
        time.sleep(0.02)
    raise AssertionError("no worker was seen running a task")


@pytest.fixture(scope="module")
def big():
    # large enough that a fit or a surface runs for seconds of real tree growth
    X, y, _ = make_softplus_design(4000, n_features=8, random_state=12)
    return X, y


def test_worker_killed_mid_fit_loses_no_tree(client, big):
    X, y = big
    make = lambda: HonestForestRegressor(n_estimators=256, min_samples_leaf=2,  # noqa: E731
                                         random_state=21)
    seen = []
    thread, box = _run_in_thread(lambda: make().fit(X, y, client=client,
                                                    progress=seen.append))
    pid = _kill_a_busy_worker(client, "hedgerow-chunk-of-trees", ready=lambda: bool(seen))
    assert thread.is_alive() and not box, "the fit ended before the kill"
    local = make().set_params(n_jobs=2).fit(X, y)
    thread.join(120)
    assert not thread.is_alive()
    # inputs are on every worker and tasks are pure: the scheduler re-runs what was lost
    assert "error" not in box, box.get("error")
    remote = box["value"]
    assert remote.forest_.node_start.shape[0] - 1 == 256
    assert seen[-1] == 256 and seen == sorted(seen)
    _assert_same_forest(remote.forest_, local.forest_)
    client.wait_for_workers(2, timeout=60)
    assert pid not in client.run(os.getpid).values()


def test_worker_killed_mid_surface_loses_no_cell(client, big):
    X, y = big
    kw = dict(n_estimators=120, random_state=5, progress=False)
    rates, lams = [0.3, 0.5], [0.0, 0.1, 1.0]
    thread, box = _run_in_thread(
        lambda: tuning_surface(X, y, rates, lams, client=client, **kw))
    pid = _kill_a_busy_worker(client, "hedgerow-subsample-rate")
    assert thread.is_alive() and not box, "the surface ended before the kill"
    local = tuning_surface(X, y, rates, lams, n_jobs=2, **kw)
    thread.join(120)
    assert not thread.is_alive()
    assert "error" not in box, box.get("error")
    remote = box["value"]
    assert remote.complete and len(remote.frame) == 6
    assert not remote.frame.duplicated(["subsample_rate", "ridge_penalty"]).any()
    np.testing.assert_array_equal(remote.frame.to_numpy(), local.frame.to_numpy())
    client.wait_for_workers(2, timeout=60)
    assert pid not in client.run(os.getpid).values()


def test_effect_coverage_readout_equals_local(client):
    # One task per replication on the cluster; each replication draws from its own seed
    # child, so the report is the same to the bit as the serial one.
    from hedgerow import TreatmentEffectForest
    from hedgerow.datasets import load_trial_demo, trial_effect_truth
    from hedgerow.diagnostics import effect_coverage_readout

    X, y, w, _ = load_trial_demo(300, random_state=3)
    model = TreatmentEffectForest(n_estimators=160, random_state=0).fit(X, y, w)
    kw = dict(truth=trial_effect_truth, reps=3, n_eval=30, progress=False, random_state=5)
    local = effect_coverage_readout(model, X, y, w, **kw)
    remote = effect_coverage_readout(model, X, y, w, client=client, **kw)
    assert remote.reps_done == local.reps_done == 3
    pd.testing.assert_frame_equal(remote.frame, local.frame)
