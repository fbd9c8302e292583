"""Running hedgerow's heavy work on a dask cluster (the optional ``hedgerow[dask]`` extra).

Everything dask-specific lives here, and dask is imported only when a ``client`` or a
dask collection is actually passed, so the package works without the extra.

Three kinds of work are sent out:

- **Forest growth** (``fit(X, y, client=...)``): the prepared training arrays are
  scattered once to every worker, each task grows one chunk of trees from its slice of
  the sampling plan (rows, roles and per-tree seeds drawn up front on the client), and the
  chunks are gathered in tree order into one forest. Seeds belong to trees, never to
  workers, so the forest equals the local one bit for bit.
- **Refit units** of the tuning surface (one forest per subsample rate) and of the
  coverage readout (one replication, with its own spawned seed): one task each, costliest
  first, progress reported as each finishes; Ctrl-C cancels what is outstanding.
- **Lazy predictions** on a dask array or DataFrame: ``map_blocks`` / ``map_partitions``
  over the fitted model sent once: scattered to every worker when a distributed client is
  the scheduler in use, otherwise wrapped once as a delayed object (one key in the graph,
  shared by all blocks).

Worker loss: every task is a pure function of its inputs, and the scattered inputs are
replicated on every worker (``broadcast=True``), so the scheduler can re-run the tasks of
a lost worker elsewhere. Results are collected per task key and checked to be complete,
each unit exactly once; anything else is a ``RuntimeError``, never a smaller result.
"""

from __future__ import annotations

import sys
import uuid

import numpy as np

__all__ = [
    "check_client",
    "is_dask_collection",
    "lazy_predict",
    "require_dask",
    "run_tasks",
]

_INSTALL = "pip install hedgerow[dask]"


def require_dask(what: str):
    """Return the ``distributed`` module, or raise an ImportError naming the extra."""
    try:
        import dask  # noqa: F401
        import distributed
    except ImportError as err:
        raise ImportError(
            f"{what} needs dask and dask.distributed, which are not installed. "
            f"Install the optional extra with `{_INSTALL}`."
        ) from err
    return distributed


def check_client(client):
    """Return ``client`` (None or a running ``dask.distributed.Client``) after checks."""
    if client is None:
        return None
    distributed = require_dask("The 'client' parameter")
    if not isinstance(client, distributed.Client):
        raise TypeError(
            f"The 'client' parameter must be a dask.distributed.Client or None. "
            f"Got {client!r} instead."
        )
    if client.status != "running":
        raise ValueError(
            f"The 'client' parameter must be a connected dask.distributed.Client. "
            f"Got a client whose status is {client.status!r} instead."
        )
    return client


def is_dask_collection(X) -> bool:
    """Return True if ``X`` is a dask collection (without importing dask otherwise)."""
    if "dask" not in sys.modules:  # nothing can be a dask collection before dask loads
        return False
    import dask

    return dask.is_dask_collection(X)


def total_threads(client) -> int:
    """Return the number of worker threads of the cluster (at least 1)."""
    return max(1, sum(client.nthreads().values()))


# -- supervised task runs -------------------------------------------------------------------
def _is_lost_work(exc) -> bool:
    """Return True for errors that mean the cluster lost a task, not that it failed."""
    import distributed
    from distributed.client import FutureCancelledError

    return isinstance(exc, distributed.KilledWorker | FutureCancelledError) or (
        "lost dependencies" in str(exc)
    )


def _fresh(value):
    """Return an ndarray in memory of its own (others unchanged)."""
    if isinstance(value, np.ndarray):
        return np.array(value, order="C", copy=True)
    return value


def _run_unit(fn, item, *shared):
    # An array received over the network sits at an arbitrary offset of its frame
    # (seen: addresses 17 and 29 mod 64, not even 8-byte aligned), and the results were
    # then not bit-identical: a 2-worker tuning surface differed from the local one by
    # ~1e-6 in RMSE until the inputs were copied. A fresh allocation is laid out as the
    # local path's arrays are.
    return fn(item, *(_fresh(v) for v in shared))


def run_tasks(client, fn, items, *, shared=(), what="task", priorities=None,
              on_result=None) -> dict:
    """Return ``{i: fn(items[i], *shared)}`` computed on the cluster of ``client``.

    ``shared`` objects are scattered once, to every worker. Task ``i`` runs with
    ``priorities[i]`` (higher first), and ``on_result(i, result)`` is called on this
    thread as each task finishes, in any order. A ``KeyboardInterrupt`` cancels the
    outstanding tasks and propagates. An error raised by ``fn`` propagates unchanged; a
    task the cluster lost for good (its worker died too often, or its inputs were lost)
    raises a ``RuntimeError`` naming ``what``. The result holds every ``i`` exactly once.
    """
    from distributed import as_completed

    n = len(items)
    priorities = [0] * n if priorities is None else list(priorities)
    token = uuid.uuid4().hex[:12]
    data = client.scatter(list(shared), broadcast=True, hash=False) if shared else []
    prefix = f"hedgerow-{what.replace(' ', '-')}-{token}"
    # submitted highest priority first as well: the first tasks go to idle workers as
    # soon as they arrive, before the scheduler has seen the priorities of the others
    order = sorted(range(n), key=lambda i: -priorities[i])
    futures = [
        client.submit(_run_unit, fn, items[i], *data, key=f"{prefix}-{i}",
                      priority=int(priorities[i]))
        for i in order
    ]
    index = {f.key: i for i, f in zip(order, futures, strict=True)}
    results: dict = {}
    try:
        for fut in as_completed(futures):
            i = index[fut.key]
            try:
                value = fut.result()
            except Exception as exc:
                if _is_lost_work(exc):
                    raise RuntimeError(
                        f"The dask cluster lost {what} {i} of {n} ({type(exc).__name__}: "
                        f"{exc}); the run is incomplete and no partial result is used. "
                        f"Check the workers' logs (memory limits, killed processes) and "
                        f"run again."
                    ) from exc
                raise
            if i in results:
                raise RuntimeError(f"The dask cluster returned {what} {i} twice.")
            results[i] = value
            if on_result is not None:
                on_result(i, value)
    finally:
        # cancelling finished futures releases their results and the scattered inputs;
        # on an interrupt or error it also stops whatever has not run yet
        client.cancel(futures + list(data))
    missing = sorted(set(range(n)) - set(results))
    if missing:
        raise RuntimeError(
            f"The dask cluster returned {len(results)} of {n} {what}s (missing: "
            f"{missing[:10]}); the run is incomplete and no partial result is used."
        )
    return results


