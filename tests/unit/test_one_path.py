"""One path per number: the ridge penalty through the estimator's public view, one
out-of-bag summary, no private estimator methods outside ``estimators/``."""

import ast
import pathlib

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import make_friedman1

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow import diagnostics as D
from hedgerow._validation import check_ridge_penalty
from hedgerow.datasets import make_softplus_design

pytestmark = pytest.mark.filterwarnings("ignore:.*have no usable tree:RuntimeWarning")

PACKAGE = pathlib.Path(__file__).resolve().parents[2] / "hedgerow"


def _designs():
    """Three families: softplus (two widths), Friedman 1 and a DataFrame of Friedman 1."""
    X1, y1, _ = make_softplus_design(300, n_features=4, random_state=21)
    X2, y2, _ = make_softplus_design(260, n_features=8, random_state=22)
    X3, y3 = make_friedman1(n_samples=280, n_features=6, noise=1.0, random_state=23)
    X4 = pd.DataFrame(X3, columns=[f"c{j}" for j in range(6)])
    return {"softplus-4": (X1, y1), "softplus-8": (X2, y2), "friedman": (X3, y3),
            "friedman-frame": (X4, pd.Series(y3, name="y"))}


DESIGNS = _designs()


@pytest.mark.parametrize("name", sorted(DESIGNS))
@pytest.mark.parametrize("lam", [0.0, 0.03, 2.5])
def test_penalty_view_is_bit_identical_to_a_refit_on_the_same_trees(name, lam):
    # With the CART split rule the trees do not depend on the penalty, so a refit at
    # ``lam`` with the same seed grows the same trees: the view must give the same bits.
    X, y = DESIGNS[name]
    params = dict(n_estimators=60, random_state=4, split_rule="mean",
                  correction_features=None, min_samples_leaf=4)
    base = LocalLinearForestRegressor(**params).fit(X, y)  # "auto" penalty
    fitted_penalty = base.ridge_penalty_
    refit = LocalLinearForestRegressor(**params, ridge_penalty=lam).fit(X, y)
    view = base.with_ridge_penalty(lam)
    Xq = X.iloc[::7] if isinstance(X, pd.DataFrame) else X[::7]
    np.testing.assert_array_equal(view.forest_.threshold, refit.forest_.threshold)
    np.testing.assert_array_equal(view.predict(Xq), refit.predict(Xq))
    for a, b in zip(view.predict_interval(Xq, 0.9), refit.predict_interval(Xq, 0.9),
                    strict=True):
        np.testing.assert_array_equal(a, b)
    for a, b in zip(view.oob_predict(return_std=True), refit.oob_predict(return_std=True),
                    strict=True):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(view.slope_std(Xq), refit.slope_std(Xq))
    assert view.ridge_penalty_ == refit.ridge_penalty_ == lam
    # the original keeps its own penalty, and so do the view's parameters
    assert base.ridge_penalty_ == fitted_penalty
    assert view.get_params() == base.get_params()


@pytest.mark.parametrize("seed", [0, 1])
def test_penalty_view_matches_the_per_call_argument(seed):
    X, y, _ = make_softplus_design(250, n_features=5, random_state=30 + seed)
    model = LocalLinearForestRegressor(n_estimators=50, random_state=seed,
                                       ridge_penalty=0.1).fit(X, y)
    before = model.predict(X[:20])
    view = model.with_ridge_penalty(7.0)
    np.testing.assert_array_equal(view.predict(X[:20]), model.predict(X[:20], ridge_penalty=7.0))
    np.testing.assert_array_equal(model.predict(X[:20]), before)
    assert model.ridge_penalty_ == 0.1
    assert view.forest_ is model.forest_  # shares the trees
    # None gives the penalty in use
    np.testing.assert_array_equal(model.with_ridge_penalty(None).predict(X[:20]), before)


@pytest.mark.parametrize("seed", [0, 1])
def test_local_readout_is_one_solve_with_the_separate_calls_numbers(seed):
    X, y, _ = make_softplus_design(250, n_features=5, random_state=40 + seed)
    model = LocalLinearForestRegressor(n_estimators=60, random_state=seed,
                                       correction_features=[0, 2]).fit(X, y)
    fit, std, slope_se = model.local_readout(X[:9], ridge_penalty=0.4)
    np.testing.assert_array_equal(fit.intercept, model.predict(X[:9], ridge_penalty=0.4))
    np.testing.assert_array_equal(std, model.predict(X[:9], True, ridge_penalty=0.4)[1])
    np.testing.assert_array_equal(slope_se, model.slope_std(X[:9], ridge_penalty=0.4))
    no_bags = LocalLinearForestRegressor(n_estimators=20, trees_per_bag=1,
                                         random_state=seed).fit(X, y)
    fit, std, slope_se = no_bags.local_readout(X[:3])
    assert std is None and slope_se is None and np.all(np.isfinite(fit.intercept))


