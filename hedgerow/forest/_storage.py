"""Compact storage of a fitted forest and the compiled queries on it.

A forest of B trees is a handful of flat arrays: the nodes of all trees concatenated
(``feature``, ``threshold``, ``left``, ``right`` with per-tree offsets ``node_start``), and
the honest (fill) rows of every leaf as one CSR structure (``leaf_ptr``, ``leaf_rows``,
leaves numbered globally with per-tree offsets ``leaf_start``). What each tree drew is
kept per little bag, for out-of-bag work: each bag's rows once, ascending, as CSR
(``bag_ptr``, ``bag_rows``; a bag's half-sample, or a single tree's rows for bags of
one), and, only when the trees of a bag draw part of its rows, a packed bit mask per tree
over its bag's rows (``tree_draws``, (B, bytes) uint8, most significant bit first; (0, 0)
when every tree draws all of its bag's rows). ``sample_ptr`` / ``sample_rows`` (the rows
of every tree, CSR) and ``inbag`` are computed from them on demand.

Layout history (``LAYOUT``, kept in pickles): 1, every tree's drawn rows as CSR
(``sample_ptr``, ``sample_rows``), converted on load; 2, per bag as above.

Forest weights of a query x: alpha_i(x) = (1 / B_x) * sum over usable trees t of
1{i in L_t(x)} / |L_t(x)|, with L_t(x) the fill rows of x's leaf in tree t and B_x the
number of usable trees (for out-of-bag queries, the trees that did not draw the row).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, fields
from functools import cached_property

import numpy as np
import scipy.sparse as sp
from numba import njit

__all__ = ["ForestArrays"]


@njit(cache=True, nogil=True, error_model="numpy")
def _apply_chunk(X, feature, threshold, left, right, node_start, leaf_start, dest):
    # tree-major: one tree's nodes stay in cache while every query descends it; the
    # (B, m) scratch is transposed straight into the caller's rows ``dest`` (m, B).
    # General layout: any child numbering.
    m = X.shape[0]
    B = node_start.shape[0] - 1
    out = np.empty((B, m), dtype=np.int32)
    for t in range(B):
        off = node_start[t]
        ls = leaf_start[t]
        for i in range(m):
            node = off
            while feature[node] >= 0:
                if X[i, feature[node]] <= threshold[node]:
                    node = off + left[node]
                else:
                    node = off + right[node]
            out[t, i] = ls + left[node]
    dest[:, :] = out.T


@njit(cache=True, nogil=True, error_model="numpy")
def _apply_chunk_adjacent(X, feature, threshold, left, node_start, leaf_start, dest):
    """``_apply_chunk`` for trees whose right child is always ``left + 1`` (ours).

    The step to a child is arithmetic (``left + (x > threshold)``), not a branch, and
    four queries descend together so that their independent chains of loads overlap.
    """
    m = X.shape[0]
    B = node_start.shape[0] - 1
    out = np.empty((B, m), dtype=np.int32)
    for t in range(B):
        off = node_start[t]
        ls = leaf_start[t]
        i = 0
        while i + 4 <= m:
            n0 = off
            n1 = off
            n2 = off
            n3 = off
            f0 = feature[off]
            f1 = f0
            f2 = f0
            f3 = f0
            while f0 >= 0 or f1 >= 0 or f2 >= 0 or f3 >= 0:
                if f0 >= 0:
                    n0 = off + left[n0] + (X[i, f0] > threshold[n0])
                    f0 = feature[n0]
                if f1 >= 0:
                    n1 = off + left[n1] + (X[i + 1, f1] > threshold[n1])
                    f1 = feature[n1]
                if f2 >= 0:
                    n2 = off + left[n2] + (X[i + 2, f2] > threshold[n2])
                    f2 = feature[n2]
                if f3 >= 0:
                    n3 = off + left[n3] + (X[i + 3, f3] > threshold[n3])
                    f3 = feature[n3]
            out[t, i] = ls + left[n0]
            out[t, i + 1] = ls + left[n1]
            out[t, i + 2] = ls + left[n2]
            out[t, i + 3] = ls + left[n3]
            i += 4
        while i < m:
            node = off
            f = feature[node]
            while f >= 0:
                node = off + left[node] + (X[i, f] > threshold[node])
                f = feature[node]
            out[t, i] = ls + left[node]
            i += 1
    dest[:, :] = out.T


#: A chunk of queries gathers its weights by sorting (no accumulator over the training
#: rows) when every query's leaf rows, counted with repeats, number under 1/16 of n.
SPARSE_GATHER_SHARE = 16


@njit(cache=True, nogil=True, error_model="numpy")
def _weights_chunk_auto(leaves, queries, usable, leaf_ptr, leaf_rows, n):
    """``_weights_chunk``'s pieces, by gather-and-sort when the queries touch few rows.

    A probe of a million-row forest touches a few thousand rows; an accumulator over all
    n rows (8 MB, page faults on first touch) then costs more than the weights. The sorted
    gather adds each row's weights in the same order (trees in turn, a leaf's rows in
    turn: a stable sort keeps it), so it gives the same bits.
    """
    m = queries.shape[0]
    B = leaves.shape[1]
    all_usable = usable.shape[0] == 0
    most = 0
    for i in range(m):
        row = queries[i]
        k = 0
        for t in range(B):
            if not all_usable and not usable[row, t]:
                continue
            leaf = leaves[row, t]
            k += leaf_ptr[leaf + 1] - leaf_ptr[leaf]
        most = max(most, k)
    if most * SPARSE_GATHER_SHARE >= n:
        return _weights_chunk(leaves, queries, usable, leaf_ptr, leaf_rows, n)
    return _weights_chunk_sorted(leaves, queries, usable, leaf_ptr, leaf_rows, most)


@njit(cache=True, nogil=True, error_model="numpy")
def _weights_chunk_sorted(leaves, queries, usable, leaf_ptr, leaf_rows, most):
    """``_weights_chunk``'s pieces by gathering each query's (row, weight) pairs and
    sorting them by row (stable: the additions keep tree order)."""
    m = queries.shape[0]
    B = leaves.shape[1]
    all_usable = usable.shape[0] == 0
    cap = max(16, m * most)
    indices = np.empty(cap, dtype=np.int32)
    data = np.empty(cap)
    indptr = np.zeros(m + 1, dtype=np.int64)
    n_used = np.zeros(m, dtype=np.int64)
    rs = np.empty(most, dtype=np.int64)
    ws = np.empty(most)
    nnz = 0
    for i in range(m):
        row = queries[i]
        k = 0
        used = 0
        for t in range(B):
            if not all_usable and not usable[row, t]:
                continue
            leaf = leaves[row, t]
            a = leaf_ptr[leaf]
            b = leaf_ptr[leaf + 1]
            if b <= a:
                continue
            used += 1
            w = 1.0 / (b - a)
            for p in range(a, b):
                rs[k] = leaf_rows[p]
                ws[k] = w
                k += 1
        n_used[i] = used
        order = np.argsort(rs[:k], kind="mergesort")
        j = 0
        q = nnz
        while j < k:
            r = rs[order[j]]
            acc = 0.0
            while j < k and rs[order[j]] == r:
                acc += ws[order[j]]
                j += 1
            indices[q] = r
            data[q] = acc / used
            q += 1
        nnz = q
        indptr[i + 1] = nnz
    return indptr, indices[:nnz], data[:nnz], n_used


@njit(cache=True, nogil=True, error_model="numpy")
def _weights_chunk(leaves, queries, usable, leaf_ptr, leaf_rows, n):
    """CSR pieces (indptr, indices, data, n_used) of the forest weights of the queries
    ``queries`` (row numbers of ``leaves``, visited in that order).

    ``usable`` is (M, B) bool like ``leaves``, or (0, 0) meaning every tree is usable.
    """
    m = queries.shape[0]
    B = leaves.shape[1]
    all_usable = usable.shape[0] == 0
    acc = np.zeros(n)
    touched = np.empty(n, dtype=np.int64)
    cap = max(16, m * 64)
    indices = np.empty(cap, dtype=np.int32)
    data = np.empty(cap)
    indptr = np.zeros(m + 1, dtype=np.int64)
    n_used = np.zeros(m, dtype=np.int64)
    nnz = 0
    for i in range(m):
        row = queries[i]
        n_t = 0
        used = 0
        for t in range(B):
            if not all_usable and not usable[row, t]:
                continue
            leaf = leaves[row, t]
            a = leaf_ptr[leaf]
            b = leaf_ptr[leaf + 1]
            if b <= a:
                continue
            used += 1
            w = 1.0 / (b - a)
            for p in range(a, b):
                r = leaf_rows[p]
                if acc[r] == 0.0:
                    touched[n_t] = r
                    n_t += 1
                acc[r] += w
        n_used[i] = used
        if nnz + n_t > cap:
            new_cap = max(2 * cap, nnz + n_t)
            ni = np.empty(new_cap, dtype=np.int32)
            nd = np.empty(new_cap)
            ni[:nnz] = indices[:nnz]
            nd[:nnz] = data[:nnz]
            indices = ni
            data = nd
            cap = new_cap
        if n_t * 16 >= n:
            # dense enough: a scan of the accumulator in row order beats sorting
            q = nnz
            for r in range(n):
                v = acc[r]
                if v != 0.0:
                    indices[q] = r
                    data[q] = v / used
                    acc[r] = 0.0
                    q += 1
        else:
            rows = np.sort(touched[:n_t])
            for q in range(n_t):
                r = rows[q]
                indices[nnz + q] = r
                data[nnz + q] = acc[r] / used
                acc[r] = 0.0
        nnz += n_t
        indptr[i + 1] = nnz
    # views: the caller copies each row once into the final matrix
    return indptr, indices[:nnz], data[:nnz], n_used


@njit(cache=True, nogil=True, error_model="numpy")
def _place_rows(indptr, indices, data, dest, out_indptr, out_indices, out_data):
    """Copy the CSR rows of one chunk to rows ``dest`` of the final matrix."""
    for r in range(dest.shape[0]):
        a = indptr[r]
        length = indptr[r + 1] - a
        o = out_indptr[dest[r]]
        for q in range(length):
            out_indices[o + q] = indices[a + q]
            out_data[o + q] = data[a + q]


@njit(cache=True, nogil=True, error_model="numpy")
def _drawn(tree_draws, t, k):
    """Whether tree ``t`` drew position ``k`` of its bag's rows (packed, MSB first)."""
    return (tree_draws[t, k >> 3] >> (7 - (k & 7))) & 1


