"""The verdict's folds as tasks on a real two-process LocalCluster: the local numbers."""

import os

import numpy as np
import pandas as pd
import pytest

from hedgerow import LocalLinearForestRegressor
from hedgerow.datasets import make_softplus_design
from hedgerow.diagnostics import verdict

if os.environ.get("CI") == "true":
    import dask.distributed  # noqa: F401  (CI installs the extra: fail, never skip)

distributed = pytest.importorskip(
    "distributed", reason="the dask path needs the extra: pip install hedgerow[dask]"
)


@pytest.fixture(scope="module")
def client():
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as c:
        yield c


def test_folds_on_the_cluster_give_the_local_verdict(client):
    X, y, _ = make_softplus_design(240, n_features=3, random_state=2)
    kw = dict(forest=LocalLinearForestRegressor(n_estimators=30, random_state=1),
              smoothers=None, baseline=True, progress=False)
    local = verdict(X, y, **kw)
    remote = verdict(X, y, client=client, **kw)
    pd.testing.assert_frame_equal(remote.errors, local.errors)
    assert remote.conclusion == local.conclusion and remote.folds_done == 5
    assert np.isfinite(remote.errors["local linear forest"]).all()