@pytest.mark.parametrize("bad", [-1.0, np.nan, np.inf, "auto", "0.1", True, None, [0.1]])
def test_one_penalty_message_everywhere(bad):
    X, y, _ = make_softplus_design(120, n_features=3, random_state=5)
    model = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)
    expected = "The 'ridge_penalty' parameter must be a finite float >= 0"
    calls = [lambda: check_ridge_penalty(bad), lambda: model.predict(X, ridge_penalty=bad),
             lambda: model.with_ridge_penalty(bad), lambda: model.ridge_path([bad]),
             lambda: model.oob_predict(ridge_penalty=bad)]
    if bad is None:  # None means "the penalty in use" for the per-call argument
        calls = calls[:1]
    for call in calls:
        with pytest.raises(ValueError, match=expected):
            call()
    if not isinstance(bad, str) and bad is not None:
        with pytest.raises(ValueError, match="ridge_penalty"):
            LocalLinearForestRegressor(n_estimators=20, ridge_penalty=bad).fit(X, y)


@pytest.mark.parametrize("trees_per_bag", [1, 5])
def test_one_oob_summary_serves_the_tuning_surface(trees_per_bag):
    X, y, _ = make_softplus_design(200, n_features=4, random_state=8)
    params = dict(n_estimators=40, trees_per_bag=trees_per_bag, min_samples_leaf=5)
    surface = D.tuning_surface(X, y, [0.4], [0.0, 1.0], progress=False, **params)
    model = LocalLinearForestRegressor(subsample_rate=0.4, random_state=0,
                                       **params).fit(X, y)
    for _, cell in surface.frame.iterrows():
        s = D.oob_summary(model, cell["ridge_penalty"])
        assert s["oob_rmse"] == cell["oob_rmse"] and s["n_rows"] == cell["n_rows"]
        assert s["ridge_penalty"] == cell["ridge_penalty"]
        if trees_per_bag == 1:
            assert np.isnan(s["mean_width"]) and np.isnan(cell["mean_width"])
        else:
            assert s["mean_width"] == cell["mean_width"] > 0


def test_oob_summary_of_an_honest_forest_and_its_refusals():
    X, y, _ = make_softplus_design(200, n_features=4, random_state=9)
    hf = HonestForestRegressor(n_estimators=40, random_state=0).fit(X, y)
    s = D.oob_summary(hf)
    mean, std = hf.oob_predict(return_std=True)
    ok = np.isfinite(mean)
    assert s["oob_rmse"] == pytest.approx(np.sqrt(np.mean((mean[ok] - y[ok]) ** 2)),
                                          rel=1e-12)
    assert s["ridge_penalty"] is None and s["mean_width"] > 0
    with pytest.raises(ValueError, match="'ridge_penalty' parameter applies"):
        D.oob_summary(hf, 0.5)
    with pytest.raises(ValueError, match="'level' parameter"):
        D.oob_summary(hf, level=1.5)


def test_oob_summary_width_is_the_default_interval_out_of_bag():
    # the tuning surface and the headline read the interval predict_interval gives by
    # default, not the CLT interval; "clt" stays available by name
    from hedgerow.estimators._forest import DEFAULT_INTERVAL

    X, y, _ = make_softplus_design(300, n_features=3, random_state=4)
    for model in (LocalLinearForestRegressor(n_estimators=100, random_state=0).fit(X, y),
                  HonestForestRegressor(n_estimators=100, random_state=0).fit(X, y)):
        s = D.oob_summary(model)
        assert s["interval"] == DEFAULT_INTERVAL == "bias_corrected"
        lo, hi = model.oob_interval_parts().interval(0.95)
        assert s["mean_width"] == float(np.nanmean(hi - lo))
        clt = D.oob_summary(model, method="clt")
        mean, std = model.oob_predict(return_std=True)
        assert clt["mean_width"] == pytest.approx(2 * 1.959963985 * np.nanmean(std),
                                                  rel=1e-8)
        assert s["oob_rmse"] == clt["oob_rmse"]
        # the default interval is the bias-corrected one at the rows out of bag: its
        # centre is the local quadratic's, away from the prediction where a column bends
        if model.bending_columns().size:
            assert not np.allclose(model.oob_interval_parts().centre, mean)
        with pytest.raises(ValueError, match="'method' parameter must be one of"):
            model.oob_interval_parts("bias_bound")


def _private_estimator_methods() -> set:
    names = set()
    for path in (PACKAGE / "estimators").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ClassDef):
                for item in node.body:
                    if isinstance(item, ast.FunctionDef) and item.name.startswith("_") \
                            and not item.name.startswith("__"):
                        names.add(item.name)
    return names


