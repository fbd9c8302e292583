"""The compact forest storage gives the same bits as the per-tree layout it replaced.

tests/data/make_storage_baseline.py recorded, with the code before the change, seeded
predictions, standard errors, intervals and out-of-bag values of both forests on four
sampling set-ups (bags drawing their whole half-sample, bags drawing part of it,
single-tree bags, classical trees), and pickled a tiny forest in the old layout.
"""

import importlib.util
import pickle
import warnings
from pathlib import Path

import numpy as np
import pytest

DATA = Path(__file__).resolve().parents[1] / "data"


def _maker():
    spec = importlib.util.spec_from_file_location("make_storage_baseline",
                                                  DATA / "make_storage_baseline.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="module")
def recorded():
    return np.load(DATA / "storage_baseline.npz")


def test_outputs_bit_identical_to_recorded(recorded):
    now = _maker().outputs()
    expected = sorted(k for k in recorded.files if not k.startswith("layout1_"))
    assert sorted(now) == expected
    for name in expected:
        # == to the bit (NaN where the old code gave NaN)
        np.testing.assert_array_equal(now[name], recorded[name], err_msg=name)


def test_old_layout_pickle_loads_and_predicts_as_before(recorded):
    with open(DATA / "forest_layout1.pkl", "rb") as fh, warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scikit-learn's version note, NaN out-of-bag rows
        est = pickle.load(fh)
        Xq = recorded["layout1_queries"]
        mean, std = est.predict(Xq, return_std=True)
        oob = est.oob_predict()
    np.testing.assert_array_equal(mean, recorded["layout1_predict"])
    np.testing.assert_array_equal(std, recorded["layout1_std"])
    np.testing.assert_array_equal(oob, recorded["layout1_oob"])
    n = est.X_train_.shape[0]
    np.testing.assert_array_equal(est.forest_.inbag(np.arange(n)), recorded["layout1_inbag"])
    # converted to the compact layout on load: one row set per bag
    assert est.forest_.bag_ptr.shape[0] - 1 == est.forest_.n_trees // est.trees_per_bag_


def test_out_of_bag_blocks_equal_the_whole_matrix(monkeypatch):
    # The out-of-bag mean and little-bags standard error computed over blocks of rows
    # (the default when the out-of-bag leaves are not cached) are the same bits as over
    # the whole n x trees matrix: each row's numbers depend on its own trees only.
    import hedgerow.estimators._forest as F
    from hedgerow import HonestForestRegressor

    rng = np.random.default_rng(41)
    X = rng.uniform(size=(900, 4))
    y = np.sin(4 * X[:, 0]) + X[:, 1] + rng.normal(scale=0.3, size=900)
    monkeypatch.setattr(F, "OOB_BLOCK_ROWS", 97)  # blocks of uneven size, a short last one
    blocked = HonestForestRegressor(n_estimators=256, random_state=2).fit(X, y)
    mean_b, std_b = blocked.oob_predict(return_std=True)
    plain_b = blocked.oob_predict()
    assert "oob parts" not in blocked._fit_cache  # the blocks did not build the matrix
    whole = HonestForestRegressor(n_estimators=256, random_state=2).fit(X, y)
    whole._oob_parts()  # cached: the whole-matrix path
    mean_w, std_w = whole.oob_predict(return_std=True)
    assert np.array_equal(mean_b, mean_w, equal_nan=True)
    assert np.array_equal(std_b, std_w, equal_nan=True)
    assert np.array_equal(plain_b, whole.oob_predict(), equal_nan=True)
    assert np.isfinite(std_b).mean() > 0.9  # the comparison is not between NaNs


def test_local_linear_out_of_bag_std_in_blocks_equals_the_whole_matrix(monkeypatch):
    # The local linear forest's out-of-bag standard errors over row blocks (its default
    # without cached out-of-bag leaves) equal those from the whole n x trees matrices.
    import hedgerow.estimators._forest as F
    from hedgerow import LocalLinearForestRegressor

    rng = np.random.default_rng(43)
    X = rng.uniform(size=(800, 3))
    y = 2 * X[:, 0] + np.sin(3 * X[:, 1]) + rng.normal(scale=0.3, size=800)
    monkeypatch.setattr(F, "OOB_BLOCK_ROWS", 131)
    kw = dict(n_estimators=256, random_state=6)
    blocked = LocalLinearForestRegressor(**kw).fit(X, y)
    mean_b, std_b = blocked.oob_predict(return_std=True)
    assert "oob parts" not in blocked._fit_cache
    whole = LocalLinearForestRegressor(**kw).fit(X, y)
    whole._oob_parts()
    mean_w, std_w = whole.oob_predict(return_std=True)
    assert np.array_equal(mean_b, mean_w, equal_nan=True)
    assert np.array_equal(std_b, std_w, equal_nan=True)
    assert np.isfinite(std_b).mean() > 0.9


@pytest.mark.parametrize("kind", ["honest", "local linear"])
def test_out_of_bag_interval_parts_in_blocks_equal_the_whole_matrix(kind, monkeypatch):
    # The bias-corrected out-of-bag interval parts (centre, std, degrees of freedom) over
    # row blocks equal those from the whole n x trees matrices, for both forests.
    import hedgerow.estimators._forest as F
    from hedgerow import HonestForestRegressor, LocalLinearForestRegressor

    cls = HonestForestRegressor if kind == "honest" else LocalLinearForestRegressor
    rng = np.random.default_rng(47)
    X = rng.uniform(size=(700, 3))
    y = 2 * X[:, 0] + np.sin(3 * X[:, 1]) + rng.normal(scale=0.3, size=700)
    monkeypatch.setattr(F, "OOB_BLOCK_ROWS", 113)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        blocked = cls(n_estimators=256, random_state=9).fit(X, y)
        pb = blocked.oob_interval_parts()
        assert "oob parts" not in blocked._fit_cache
        whole = cls(n_estimators=256, random_state=9).fit(X, y)
        whole._oob_parts()
        pw = whole.oob_interval_parts()
    for field in ("centre", "std", "df"):
        assert np.array_equal(getattr(pb, field), getattr(pw, field), equal_nan=True), field
    assert np.isfinite(pb.std).mean() > 0.9