@njit(cache=True, nogil=True, error_model="numpy")
def _inbag_chunk(rows, bag_ptr, bag_rows, tree_draws, trees_per_bag, n):
    """(len(rows), B) bool: did tree t draw training row rows[i]."""
    G = bag_ptr.shape[0] - 1
    l = trees_per_bag
    masked = tree_draws.shape[0] > 0
    pos = np.full(n, -1, dtype=np.int64)
    for i in range(rows.shape[0]):
        pos[rows[i]] = i
    out = np.zeros((rows.shape[0], G * l), dtype=np.bool_)
    for g in range(G):
        a = bag_ptr[g]
        for p in range(a, bag_ptr[g + 1]):
            i = pos[bag_rows[p]]
            if i < 0:
                continue
            for j in range(l):
                t = g * l + j
                if not masked or _drawn(tree_draws, t, p - a):
                    out[i, t] = True
    return out


@njit(cache=True, nogil=True, error_model="numpy")
def _bag_inbag_chunk(rows, bag_ptr, bag_rows, n):
    """(len(rows), G) bool: is training row rows[i] among bag g's rows."""
    G = bag_ptr.shape[0] - 1
    pos = np.full(n, -1, dtype=np.int64)
    for i in range(rows.shape[0]):
        pos[rows[i]] = i
    out = np.zeros((rows.shape[0], G), dtype=np.bool_)
    for g in range(G):
        for p in range(bag_ptr[g], bag_ptr[g + 1]):
            i = pos[bag_rows[p]]
            if i >= 0:
                out[i, g] = True
    return out