#: Modules outside estimators/ allowed a private estimator call, with the reason.
PRIVATE_CALL_EXEMPT = {
    # the dask helper the estimators themselves call for lazy predictions: each block
    # of a lazy prediction runs on the estimator's own per-block copy
    "_distributed.py": {"_block_view"},
}


def test_no_module_outside_estimators_calls_a_private_estimator_method():
    private = _private_estimator_methods()
    assert {"_penalty", "_query_state", "_oob_state"} <= private  # the scan sees them
    found = []
    for path in PACKAGE.rglob("*.py"):
        rel = path.relative_to(PACKAGE)
        if rel.parts[0] == "estimators":
            continue
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
                attr, owner = node.func.attr, node.func.value
                if attr not in private or (isinstance(owner, ast.Name)
                                           and owner.id in ("self", "cls")):
                    continue
                if attr in PRIVATE_CALL_EXEMPT.get(str(rel), set()):
                    continue
                found.append(f"{rel}:{node.lineno} calls .{attr}()")
            if isinstance(node, ast.Assign):
                for target in node.targets:
                    # a fitted attribute (trailing underscore) set on another object
                    if isinstance(target, ast.Attribute) and target.attr.endswith("_") \
                            and not target.attr.startswith("_") \
                            and not (isinstance(target.value, ast.Name)
                                     and target.value.id == "self"):
                        found.append(f"{rel}:{node.lineno} sets .{target.attr}")
    assert found == []


def _named_fits(seed):
    X, y = make_friedman1(n_samples=220, n_features=5, noise=1.0, random_state=50 + seed)
    Xf = pd.DataFrame(X, columns=[f"col_{j}" for j in range(5)])
    from hedgerow.estimators import NadarayaWatsonRegressor

    llf = LocalLinearForestRegressor(n_estimators=60, random_state=seed,
                                     correction_features=[0, 3]).fit(Xf, y)
    nw = NadarayaWatsonRegressor(bandwidth=0.3).fit(Xf, y)
    return Xf, llf, nw


@pytest.mark.parametrize("seed", [0, 1])
def test_probe_point_is_checked_once_and_solved_once(seed, monkeypatch):
    import warnings

    import hedgerow._validation as V
    import hedgerow.estimators._local_linear_forest as L

    Xf, llf, nw = _named_fits(seed)
    x = Xf.iloc[7].to_numpy()
    expected = {"fit": llf.local_fit(Xf.iloc[[7]]),
                "std": llf.predict(Xf.iloc[[7]], return_std=True)[1][0],
                "slope_se": llf.slope_std(Xf.iloc[[7]])[0],
                "nw": nw.predict(Xf.iloc[[7]], return_std=True),
                "interval": llf.predict_interval(Xf.iloc[[7]])}
    general, solves = [], []
    real_validate, real_solve = V._validate, L.solve_local
    monkeypatch.setattr(V, "_validate", lambda *a, **k: general.append(1) or
                        real_validate(*a, **k))
    monkeypatch.setattr(L, "solve_local", lambda *a, **k: solves.append(1) or
                        real_solve(*a, **k))
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no feature-name warning for the plain point
        report = D.probe(llf, x, compare=[nw])
    assert general == []  # the point was never converted or checked the general way
    assert len(solves) == 1  # one local solve gives the forest's whole readout
    m = report.method("local linear forest")
    assert m.prediction == expected["fit"].intercept[0]
    np.testing.assert_array_equal(m.slopes, expected["fit"].slopes[0])
    np.testing.assert_array_equal(m.slope_se, expected["slope_se"])
    # the readout's interval is the forest's default (bias-corrected) interval
    assert m.lower == expected["interval"][0][0] and m.upper == expected["interval"][1][0]
    k = report.method("Nadaraya-Watson")
    assert k.prediction == expected["nw"][0][0]


def test_checked_rows_are_refused_by_other_columns_and_bad_values():
    from hedgerow._validation import checked_rows, fitted_columns

    Xf, llf, _ = _named_fits(0)
    q = checked_rows(Xf.to_numpy()[:3], llf)
    assert q.columns == fitted_columns(llf) == (5, tuple(Xf.columns))
    unnamed = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(
        Xf.to_numpy(), llf.y_train_)
    # rows checked for named columns are an ordinary array to a model without names
    np.testing.assert_array_equal(unnamed.predict(q), unnamed.predict(np.asarray(q)))
    with pytest.warns(UserWarning, match="feature names"):
        llf.predict(checked_rows(Xf.to_numpy()[:3], unnamed))  # checked for other columns
    with pytest.raises(ValueError, match="'x' parameter must have 5 values per row"):
        checked_rows(np.zeros((2, 4)), llf, "x")
    with pytest.raises(ValueError, match="'x' parameter must be finite"):
        checked_rows([[0, 1, 2, 3, np.nan]], llf, "x")