# -- lazy predictions -----------------------------------------------------------------------
def _predict_block(Xb, model, method, n_out, kwargs):
    if Xb.shape[0] == 0:  # dask may hand over empty blocks (filtered rows)
        return np.empty((0,) if n_out == 1 else (0, n_out))
    if isinstance(Xb, np.ndarray):
        Xb = _fresh(Xb)  # see _run_unit: a received block may be misaligned
    with_std = method == "predict_interval" or bool(kwargs.get("return_std"))
    out = getattr(model._block_view(with_std), method)(Xb, **kwargs)
    return out if n_out == 1 else np.column_stack(out)


def _predict_partition(part, model, method, names, kwargs):
    import pandas as pd

    values = _predict_block(part, model, method, len(names), kwargs)
    if len(names) == 1:
        return pd.Series(values, index=part.index, name=names[0])
    return pd.DataFrame(values, index=part.index, columns=list(names))


def _scheduler_client():
    """Return the distributed Client dask would compute with now, or None."""
    if "distributed" not in sys.modules:
        return None
    import dask.base
    from distributed import Client

    owner = getattr(dask.base.get_scheduler(), "__self__", None)
    return owner if isinstance(owner, Client) else None


def _model_handle(model):
    """Return the fitted model as one graph dependency (a Future or a Delayed)."""
    import dask

    client = _scheduler_client()
    if client is not None:
        # on a cluster the model goes to every worker once, outside the graph: inside it,
        # a model of tens of MB would pass through the scheduler with the graph
        return client.scatter(model, broadcast=True, hash=False)
    return dask.delayed(model, name=f"hedgerow-model-{uuid.uuid4().hex[:12]}",
                        traverse=False)


def lazy_predict(model, X, method: str, names: tuple, /, **kwargs):
    """Return ``model.method(X, **kwargs)`` as lazy dask objects, one per name in ``names``.

    ``X`` is a dask array (rows in chunks; columns are merged into one chunk) or a dask
    DataFrame; the result is a dask array or a dask Series per output (a tuple when there
    are two). The model is sent once (``_model_handle``); with a distributed client as the
    scheduler the result is then computed on that client.
    """
    require_dask("Predicting on a dask collection")
    import dask.array as da
    import dask.dataframe as dd

    n_out = len(names)
    d = model.n_features_in_
    handle = _model_handle(model)
    if isinstance(X, da.Array):
        if X.ndim != 2 or X.shape[1] != d:
            raise ValueError(
                f"X must be a 2-dimensional dask array with {d} columns (as at fit). "
                f"Got a dask array of shape {X.shape} instead."
            )
        if X.numblocks[1] > 1:
            X = X.rechunk({1: -1})
        if n_out == 1:
            return X.map_blocks(_predict_block, handle, method, 1, kwargs, drop_axis=1,
                                dtype=np.float64, meta=np.empty((0,)))
        out = X.map_blocks(_predict_block, handle, method, n_out, kwargs,
                           chunks=(X.chunks[0], (n_out,)), dtype=np.float64,
                           meta=np.empty((0, 0)))
        return tuple(out[:, j] for j in range(n_out))
    if isinstance(X, dd.DataFrame):
        names_in = getattr(model, "feature_names_in_", None)
        cols = list(X.columns)
        if names_in is not None and cols != list(names_in):
            raise ValueError(
                f"X must have the columns seen at fit, in the same order: "
                f"{list(names_in)}. Got {cols} instead."
            )
        if len(cols) != d:
            raise ValueError(f"X must have {d} columns (as at fit). Got {len(cols)} instead.")
        import pandas as pd

        if n_out == 1:
            meta = pd.Series(np.empty(0), name=names[0])
        else:
            meta = pd.DataFrame({name: np.empty(0) for name in names})
        out = X.map_partitions(_predict_partition, handle, method, names, kwargs, meta=meta)
        return out if n_out == 1 else tuple(out[name] for name in names)
    raise TypeError(
        f"X must be a NumPy-like array, a dask array or a dask DataFrame. Got "
        f"{type(X).__name__} (a dask collection of another kind) instead."
    )