@njit(cache=True, nogil=True, error_model="numpy")
def _tree_rows_csr(bag_ptr, bag_rows, tree_draws, trees_per_bag):
    """(ptr, rows): every tree's drawn rows, ascending, as CSR (the layout-1 view)."""
    G = bag_ptr.shape[0] - 1
    l = trees_per_bag
    masked = tree_draws.shape[0] > 0
    ptr = np.zeros(G * l + 1, dtype=np.int64)
    total = 0
    for g in range(G):
        for j in range(l):
            t = g * l + j
            c = 0
            for p in range(bag_ptr[g], bag_ptr[g + 1]):
                if not masked or _drawn(tree_draws, t, p - bag_ptr[g]):
                    c += 1
            total += c
            ptr[t + 1] = total
    rows = np.empty(total, dtype=np.int32)
    q = 0
    for g in range(G):
        for j in range(l):
            t = g * l + j
            for p in range(bag_ptr[g], bag_ptr[g + 1]):
                if not masked or _drawn(tree_draws, t, p - bag_ptr[g]):
                    rows[q] = bag_rows[p]
                    q += 1
    return ptr, rows


@njit(cache=True, nogil=True, error_model="numpy")
def _leaf_means_kernel(leaf_ptr, leaf_rows, F):
    L = leaf_ptr.shape[0] - 1
    p = F.shape[1]
    out = np.zeros((L, p))
    for leaf in range(L):
        a = leaf_ptr[leaf]
        b = leaf_ptr[leaf + 1]
        if b <= a:
            continue
        for q in range(a, b):
            r = leaf_rows[q]
            for j in range(p):
                out[leaf, j] += F[r, j]
        inv = 1.0 / (b - a)
        for j in range(p):
            out[leaf, j] *= inv
    return out


