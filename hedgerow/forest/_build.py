"""Subsampling recipe, parallel growth of many trees straight into ``ForestArrays``.

Sampling (little bags): trees come in bags of ``trees_per_bag``. With bags of two or more,
each bag draws a half-sample (``n // 2`` rows without replacement) and each of its trees
draws ``subsample_size`` rows without replacement from that half-sample; with bags of one,
each tree draws directly from all rows. An honest tree splits its rows at random into a
grow part (``s // 2`` rows, places the splits) and a fill part (the rest, fills leaves).

Every bag draws from a generator of its own, spawned from one seed (``SeedSequence(seed)``
child ``g``), in a fixed sequence: the half-sample, then per tree its rows and the seed of
its feature draws. So a forest depends on ``random_state`` only, never on ``n_jobs`` or on
the order in which threads finish. Nothing is drawn up front: a unit of work is a run of
whole bags and draws its bags' rows itself (int32), just before growing their trees.

Assembly writes in place. The sizes of the fill rows (``n_fill`` per tree), of the bags'
rows and of the per-tree draw masks are known before growth, so those arrays are
allocated once and each unit writes its slices; the node arrays, whose sizes are known
only after growth, are appended tree by tree in tree order to buffers that grow in place
(``ndarray.resize``) and are trimmed at the end. No per-tree array is concatenated.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor, wait
from dataclasses import dataclass

import numpy as np

from hedgerow.forest._grow import RULE_MEAN, bag_order, grow_tree, presort, tie_tolerances
from hedgerow.forest._storage import ForestArrays

__all__ = ["TreePlan", "check_chunks", "grow_chunk", "grow_forest", "plan_samples",
           "subsample_size"]


def subsample_size(n: int, subsample_rate: float, trees_per_bag: int) -> int:
    """Return the number of rows one tree draws (from the half-sample when bagged)."""
    pool = n // 2 if trees_per_bag >= 2 else n
    return int(min(pool, max(1, np.floor(subsample_rate * n + 1e-9))))


@dataclass(frozen=True)
class TreePlan:
    """How every tree of a forest draws its rows: a recipe, not the rows themselves.

    ``draw_bag(g)`` replays bag ``g``'s draws from its seed. The per-tree views
    ``sample_rows``, ``grow_masks``, ``fill_masks`` and ``seeds`` draw every bag on
    demand (for checks; growth never builds them).
    """

    n: int
    n_estimators: int
    trees_per_bag: int
    subsample_size: int
    honest: bool
    seed: int

    @property
    def n_bags(self) -> int:
        return self.n_estimators // self.trees_per_bag

    @property
    def bag_size(self) -> int:
        """Rows a bag keeps: its half-sample, or a single tree's rows (bags of one)."""
        return self.n // 2 if self.trees_per_bag >= 2 else self.subsample_size

    @property
    def fill_size(self) -> int:
        """Fill rows per tree (every one lands in exactly one leaf)."""
        s = self.subsample_size
        return s - s // 2 if self.honest else s

    @property
    def trees_draw_whole_bag(self) -> bool:
        """True when every tree draws all its bag's rows (no per-tree draw mask)."""
        return self.subsample_size == self.bag_size

    def draw_bag(self, g: int):
        """Return ``(pool, trees)`` of bag ``g``: its half-sample (int32, in draw order;
        None for bags of one) and an iterator over its trees' ``(rows, seed)``.

        ``rows`` (int32, draw order) are positions in ``pool``, or training rows for bags
        of one. The iterator draws each tree when asked, so a bag's draws are never all
        held at once; consume it in order.
        """
        rng = np.random.default_rng(np.random.SeedSequence(self.seed, spawn_key=(g,)))
        n, s = self.n, self.subsample_size
        if self.trees_per_bag >= 2:
            pool = rng.choice(n, size=n // 2, replace=False).astype(np.int32)
        else:
            pool = None

        def trees():
            for _ in range(self.trees_per_bag):
                if pool is None:
                    r = rng.choice(n, size=s, replace=False) if s < n else rng.permutation(n)
                else:
                    r = rng.choice(pool.shape[0], size=s, replace=False)
                yield r.astype(np.int32), int(rng.integers(0, 2**31 - 1))

        return pool, trees()

    def _all_trees(self):
        for g in range(self.n_bags):
            pool, trees = self.draw_bag(g)
            for r, seed in trees:
                yield (r if pool is None else pool[r]).astype(np.int64), seed

    @property
    def sample_rows(self) -> list:
        """Per tree: its training rows (int64) in draw order (drawn on demand)."""
        return [r for r, _ in self._all_trees()]

    @property
    def seeds(self) -> np.ndarray:
        """Per tree: the seed of its feature draws (drawn on demand)."""
        return np.array([seed for _, seed in self._all_trees()], dtype=np.int64)

    def _roles(self, grow: bool) -> list:
        s = self.subsample_size
        mask = np.ones(s, dtype=np.bool_)
        if self.honest:
            if grow:
                mask[s // 2:] = False
            else:
                mask[:s // 2] = False
        return [mask.copy() for _ in range(self.n_estimators)]

    @property
    def grow_masks(self) -> list:
        """Per tree: bool over its rows (draw order), the rows that place splits."""
        return self._roles(True)

    @property
    def fill_masks(self) -> list:
        """Per tree: bool over its rows (draw order), the rows that fill leaves."""
        return self._roles(False)


def plan_samples(
    n: int,
    n_estimators: int,
    trees_per_bag: int,
    subsample_rate: float,
    honest: bool,
    seed: int,
) -> TreePlan:
    """Return the sampling recipe of a forest (see the module docstring)."""
    s = subsample_size(n, subsample_rate, trees_per_bag)
    return TreePlan(int(n), int(n_estimators), int(trees_per_bag), s, bool(honest), int(seed))


def _empty_outputs(plan: TreePlan, n_trees: int, n_bags: int):
    """Return (leaf rows, bag rows, draw masks) arrays for ``n_trees`` trees."""
    width = -(-plan.bag_size // 8)
    masks = (np.zeros((0, 0), dtype=np.uint8) if plan.trees_draw_whole_bag
             else np.zeros((n_trees, width), dtype=np.uint8))
    return (np.empty(n_trees * plan.fill_size, dtype=np.int32),
            np.empty(n_bags * plan.bag_size, dtype=np.int32), masks)


def grow_chunk(task, XT, y, Z, order, tol, out=None) -> list:
    """Return the node arrays of the trees of one run of whole bags, in tree order.

    ``task`` is ``((plan, first bag, end bag), settings)`` with settings
    ``(min_samples_leaf, max_features, max_depth, rule, ridge_penalty)``. The bags' rows
    are drawn here. ``out`` is ``(leaf_rows, bag_rows, draw_masks)`` of the whole forest
    (``_empty_outputs``): each tree's fill rows, each bag's rows (ascending) and each
    tree's draw mask are written into their slices, and a tree's entry is
    ``(feature, threshold, left, right, leaf_ptr)``. With ``out=None`` (a worker of a
    cluster) the chunk fills arrays of its own and a tree's entry also holds its slices
    ``(leaf rows, its bag's rows or None after the bag's first tree, draw mask or
    None)``. A pure function of its inputs: the same chunk gives the same trees on any
    worker.
    """
    (plan, g0, g1), (msl, mtry, max_depth, rule, lam) = task
    l, P, n_fill = plan.trees_per_bag, plan.bag_size, plan.fill_size
    own = out is None
    if own:
        out = _empty_outputs(plan, (g1 - g0) * l, g1 - g0)
        tree0, bag0 = g0 * l, g0
    else:
        tree0, bag0 = 0, 0
    leaf_rows, bag_rows, masks = out
    masked = masks.shape[0] > 0
    everyone = np.arange(XT.shape[1], dtype=np.int32) if l == 1 else None
    trees = []
    for g in range(g0, g1):
        pool, draws = plan.draw_bag(g)
        bag_slot = bag_rows[(g - bag0) * P:(g - bag0 + 1) * P]
        if pool is not None:
            pool_order = bag_order(order, pool)
            by_value = np.argsort(pool, kind="stable")
            bag_slot[:] = pool[by_value]
            if masked:
                rank = np.empty(P, dtype=np.int64)
                rank[by_value] = np.arange(P)
        else:
            pool, pool_order = everyone, order
        for j, (pos, seed) in enumerate(draws):
            t = g * l + j
            lr = leaf_rows[(t - tree0) * n_fill:(t - tree0 + 1) * n_fill]
            nodes = grow_tree(XT, y, Z, tol, pool_order, pool, pos, plan.honest, lr, msl,
                              mtry, max_depth, rule, lam, seed)
            if pool is everyone:
                bag_slot[:] = np.sort(pos)
            if masked:
                bits = np.zeros(P, dtype=np.bool_)
                bits[rank[pos]] = True
                masks[t - tree0] = np.packbits(bits)
            if own:
                nodes = (*nodes, lr, bag_slot if j == 0 else None,
                         masks[t - tree0] if masked else None)
            trees.append(nodes)
    return trees


class _GrowingArray:
    """A 1-d array appended to in place (``ndarray.resize``), trimmed by ``finish``."""

    def __init__(self, dtype):
        self.a = np.empty(0, dtype=dtype)
        self.n = 0

    def extend(self, values, expected_total: int):
        need = self.n + values.shape[0]
        if need > self.a.shape[0]:
            # the first tree sets the estimate; trees of one forest are alike in size
            cap = max(need, expected_total, int(self.a.shape[0] * 1.25) + 16)
            self.a.resize(cap, refcheck=False)
        self.a[self.n:need] = values
        self.n = need

    def finish(self) -> np.ndarray:
        self.a.resize(self.n, refcheck=False)
        return self.a


class _Assembly:
    """Node arrays of the forest, appended in tree order as chunks arrive in any order."""

    def __init__(self, plan: TreePlan, n_train: int, out):
        self.plan, self.n_train, self.out = plan, n_train, out
        B = plan.n_estimators
        self.node_start = np.zeros(B + 1, dtype=np.int64)
        self.leaf_start = np.zeros(B + 1, dtype=np.int64)
        self.parts = [_GrowingArray(np.int32), _GrowingArray(np.float64),
                      _GrowingArray(np.int32), _GrowingArray(np.int32)]
        self.leaf_ptr = _GrowingArray(np.int64)
        self.leaf_ptr.extend(np.zeros(1, dtype=np.int64), 1)
        self.next_tree = 0
        self.waiting: dict = {}

    def add(self, first_tree: int, trees: list):
        """Take a chunk's trees; append every tree whose predecessors are all in."""
        self.waiting[first_tree] = trees
        while self.next_tree in self.waiting:
            for tree in self.waiting.pop(self.next_tree):
                self._append(tree)

    def _append(self, tree):
        t = self.next_tree
        B, n_fill = self.plan.n_estimators, self.plan.fill_size
        feature, threshold, left, right, leaf_ptr = tree[:5]
        k = feature.shape[0]
        for buf, values in zip(self.parts, (feature, threshold, left, right), strict=True):
            buf.extend(values, int(1.05 * k * B) + 16)
        self.node_start[t + 1] = self.node_start[t] + k
        n_leaves = leaf_ptr.shape[0] - 1
        self.leaf_ptr.extend(leaf_ptr[1:] + t * n_fill, int(1.05 * n_leaves * B) + 16)
        self.leaf_start[t + 1] = self.leaf_start[t] + n_leaves
        if len(tree) > 5:  # a cluster's chunk: copy its slices into place
            leaf_rows, bag_rows, masks = self.out
            lr, bag, mask = tree[5:]
            leaf_rows[t * n_fill:(t + 1) * n_fill] = lr
            l, P = self.plan.trees_per_bag, self.plan.bag_size
            if bag is not None:
                g = t // l
                bag_rows[g * P:(g + 1) * P] = bag
            if mask is not None:
                masks[t] = mask
        self.next_tree += 1

    def forest(self) -> ForestArrays:
        if self.next_tree != self.plan.n_estimators:
            raise RuntimeError(
                f"Growing the forest assembled {self.next_tree} of "
                f"{self.plan.n_estimators} trees; refusing to assemble an incomplete forest."
            )
        feature, threshold, left, right = (p.finish() for p in self.parts)
        leaf_rows, bag_rows, masks = self.out
        G, P = self.plan.n_bags, self.plan.bag_size
        return ForestArrays(
            feature=feature, threshold=threshold, left=left, right=right,
            node_start=self.node_start, leaf_ptr=self.leaf_ptr.finish(),
            leaf_rows=leaf_rows, leaf_start=self.leaf_start,
            bag_ptr=np.arange(G + 1, dtype=np.int64) * P, bag_rows=bag_rows,
            tree_draws=masks, n_train=self.n_train, trees_per_bag=self.plan.trees_per_bag,
        )


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
    is the number of trees per unit of work, rounded down to whole bags (at least one bag;
    default 16 locally; on a cluster about four units per worker thread, at most 64 trees
    each). ``progress`` is called with the number of trees finished so far. A
    ``KeyboardInterrupt`` cancels the trees not yet started and propagates; a chunk lost
    by the cluster raises a ``RuntimeError``.
    """
    X = np.ascontiguousarray(X, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    Z = np.zeros((X.shape[0], 0)) if Z is None else np.ascontiguousarray(Z, dtype=np.float64)
    if plan.n != X.shape[0]:
        raise ValueError(f"The plan is for {plan.n} rows, but X has {X.shape[0]}.")
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
    tol = tie_tolerances(XT, order)
    B, l = plan.n_estimators, plan.trees_per_bag
    md = -1 if max_depth is None else int(max_depth)
    settings = (int(min_samples_leaf), int(max_features), md, int(rule), float(ridge_penalty))
    if chunk is None:
        if client is None:
            chunk = 16
        else:
            from hedgerow._distributed import total_threads

            # a few units per thread even out uneven trees without drowning in overhead
            chunk = max(1, min(64, -(-B // (4 * total_threads(client)))))
    per = max(1, int(chunk) // l)
    bag_ranges = [(g, min(plan.n_bags, g + per)) for g in range(0, plan.n_bags, per)]
    ranges = [(a * l, b * l) for a, b in bag_ranges]
    tasks = [((plan, a, b), settings) for a, b in bag_ranges]
    out = _empty_outputs(plan, B, plan.n_bags)
    assembly = _Assembly(plan, X.shape[0], out)
    done_trees = 0
    if client is not None:
        from hedgerow._distributed import run_tasks

        def finished(i, part):
            nonlocal done_trees
            done_trees += len(part)
            if progress is not None:
                progress(done_trees)

        parts = run_tasks(client, grow_chunk, tasks, shared=(XT, y, Z, order, tol),
                          what="chunk of trees", on_result=finished)
        results = [parts.get(i) for i in range(len(ranges))]
        check_chunks(results, ranges)
        for (a, _), part in zip(ranges, results, strict=True):
            assembly.add(a, part)
        del parts, results
    elif n_jobs <= 1:
        for task, (a, b) in zip(tasks, ranges, strict=True):
            part = grow_chunk(task, XT, y, Z, order, tol, out)
            check_chunks([part], [(a, b)])
            assembly.add(a, part)
            done_trees += len(part)
            if progress is not None:
                progress(done_trees)
    else:
        pool = ThreadPoolExecutor(max_workers=n_jobs)
        futures = {pool.submit(grow_chunk, task, XT, y, Z, order, tol, out): i
                   for i, task in enumerate(tasks)}
        try:
            pending = set(futures)
            while pending:
                finished, pending = wait(pending, timeout=0.2, return_when="FIRST_COMPLETED")
                for f in finished:
                    # a finished future holds its chunk's node arrays: let it go once
                    # they are appended, or every tree's nodes would be held twice
                    i = futures.pop(f)
                    part = f.result()
                    check_chunks([part], [ranges[i]])
                    assembly.add(ranges[i][0], part)
                    done_trees += ranges[i][1] - ranges[i][0]
                if finished and progress is not None:
                    progress(done_trees)
                finished = f = part = None
        except BaseException:
            for f in futures:
                f.cancel()
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
    return assembly.forest()


def check_chunks(results: list, ranges: list) -> None:
    """Raise a ``RuntimeError`` unless every chunk holds exactly its planned trees."""
    for part, (a, b) in zip(results, ranges, strict=True):
        got = None if part is None else len(part)
        if got != b - a:
            raise RuntimeError(
                f"Growing the forest returned {got} trees for trees {a}..{b - 1} "
                f"(expected {b - a}); refusing to assemble an incomplete forest."
            )
