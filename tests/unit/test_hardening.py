"""Every entry point checks its input: bad input gets an error naming the parameter.

Each case used to fail with an internal error (AttributeError, IndexError, a numpy or
pandas message) or succeed silently with a wrong answer.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.exceptions import NotFittedError
from sklearn.linear_model import LinearRegression

import hedgerow.diagnostics as D
from hedgerow import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    NadarayaWatsonRegressor,
)
from hedgerow.datasets import make_softplus_design


@pytest.fixture(scope="module")
def data():
    X, y, _ = make_softplus_design(n_samples=120, n_features=3, random_state=0)
    return X, y


@pytest.fixture(scope="module")
def llf(data):
    X, y = data
    return LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)


@pytest.fixture(scope="module")
def forest(data):
    X, y = data
    return HonestForestRegressor(n_estimators=20, random_state=0).fit(X, y)


@pytest.fixture(scope="module")
def smoother(data):
    X, y = data
    return NadarayaWatsonRegressor(bandwidth=0.5).fit(X, y)


# -- diagnostics: models -------------------------------------------------------------------
@pytest.mark.parametrize("call", [
    lambda m, X: D.probe(m, X[0]),
    lambda m, X: D.slices(m, X[0], 0, [0.1, 0.5]),
    lambda m, X: D.edges(m),
    lambda m, X: D.coverage_readout(m, reps=1, progress=False),
], ids=["probe", "slices", "edges", "coverage"])
def test_unfitted_model_is_named(data, call):
    X, _ = data
    with pytest.raises(NotFittedError, match=r"'model(s)?' parameter must be a fitted .*"
                                             r"not fitted yet"):
        call(LocalLinearForestRegressor(), X)


@pytest.mark.parametrize("call", [
    lambda m, X: D.probe(m, X[0]),
    lambda m, X: D.coverage_readout(m, reps=1, progress=False),
], ids=["probe", "coverage"])
def test_wrong_estimator_type_is_named(data, call):
    X, y = data
    wrong = LinearRegression().fit(X, y)
    with pytest.raises(TypeError, match=r"'model' parameter must be a fitted "
                                        r".*Got LinearRegression instead"):
        call(wrong, X)


def test_estimator_class_instead_of_instance(data):
    X, _ = data
    with pytest.raises(TypeError, match="instance, not a class"):
        D.probe(LocalLinearForestRegressor, X[0])


def test_probe_compare_checks(data, llf, forest):
    X, y = data
    with pytest.raises(NotFittedError, match=r"'compare\[0\]'"):
        D.probe(llf, X[0], compare=[NadarayaWatsonRegressor()])
    with pytest.raises(TypeError, match=r"'compare\[0\]'.*Got LinearRegression"):
        D.probe(llf, X[0], compare=[LinearRegression().fit(X, y)])
    other = NadarayaWatsonRegressor(bandwidth=0.5).fit(X[:, :2], y)
    with pytest.raises(ValueError, match="'compare' parameter must hold models fitted on "
                                         "the same columns"):
        D.probe(llf, X[0], compare=[other])
    # a single smoother (not in a list) is accepted
    report = D.probe(forest, X[0], compare=NadarayaWatsonRegressor(bandwidth=0.5).fit(X, y))
    assert len(report.methods) == 2


@pytest.mark.parametrize("empty", [[], (), {}])
def test_empty_model_list(data, empty):
    X, _ = data
    with pytest.raises(ValueError, match="'models' parameter must hold at least one"):
        D.edges(empty)
    with pytest.raises(ValueError, match="'models' parameter must hold at least one"):
        D.slices(empty, X[0], 0, [0.2])


def test_models_not_a_collection(data):
    X, _ = data
    with pytest.raises(TypeError, match="'models' parameter must be a fitted model"):
        D.edges("forest")


# -- diagnostics: arrays -------------------------------------------------------------------
def test_edges_mis_shaped_rows(data, llf):
    X, y = data
    with pytest.raises(ValueError, match=r"'X' parameter must have shape \(120, 3\)"):
        D.edges(llf, X[:, :2], y)
    with pytest.raises(ValueError, match=r"'X' parameter must have shape \(120, 3\)"):
        D.edges(llf, X[:50], y[:50])
    with pytest.raises(ValueError, match="'y' parameter must hold 120 finite values"):
        D.edges(llf, X, y[:-1])
    with pytest.raises(TypeError, match="'y' parameter must hold numbers"):
        D.edges(llf, X, np.array(["a"] * 120, dtype=object))


def test_slices_background_and_grid(data, llf):
    X, _ = data
    with pytest.raises(ValueError, match=r"'background' parameter must have shape "
                                         r"\(n, 3\).*Got shape \(10, 2\)"):
        D.slices(llf, X[0], 0, [0.2, 0.4], average=True, background=X[:10, :2])
    with pytest.raises(ValueError, match=r"'background' parameter must have shape"):
        D.slices(llf, X[0], 0, [0.2, 0.4], average=True, background=X[0])
    with pytest.raises(TypeError, match="'grid' parameter must hold numbers. Got the value "
                                        "'low'"):
        D.slices(llf, X[0], 0, ["low", "high"])
    with pytest.raises(TypeError, match="'grid' parameter must hold numbers"):
        D.slices(llf, X[0], 0, "0.1")
    with pytest.raises(ValueError, match="'level' parameter"):
        D.slices(llf, X[0], 0, [0.1], level=95)
    ok = D.slices(llf, X[0], 0, [0.2, 0.4], average=True, background=X[:10])
    assert ok.frame.shape[0] == 2  # one model, two grid values


def test_tuning_surface_string_grids(data):
    X, y = data
    with pytest.raises(TypeError, match="'subsample_rates' parameter must hold numbers"):
        D.tuning_surface(X, y, ["0.2", "0.4"], [0.1], progress=False)
    with pytest.raises(TypeError, match="'ridge_penalties' parameter must hold numbers"):
        D.tuning_surface(X, y, [0.2], ["auto"], progress=False)


@pytest.mark.parametrize("n_eval", [0, -3, 2.5, True, "10"])
def test_coverage_n_eval_must_be_positive_integer(llf, n_eval):
    with pytest.raises(ValueError, match="'n_eval' parameter must be an integer >= 1"):
        D.coverage_readout(llf, reps=1, n_eval=n_eval, progress=False)


def test_edges_on_a_frame_fit_warns_nothing(data):
    X, y = data
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    llf = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(frame, y)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        profile = D.edges(llf)
        D.slices(llf, frame.iloc[0], "a", [0.2, 0.5], average=True)
    assert profile.residuals.shape == (120, 1)


# -- estimators ----------------------------------------------------------------------------
def test_auto_penalty_needs_out_of_bag_rows(data, llf):
    X, y = data
    before = llf.predict(X[:5])
    model = LocalLinearForestRegressor(n_estimators=10, subsample_rate=1.0, trees_per_bag=1)
    with pytest.raises(ValueError, match="'ridge_penalty' parameter 'auto' .*no row is out "
                                         "of bag.*subsample_rate < 1"):
        model.fit(X, y)
    assert not hasattr(model, "forest_")
    # a numeric penalty needs no out-of-bag rows
    LocalLinearForestRegressor(n_estimators=10, subsample_rate=1.0, trees_per_bag=1,
                               ridge_penalty=0.1).fit(X, y)
    np.testing.assert_array_equal(llf.predict(X[:5]), before)


# -- input data ----------------------------------------------------------------------------
@pytest.mark.parametrize("make", [
    lambda n: pd.date_range("2024-01-01", periods=n, freq="D"),
    lambda n: pd.date_range("2024-01-01", periods=n, freq="h", tz="UTC"),
    lambda n: pd.to_timedelta(np.arange(n), unit="s"),
    lambda n: pd.period_range("2024-01", periods=n, freq="M"),
], ids=["datetime", "datetime-tz", "timedelta", "period"])
@pytest.mark.parametrize("cls", [HonestForestRegressor, LocalLinearForestRegressor,
                                 NadarayaWatsonRegressor])
def test_date_columns_are_named(data, make, cls):
    X, y = data
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    frame["when"] = make(len(frame))
    with pytest.raises(ValueError, match="Column 'when' of X must hold numbers. Got dates"):
        cls().fit(frame, y)


def test_date_column_at_predict_is_named(data, forest):
    X, _ = data
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    fitted = HonestForestRegressor(n_estimators=10, random_state=0).fit(frame, data[1])
    frame["b"] = pd.date_range("2024-01-01", periods=len(frame), freq="D")
    with pytest.raises(ValueError, match="Column 'b' of X must hold numbers. Got dates"):
        fitted.predict(frame)


# -- snapshots -----------------------------------------------------------------------------
def test_snapshot_of_other_rows_is_refused(data, llf):
    from hedgerow.snapshot import Snapshot, SnapshotDataMismatch

    X, y = data
    with pytest.raises(SnapshotDataMismatch, match="fitted on 120 rows, got 50 rows"):
        Snapshot.from_model(llf, X[:50], y[:50])
    y2 = y.copy()
    y2[3] += 1.0
    with pytest.raises(SnapshotDataMismatch, match="120 rows with other values"):
        Snapshot.from_model(llf, X, y2)
    # the training rows as a frame are the same rows
    snap = Snapshot.from_model(llf, pd.DataFrame(X), pd.Series(y))
    assert snap.data.n_rows == 120


def test_deeply_nested_snapshot_is_a_snapshot_error(tmp_path):
    from hedgerow.snapshot import Snapshot, SnapshotError

    path = tmp_path / "deep.json"
    path.write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    with pytest.raises(SnapshotError, match="nested too deeply"):
        Snapshot.load(path)
    nested = []
    for _ in range(100_000):
        nested = [nested]
    with pytest.raises(SnapshotError):
        Snapshot.from_dict({"format": nested})


def test_snapshot_save_to_unwritable_place_names_the_path(data, llf, tmp_path):
    import os

    from hedgerow.snapshot import Snapshot

    if os.geteuid() == 0:
        pytest.skip("root can write into a read-only folder")
    X, y = data
    snap = Snapshot.from_model(llf, X, y)
    locked = tmp_path / "locked"
    locked.mkdir()
    target = locked / "review.json"
    os.chmod(locked, 0o500)
    try:
        with pytest.raises(PermissionError) as info:
            snap.save(target)
    finally:
        os.chmod(locked, 0o700)
    assert str(target) in str(info.value)
    assert ".tmp" not in str(info.value)
    assert list(locked.iterdir()) == []


def test_snapshot_save_failure_names_the_given_path_not_the_temp_file(data, llf, tmp_path,
                                                                      monkeypatch):
    # the same failure injected (works as root too): the OS names the temporary file
    import hedgerow._atomic as atomic_module
    from hedgerow.snapshot import Snapshot

    X, y = data
    snap = Snapshot.from_model(llf, X, y)
    target = tmp_path / "review.json"
    snap.save(target)
    before = target.read_bytes()

    def refuse(prefix, suffix, dir):
        raise PermissionError(13, "Permission denied", f"{dir}/{prefix}x1y2{suffix}")

    # the temporary file is made by the shared atomic writer
    monkeypatch.setattr(atomic_module.tempfile, "mkstemp", refuse)
    with pytest.raises(PermissionError) as info:
        snap.save(target)
    assert str(target) in str(info.value) and "Permission denied" in str(info.value)
    assert ".tmp" not in str(info.value)
    assert target.read_bytes() == before


# -- command line --------------------------------------------------------------------------
def _csv(tmp_path, text):
    path = tmp_path / "t.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_cli_duplicated_header_is_caught_before_pandas_renames_it(tmp_path, capsys):
    from hedgerow import cli

    rows = "\n".join(f"{i},{i * 0.5},{i % 7}" for i in range(60))
    path = _csv(tmp_path, "u,u,y\n" + rows + "\n")
    code = cli.main(["report", str(path), "--target", "y", "--quiet",
                     "--out", str(tmp_path / "r.html")])
    err = capsys.readouterr().err
    assert code == cli.EXIT_USAGE
    assert "repeated column names: 'u'" in err
    # "u" and a genuine "u.1" are different names
    path = _csv(tmp_path, "u,u.1,y\n" + rows + "\n")
    X, _ = cli.read_table(path, "y")
    assert list(X.columns) == ["u", "u.1"]


def test_cli_constant_target_exits_non_zero(tmp_path, capsys):
    from hedgerow import cli

    rows = "\n".join(f"{i},{(i * 37) % 11},4.5" for i in range(120))
    path = _csv(tmp_path, "a,b,y\n" + rows + "\n")
    out = tmp_path / "r.html"
    code = cli.main(["report", str(path), "--target", "y", "--quiet", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == cli.EXIT_USAGE
    assert "target column 'y' is constant" in err and "nothing to smooth" in err
    assert not out.exists()


# -- nothing downgrades silently -----------------------------------------------------------
@pytest.mark.parametrize("cls", [HonestForestRegressor, LocalLinearForestRegressor])
@pytest.mark.parametrize("n,seed", [(91, 0), (150, 1)])
def test_oob_rows_without_standard_error_are_counted_and_explained(cls, n, seed):
    X, y, _ = make_softplus_design(n, 3, random_state=seed)
    model = cls(n_estimators=40, random_state=seed).fit(X, y)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        mean, std = model.oob_predict(return_std=True)
    lost = np.isfinite(mean) & np.isnan(std)
    assert lost.any()  # 40 trees in 2 bags: many rows are out of bag in one bag only
    # the explanation given is the real one: those rows have fewer than two bags holding
    # two or more of their out-of-bag trees
    _, usable = model._oob_parts()
    g = model.trees_per_bag_
    per_bag = usable.reshape(n, -1, g).sum(axis=2)
    few_bags = (per_bag >= 2).sum(axis=1) < 2
    np.testing.assert_array_equal(lost, few_bags & np.isfinite(mean))
    texts = [str(w.message) for w in caught]
    assert any(t.startswith(f"{int(lost.sum())} of {n} training rows (out-of-bag) have a "
                            f"prediction but no standard error") for t in texts)
    no_tree = int(np.isnan(mean).sum())
    if no_tree:
        assert any(t.startswith(f"{no_tree} of {n} training rows (out-of-bag) have no usable")
                   for t in texts)


@pytest.mark.parametrize("d,n", [(8, 30), (6, 25)])
def test_local_linear_fallback_is_warned_once_with_count_and_flags(d, n):
    from hedgerow import LocalLinearRegressor
    from hedgerow.local import LocalConstantFallbackWarning

    rng = np.random.default_rng(d)
    X = rng.uniform(size=(n, d))
    y = X[:, 0] + 0.1 * rng.normal(size=n)
    ll = LocalLinearRegressor(bandwidth=0.3).fit(X, y)
    nw = NadarayaWatsonRegressor(bandwidth=0.3).fit(X, y)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pred = ll.predict(X[:10])
    fallback = ll.local_fit(X[:10]).fallback
    mine = [w for w in caught if issubclass(w.category, LocalConstantFallbackWarning)]
    assert len(mine) == 1  # once per call, not once per query
    assert str(mine[0].message).startswith(
        f"{int(fallback.sum())} of 10 queries of the LocalLinearRegressor got the local "
        f"constant")
    assert f"a line in {d} column(s)" in str(mine[0].message)
    # the flagged queries are exactly those equal to the Nadaraya-Watson fit
    assert fallback.any()
    np.testing.assert_allclose(pred[fallback], nw.predict(X[:10])[fallback], rtol=1e-12)


def test_no_fallback_warning_when_the_line_is_supported():
    from hedgerow import LocalLinearRegressor
    from hedgerow.local import LocalConstantFallbackWarning

    rng = np.random.default_rng(0)
    X = rng.uniform(size=(200, 2))
    y = X[:, 0] + 0.1 * rng.normal(size=200)
    ll = LocalLinearRegressor(bandwidth=0.5).fit(X, y)
    with warnings.catch_warnings():
        warnings.simplefilter("error", LocalConstantFallbackWarning)
        ll.predict(X[:20])
    assert not ll.local_fit(X[:20]).fallback.any()


def test_coverage_readout_on_a_frame_fit_warns_nothing(data):
    X, y = data
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    llf = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(frame, y)
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)  # "X does not have valid feature names"
        report = D.coverage_readout(llf, reps=1, n_eval=30, progress=False)
    assert 0.0 <= report.coverage("local linear forest") <= 1.0


def test_other_regressors_in_slices_and_edges(data, llf):
    # a scikit-learn regressor without return_std gets predictions and NaN intervals in
    # slices; edges names what it lacks (held-out predictions)
    X, y = data
    lin = LinearRegression().fit(X, y)
    report = D.slices({"forest": llf, "linear": lin}, X[0], 0, [0.2, 0.6])
    part = report.method("linear")
    np.testing.assert_allclose(part["prediction"], lin.predict(
        np.column_stack([[0.2, 0.6], np.repeat(X[0:1, 1:], 2, axis=0)])))
    assert part["lower"].isna().all()
    with pytest.raises(TypeError, match="must offer held-out predictions"):
        D.edges([llf, lin])


def test_text_target_series_is_named_not_an_internal_error():
    # pandas' string dtype: a Series' .dtypes is one dtype without .items()
    from hedgerow import HonestForestRegressor

    X = np.random.default_rng(0).uniform(size=(30, 2))
    y = pd.Series([f"r{i}" for i in range(30)], dtype="string", name="t")
    with pytest.raises(ValueError, match="y must hold numbers only"):
        HonestForestRegressor(n_estimators=4).fit(X, y)
