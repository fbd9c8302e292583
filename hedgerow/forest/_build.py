"""Subsampling plan, parallel growth of many trees, assembly into ``ForestArrays``.

Sampling (little bags): trees come in bags of ``trees_per_bag``. With bags of two or more,
each bag draws a half-sample (``n // 2`` rows without replacement) and each of its trees
draws ``subsample_size`` rows without replacement from that half-sample; with bags of one,
each tree draws directly from all rows. An honest tree splits its rows at random into a
grow part (``s // 2`` rows, places the splits) and a fill part (the rest, fills leaves).

Every random draw is made up front from per-bag generators spawned from one seed, and each
tree's feature draws use a seed of its own, so a forest depends on ``random_state`` only,
never on ``n_jobs`` or on the order in which threads finish.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor, wait
from dataclasses import dataclass

import numpy as np

from hedgerow.forest._grow import RULE_MEAN, grow_tree, presort
from hedgerow.forest._storage import ForestArrays

__all__ = ["TreePlan", "check_chunks", "grow_chunk", "grow_forest", "plan_samples",
           "subsample_size"]


@dataclass(frozen=True)
class TreePlan:
    """The rows, roles and seed of every tree of a forest, drawn before any growth."""

    sample_rows: list  # per tree: int64 global row ids
    grow_masks: list  # per tree: bool, rows that place splits
    fill_masks: list  # per tree: bool, rows that fill leaves
    seeds: np.ndarray  # per tree: seed of its feature draws
    trees_per_bag: int


def subsample_size(n: int, subsample_rate: float, trees_per_bag: int) -> int:
    """Return the number of rows one tree draws (from the half-sample when bagged)."""
    pool = n // 2 if trees_per_bag >= 2 else n
    return int(min(pool, max(1, np.floor(subsample_rate * n + 1e-9))))


def plan_samples(
    n: int,
    n_estimators: int,
    trees_per_bag: int,
    subsample_rate: float,
    honest: bool,
    seed: int,
) -> TreePlan:
    """Return the sampling plan of a forest (see the module docstring)."""
    s = subsample_size(n, subsample_rate, trees_per_bag)
    n_bags = n_estimators // trees_per_bag
    bag_seqs = np.random.SeedSequence(seed).spawn(n_bags)
    rows, grows, fills = [], [], []
    seeds = np.empty(n_estimators, dtype=np.int64)
    t = 0
    for seq in bag_seqs:
        rng = np.random.default_rng(seq)
        pool = rng.choice(n, size=n // 2, replace=False) if trees_per_bag >= 2 else None
        for _ in range(trees_per_bag):
            if pool is None:
                r = rng.choice(n, size=s, replace=False) if s < n else rng.permutation(n)
            else:
                r = pool[rng.choice(pool.shape[0], size=s, replace=False)]
            grow = np.ones(s, dtype=np.bool_)
            if honest:
                # rng.choice returns rows in random order: the first half places splits
                grow[s // 2:] = False
                fill = ~grow
            else:
                fill = grow.copy()
            rows.append(r.astype(np.int64))
            grows.append(grow)
            fills.append(fill)
            seeds[t] = rng.integers(0, 2**31 - 1)
            t += 1
    return TreePlan(rows, grows, fills, seeds, trees_per_bag)


def _plan_part(plan: TreePlan, a: int, b: int) -> tuple:
    """Return the slice of ``plan`` for trees ``a:b`` (what one chunk of growth needs)."""
    return (plan.sample_rows[a:b], plan.grow_masks[a:b], plan.fill_masks[a:b],
            plan.seeds[a:b])


def grow_chunk(task, XT, y, Z, order) -> list:
    """Return the ``grow_tree`` outputs of one chunk of trees, in plan order.

    ``task`` is ``(plan part, settings)`` with the plan part from ``_plan_part`` and
    settings ``(min_samples_leaf, max_features, max_depth, rule, ridge_penalty)``. A
    pure function of its inputs: the same chunk gives the same trees on any worker.
    """
    (rows, grows, fills, seeds), (msl, mtry, max_depth, rule, lam) = task
    return [
        grow_tree(XT, y, Z, order, rows[t], grows[t], fills[t], msl, mtry, max_depth, rule,
                  lam, int(seeds[t]))
        for t in range(len(rows))
    ]


def grow_forest(
    X: np.ndarray,
    y: np.ndarray,
    plan: TreePlan,
    *,
    min_samples_leaf: int,
    max_features: int,
    max_depth: int | None = None,
    rule: int = RULE_MEAN,
    Z: np.ndarray | None = None,
    ridge_penalty: float = 0.0,
    n_jobs: int = 1,
    progress=None,
    chunk: int | None = None,
    client=None,
) -> ForestArrays:
    """Return the forest grown from ``plan``, trees in parallel threads (numba nogil).

    With a ``dask.distributed.Client`` as ``client`` the chunks of trees are grown on its
    workers instead (``hedgerow._distributed.run_tasks``), with the same trees. ``chunk``
    is the number of trees per unit of work (default 16 locally; on a cluster about four
    units per worker thread, at most 64 trees each). ``progress`` is called with the number
    of trees finished so far. A ``KeyboardInterrupt`` cancels the trees not yet started and
    propagates; a chunk lost by the cluster raises a ``RuntimeError``.
    """
    X = np.ascontiguousarray(X, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    Z = np.zeros((X.shape[0], 0)) if Z is None else np.ascontiguousarray(Z, dtype=np.float64)
    # Splits depend on y only through differences; centring keeps the squared-error sums
    # of the split search from cancelling when y has a large offset (y + 1e8 used to give
    # different, worse trees than y). Leaf values are computed from the raw y elsewhere.
    # A power-of-two rescaling is exact, so it changes no comparison of the search on
    # ordinary data, and keeps squares of y from over- or underflowing near 1e+-300.
    peak = float(np.max(np.abs(y))) if y.size else 0.0
    if 0.0 < peak < np.inf:
        y = np.ldexp(y, -int(np.frexp(peak)[1]))
    y = y - y.mean()
    order = presort(X)
    XT = np.ascontiguousarray(X.T)  # each column contiguous for the per-tree sweeps
    B = len(plan.sample_rows)
    md = -1 if max_depth is None else int(max_depth)
    settings = (int(min_samples_leaf), int(max_features), md, int(rule), float(ridge_penalty))
    if chunk is None:
        if client is None:
            chunk = 16
        else:
            from hedgerow._distributed import total_threads

            # a few units per thread even out uneven trees without drowning in overhead
            chunk = max(1, min(64, -(-B // (4 * total_threads(client)))))
    ranges = [(a, min(B, a + chunk)) for a in range(0, B, chunk)]
    tasks = [(_plan_part(plan, a, b), settings) for a, b in ranges]
    results = [None] * len(ranges)
    done_trees = 0
    if client is not None:
        from hedgerow._distributed import run_tasks

        def finished(i, part):
            nonlocal done_trees
            done_trees += len(part)
            if progress is not None:
                progress(done_trees)

        parts = run_tasks(client, grow_chunk, tasks, shared=(XT, y, Z, order),
                          what="chunk of trees", on_result=finished)
        results = [parts[i] for i in range(len(ranges))]
    elif n_jobs <= 1:
        for i, task in enumerate(tasks):
            results[i] = grow_chunk(task, XT, y, Z, order)
            done_trees += len(results[i])
            if progress is not None:
                progress(done_trees)
    else:
        pool = ThreadPoolExecutor(max_workers=n_jobs)
        futures = {pool.submit(grow_chunk, task, XT, y, Z, order): i
                   for i, task in enumerate(tasks)}
        try:
            pending = set(futures)
            while pending:
                finished, pending = wait(pending, timeout=0.2, return_when="FIRST_COMPLETED")
                for f in finished:
                    i = futures[f]
                    results[i] = f.result()
                    done_trees += ranges[i][1] - ranges[i][0]
                if finished and progress is not None:
                    progress(done_trees)
        except BaseException:
            for f in futures:
                f.cancel()
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
    check_chunks(results, ranges)
    trees = [tree for part in results for tree in part]
    return assemble(trees, plan, X.shape[0])


def check_chunks(results: list, ranges: list) -> None:
    """Raise a ``RuntimeError`` unless every chunk holds exactly its planned trees."""
    for part, (a, b) in zip(results, ranges, strict=True):
        got = None if part is None else len(part)
        if got != b - a:
            raise RuntimeError(
                f"Growing the forest returned {got} trees for trees {a}..{b - 1} "
                f"(expected {b - a}); refusing to assemble an incomplete forest."
            )


def assemble(trees: list, plan: TreePlan, n_train: int) -> ForestArrays:
    """Return ``ForestArrays`` from per-tree ``grow_tree`` outputs."""
    n_nodes = np.array([t[0].shape[0] for t in trees], dtype=np.int64)
    n_leaves = np.array([t[4].shape[0] - 1 for t in trees], dtype=np.int64)
    node_start = np.concatenate([[0], np.cumsum(n_nodes)]).astype(np.int64)
    leaf_start = np.concatenate([[0], np.cumsum(n_leaves)]).astype(np.int64)
    leaf_sizes = np.concatenate([np.diff(t[4]) for t in trees])
    leaf_ptr = np.concatenate([[0], np.cumsum(leaf_sizes)]).astype(np.int64)
    sample_sizes = np.array([r.shape[0] for r in plan.sample_rows], dtype=np.int64)
    return ForestArrays(
        feature=np.concatenate([t[0] for t in trees]),
        threshold=np.concatenate([t[1] for t in trees]),
        left=np.concatenate([t[2] for t in trees]),
        right=np.concatenate([t[3] for t in trees]),
        node_start=node_start,
        leaf_ptr=leaf_ptr,
        leaf_rows=np.concatenate([t[5] for t in trees]).astype(np.int32),
        leaf_start=leaf_start,
        sample_ptr=np.concatenate([[0], np.cumsum(sample_sizes)]).astype(np.int64),
        sample_rows=np.concatenate(plan.sample_rows).astype(np.int32),
        n_train=n_train,
        trees_per_bag=plan.trees_per_bag,
    )