@njit(cache=True, nogil=True, error_model="numpy")
def _gather_chunk(leaves, usable, leaf_ptr, leaf_means):
    """Mean over usable trees of the leaf means of each query's leaves (and tree counts)."""
    m, B = leaves.shape
    p = leaf_means.shape[1]
    all_usable = usable.shape[0] == 0
    out = np.zeros((m, p))
    n_used = np.zeros(m, dtype=np.int64)
    for i in range(m):
        used = 0
        for t in range(B):
            if not all_usable and not usable[i, t]:
                continue
            leaf = leaves[i, t]
            if leaf_ptr[leaf + 1] <= leaf_ptr[leaf]:
                continue
            used += 1
            for j in range(p):
                out[i, j] += leaf_means[leaf, j]
        n_used[i] = used
        if used > 0:
            for j in range(p):
                out[i, j] /= used
    return out, n_used


#: Stored leaf rows per block of ``leaf_means`` (about 8 MB of gathered y).
_LEAF_MEAN_BLOCK = 1 << 20


def _from_layout_1(state: dict) -> dict:
    """Return layout-2 state from a layout-1 one (every tree's rows as CSR).

    A bag's rows become the union of its trees' rows, and the per-tree masks are kept
    only if some tree of a bag drew fewer rows than that union: ``inbag`` is unchanged.
    """
    ptr = np.asarray(state.pop("sample_ptr"), dtype=np.int64)
    rows = np.asarray(state.pop("sample_rows"))
    l = int(state["trees_per_bag"])
    B = ptr.shape[0] - 1
    tree_sets = [np.unique(rows[ptr[t]:ptr[t + 1]]) for t in range(B)]
    bags = [np.unique(np.concatenate(tree_sets[g * l:(g + 1) * l])) for g in range(B // l)]
    whole = all(tree_sets[t].shape[0] == bags[t // l].shape[0] for t in range(B))
    width = -(-max((b.shape[0] for b in bags), default=0) // 8)
    masks = np.zeros((0, 0) if whole else (B, width), dtype=np.uint8)
    if not whole:
        for t in range(B):
            bag = bags[t // l]
            bits = np.zeros(width * 8, dtype=np.bool_)
            bits[np.searchsorted(bag, tree_sets[t])] = True
            masks[t] = np.packbits(bits)
    sizes = np.array([b.shape[0] for b in bags], dtype=np.int64)
    state["bag_ptr"] = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    state["bag_rows"] = (np.concatenate(bags) if bags else np.zeros(0)).astype(np.int32)
    state["tree_draws"] = masks
    return state


#: From this many queries on, weights are built with the queries grouped by leaf.
_GROUP_QUERIES = 256


#: Fewest rows a thread gets: below this, starting threads costs more than it saves (a
#: probe asks about one point, a slice about a few dozen).
_MIN_PIECE = 256


def _chunks(m: int, n_jobs: int, size: int = 512):
    step = max(1, min(size, max(_MIN_PIECE, -(-m // max(1, n_jobs)))))
    return [(a, min(m, a + step)) for a in range(0, m, step)]


def _map(fn, pieces, n_jobs):
    if n_jobs <= 1 or len(pieces) <= 1:
        return [fn(p) for p in pieces]
    with ThreadPoolExecutor(max_workers=n_jobs) as pool:
        return list(pool.map(fn, pieces))


@dataclass(frozen=True, eq=False)
class ForestArrays:
    """The flat arrays of a fitted forest (see the module docstring)."""

    feature: np.ndarray
    threshold: np.ndarray
    left: np.ndarray
    right: np.ndarray
    node_start: np.ndarray
    leaf_ptr: np.ndarray
    leaf_rows: np.ndarray
    leaf_start: np.ndarray
    bag_ptr: np.ndarray
    bag_rows: np.ndarray
    tree_draws: np.ndarray
    n_train: int
    trees_per_bag: int

    #: storage layout written into pickles (see the module docstring)
    LAYOUT = 2

    @property
    def n_trees(self) -> int:
        return self.node_start.shape[0] - 1

    @property
    def nbytes(self) -> int:
        return sum(
            getattr(self, f).nbytes
            for f in (
                "feature", "threshold", "left", "right", "node_start", "leaf_ptr",
                "leaf_rows", "leaf_start", "bag_ptr", "bag_rows", "tree_draws",
            )
        )

    @property
    def n_bags(self) -> int:
        return self.bag_ptr.shape[0] - 1

    @property
    def trees_draw_whole_bag(self) -> bool:
        """True when every tree drew all its bag's rows (in-bag is then per bag)."""
        return self.tree_draws.shape[0] == 0

    @property
    def sample_ptr(self) -> np.ndarray:
        """Per-tree offsets into ``sample_rows`` (computed on demand)."""
        return _tree_rows_csr(self.bag_ptr, self.bag_rows, self.tree_draws,
                              self.trees_per_bag)[0]

    @property
    def sample_rows(self) -> np.ndarray:
        """Every tree's drawn rows, ascending, CSR by ``sample_ptr`` (computed on demand;
        for many trees ask once and keep it, or use ``tree_rows``)."""
        return _tree_rows_csr(self.bag_ptr, self.bag_rows, self.tree_draws,
                              self.trees_per_bag)[1]

    def tree_rows(self, t: int) -> np.ndarray:
        """Return the training rows tree ``t`` drew (int32, ascending)."""
        g = t // self.trees_per_bag
        rows = self.bag_rows[self.bag_ptr[g]:self.bag_ptr[g + 1]]
        if self.trees_draw_whole_bag:
            return rows.copy()
        bits = np.unpackbits(self.tree_draws[t], count=rows.shape[0]).astype(np.bool_)
        return rows[bits]

    def bag_inbag(self, rows: np.ndarray) -> np.ndarray:
        """Return the (len(rows), G) bool matrix: True where bag g holds training row i.

        When ``trees_draw_whole_bag`` this is ``inbag`` with one column per bag instead of
        per tree (B / G times smaller): tree t drew row i iff bag ``t // trees_per_bag``
        holds it. Otherwise a tree drew only part of its bag's rows; use ``inbag``.
        """
        return _bag_inbag_chunk(np.asarray(rows, dtype=np.int64), self.bag_ptr,
                                self.bag_rows, self.n_train)

    # -- pickling: the layout is recorded, older layouts are converted on load ------------
    def __getstate__(self):
        names = [f.name for f in fields(self)]
        state = {k: self.__dict__[k] for k in names}  # cached properties are dropped
        state["layout"] = self.LAYOUT
        return state

    def __setstate__(self, state):
        state = dict(state)
        layout = state.pop("layout", 1 if "sample_rows" in state else None)
        if layout == 1:
            state = _from_layout_1(state)
        elif layout != self.LAYOUT:
            raise ValueError(
                f"This forest was saved with storage layout {layout!r}; this version of "
                f"hedgerow reads layouts 1 and {self.LAYOUT} (a newer hedgerow wrote it, or "
                f"the file is not a hedgerow forest). Load it with the hedgerow that saved "
                f"it, or refit."
            )
        names = {f.name for f in fields(self)}
        missing = sorted(names - set(state))
        if missing:
            raise ValueError(f"A saved forest (layout {layout}) lacks the arrays {missing}; "
                             f"the file is damaged or not a hedgerow forest. Refit.")
        self.__dict__.update({k: state[k] for k in names})

    def apply(self, X: np.ndarray, n_jobs: int = 1) -> np.ndarray:
        """Return the (m, B) int32 matrix of global leaf ids of every query in every tree."""
        X = np.ascontiguousarray(X, dtype=np.float64)
        out = np.empty((X.shape[0], self.n_trees), dtype=np.int32)
        if self._children_adjacent:
            def run(ab):
                _apply_chunk_adjacent(X[ab[0]:ab[1]], self.feature, self.threshold,
                                      self.left, self.node_start, self.leaf_start,
                                      out[ab[0]:ab[1]])
        else:
            def run(ab):
                _apply_chunk(X[ab[0]:ab[1]], self.feature, self.threshold, self.left,
                             self.right, self.node_start, self.leaf_start, out[ab[0]:ab[1]])
        _map(run, _chunks(X.shape[0], n_jobs, size=2048), n_jobs)
        return out

    @cached_property
    def _children_adjacent(self) -> bool:
        # our builder numbers a node's children consecutively; checked, not assumed
        inner = self.feature >= 0
        return bool(np.all(self.right[inner] == self.left[inner] + 1))

    def inbag(self, rows: np.ndarray) -> np.ndarray:
        """Return the (len(rows), B) bool matrix: True where tree t drew training row i."""
        return _inbag_chunk(np.asarray(rows, dtype=np.int64), self.bag_ptr, self.bag_rows,
                            self.tree_draws, self.trees_per_bag, self.n_train)

    def weights(self, leaves: np.ndarray, usable: np.ndarray | None = None, n_jobs: int = 1):
        """Return (CSR weights m × n_train, number of usable trees per query).

        Queries are visited grouped by their leaves in the first trees (queries that share
        those leaves are close and share many leaves elsewhere, so the leaf rows they read
        are still in cache); each row is then copied once to its place in the given order.
        The result does not depend on the grouping.
        """
        m = leaves.shape[0]
        if m >= _GROUP_QUERIES and leaves.shape[1] > 0:
            keys = tuple(leaves[:, t] for t in range(min(3, leaves.shape[1]) - 1, -1, -1))
            order = np.lexsort(keys)
        else:
            order = None
        return self._weights_in_order(leaves, usable, n_jobs, order)

    def _weights_in_order(self, leaves, usable, n_jobs, order=None):
        """Weights of the queries in ``leaves``, visited in ``order`` (default: as given)."""
        m = leaves.shape[0]
        leaves = np.ascontiguousarray(leaves)
        u = (np.zeros((0, 0), dtype=np.bool_) if usable is None
             else np.ascontiguousarray(usable))
        pieces = _chunks(m, n_jobs)
        dest = np.arange(m) if order is None else np.asarray(order, dtype=np.int64)

        def run(ab):
            a, b = ab
            return _weights_chunk_auto(leaves, dest[a:b], u, self.leaf_ptr,
                                       self.leaf_rows, self.n_train)

        parts = _map(run, pieces, n_jobs)
        if not parts:
            return sp.csr_matrix((0, self.n_train)), np.zeros(0, dtype=np.int64)
        lengths = np.empty(m, dtype=np.int64)
        n_used = np.empty(m, dtype=np.int64)
        for (a, b), part in zip(pieces, parts, strict=True):
            lengths[dest[a:b]] = np.diff(part[0])
            n_used[dest[a:b]] = part[3]
        indptr = np.zeros(m + 1, dtype=np.int64)
        np.cumsum(lengths, out=indptr[1:])
        indices = np.empty(indptr[-1], dtype=np.int32)
        data = np.empty(indptr[-1])
        # chunks write disjoint rows: copy them in parallel (the first touch of the
        # fresh output pages is a large share of this step)
        _map(lambda job: _place_rows(job[1][0], job[1][1], job[1][2], dest[job[0][0]:job[0][1]],
                                     indptr, indices, data),
             list(zip(pieces, parts, strict=True)), n_jobs)
        W = sp.csr_matrix((data, indices, indptr), shape=(m, self.n_train), copy=False)
        W.has_sorted_indices = True
        return W, n_used

    def leaf_feature_means(self, F: np.ndarray) -> np.ndarray:
        """Return the (L, p) means of the rows' features ``F`` (n, p) over every leaf."""
        return _leaf_means_kernel(
            self.leaf_ptr, self.leaf_rows, np.ascontiguousarray(F, dtype=np.float64)
        )

    def weighted_sums(self, leaves, leaf_means, usable=None, n_jobs: int = 1):
        """Return (W @ F, usable trees per query) without forming W.

        ``leaf_means`` from ``leaf_feature_means(F)``: the forest weights average the
        leaf means of F over the usable trees, which equals the weighted sum.
        """
        empty = np.zeros((0, 0), dtype=np.bool_)

        def run(ab):
            a, b = ab
            u = empty if usable is None else np.ascontiguousarray(usable[a:b])
            return _gather_chunk(np.ascontiguousarray(leaves[a:b]), u, self.leaf_ptr, leaf_means)

        parts = _map(run, _chunks(leaves.shape[0], n_jobs), n_jobs)
        if not parts:
            return np.zeros((0, leaf_means.shape[1])), np.zeros(0, dtype=np.int64)
        return (np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts]))

    def leaf_means(self, y: np.ndarray) -> np.ndarray:
        """Return the mean of ``y`` over the fill rows of every leaf (NaN for empty leaves)."""
        ptr = self.leaf_ptr
        L = ptr.shape[0] - 1
        out = np.empty(L)
        # in blocks of whole leaves, so that neither y at the leaf rows (8 bytes per stored
        # row) nor the per-leaf temporaries exist for the whole forest at once; each
        # leaf's sum is one reduceat segment either way, so the bits do not depend on
        # the blocks
        lo = 0
        while lo < L:
            hi = int(np.searchsorted(ptr, ptr[lo] + _LEAF_MEAN_BLOCK, side="left"))
            hi = min(L, max(hi, lo + 1))
            sizes = np.diff(ptr[lo:hi + 1])
            starts = ptr[lo:hi]
            nonempty = sizes > 0
            sums = np.zeros(hi - lo)
            a, b = int(ptr[lo]), int(ptr[hi])
            if b > a:
                sums[nonempty] = np.add.reduceat(y[self.leaf_rows[a:b]], starts[nonempty] - a)
            with np.errstate(invalid="ignore", divide="ignore"):
                out[lo:hi] = np.where(nonempty, sums / np.maximum(sizes, 1), np.nan)
            lo = hi
        return out
