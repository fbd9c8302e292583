"""The batched local solve of the treatment-effect forest (compiled).

At a query x the effect forest solves the forest-weighted moment condition

    sum_i alpha_i(x) z_i (y~_i - z_i' theta) = 0  (+ ridge on the slope blocks)

with z_i = (1, w~_i, w~_i f_i, f_i) and f_i the local features of row i: the standardised
differences u_ij = (x_ij - x_j) / s_j of the correction columns j, then the squares u_ij^2
of some of them (the local quadratic of the bias-corrected interval). tau(x) = theta[1].
The per-tree influence terms the little bags average are

    psi_t = tau + g_t - mean_t g_t,   g_t = B_x * sum_{i in L_t(x)} alpha_i c' z_i r_i,

with c the row of M^-1 that gives tau (M the penalised weighted Gram matrix, held fixed:
the linearisation of VARIANCE-NOTES) and r_i the residual of the local fit.

``solve_effects`` runs one compiled pass per query over the fill rows of its leaves (no
weight matrix, no Python loop), in threads over blocks of queries. ``solve_effects_loop``
is the row-by-row numpy reference it is tested against.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
from numba import njit

__all__ = ["effect_design_size", "effect_penalty_path", "solve_effects", "solve_effects_loop"]

# Jitter added to the Gram matrix's diagonal, relative to its mean diagonal entry: keeps
# a rank-deficient neighbourhood (a constant column in every leaf) solvable.
_JITTER = 1e-12

# Fewest queries per thread (starting a thread for a probe costs more than it saves).
_MIN_BLOCK = 64


def effect_design_size(n_linear: int, n_squared: int) -> int:
    """Return k, the number of columns of z_i: 1, w~, and w~ f and f for every feature."""
    return 2 + 2 * (n_linear + n_squared)


@njit(cache=True, nogil=True, error_model="numpy")
def _solve_in_place(M, b):
    # Gaussian elimination with partial pivoting on copies; NaN where a pivot is zero
    k = M.shape[0]
    A = M.copy()
    x = b.copy()
    for j in range(k):
        p = j
        best = abs(A[j, j])
        for r in range(j + 1, k):
            if abs(A[r, j]) > best:
                best = abs(A[r, j])
                p = r
        if best == 0.0 or not np.isfinite(best):
            x[:] = np.nan
            return x
        if p != j:
            for c in range(k):
                t = A[j, c]
                A[j, c] = A[p, c]
                A[p, c] = t
            t = x[j]
            x[j] = x[p]
            x[p] = t
        for r in range(j + 1, k):
            f = A[r, j] / A[j, j]
            if f != 0.0:
                for c in range(j, k):
                    A[r, c] -= f * A[j, c]
                x[r] -= f * x[j]
    for j in range(k - 1, -1, -1):
        s = x[j]
        for c in range(j + 1, k):
            s -= A[j, c] * x[c]
        x[j] = s / A[j, j]
    return x


@njit(cache=True, nogil=True, error_model="numpy")
def _design_row(z, xi, q, wt, lin, sq, scale):
    # z = (1, w, w f, f), f = (u_lin, u_sq^2)
    p = lin.shape[0] + sq.shape[0]
    z[0] = 1.0
    z[1] = wt
    for j in range(lin.shape[0]):
        c = lin[j]
        u = (xi[c] - q[c]) / scale[c]
        z[2 + j] = wt * u
        z[2 + p + j] = u
    for j in range(sq.shape[0]):
        c = sq[j]
        u = (xi[c] - q[c]) / scale[c]
        z[2 + lin.shape[0] + j] = wt * u * u
        z[2 + p + lin.shape[0] + j] = u * u


@njit(cache=True, nogil=True, error_model="numpy")
def _effect_block(leaves, usable, has_usable, leaf_ptr, leaf_rows, X, Q, wt, yt, sw, lin,
                  sq, scale, penalty, out_theta, out_psi, want_S, out_S):
    m, B = leaves.shape
    k = out_theta.shape[1]
    M = np.empty((k, k))
    rhs = np.empty(k)
    e1 = np.zeros(k)
    e1[1] = 1.0
    g = np.empty(B)
    # the query's design rows, weights and outcomes, gathered once in the first pass
    # and read in order by the second (the leaves' rows are scattered in memory)
    cap = 1024
    Zb = np.empty((cap, k))
    ab = np.empty(cap)
    yb = np.empty(cap)
    for q in range(m):
        nk = 0
        total = 0
        for t in range(B):
            if has_usable and not usable[q, t]:
                continue
            leaf = leaves[q, t]
            size = leaf_ptr[leaf + 1] - leaf_ptr[leaf]
            if size > 0:
                nk += 1
                total += size
        if nk == 0:
            out_theta[q, :] = np.nan
            out_psi[q, :] = np.nan
            continue
        if total > cap:
            cap = 2 * total
            Zb = np.empty((cap, k))
            ab = np.empty(cap)
            yb = np.empty(cap)
        M[:, :] = 0.0
        rhs[:] = 0.0
        xq = Q[q]
        pos = 0
        for t in range(B):
            if has_usable and not usable[q, t]:
                continue
            leaf = leaves[q, t]
            a0, a1 = leaf_ptr[leaf], leaf_ptr[leaf + 1]
            if a1 == a0:
                continue
            base = 1.0 / ((a1 - a0) * nk)
            for s in range(a0, a1):
                i = leaf_rows[s]
                a = sw[i] * base
                z = Zb[pos]
                _design_row(z, X[i], xq, wt[i], lin, sq, scale)
                ab[pos] = a
                yb[pos] = yt[i]
                pos += 1
                for r in range(k):
                    ar = a * z[r]
                    rhs[r] += ar * yt[i]
                    for c in range(r, k):
                        M[r, c] += ar * z[c]
        for r in range(k):
            for c in range(r):
                M[r, c] = M[c, r]
        # penalty relative to each slope column's own local second moment
        for r in range(2, k):
            M[r, r] += penalty[r] * max(M[r, r], 1e-300)
        tr = 0.0
        for r in range(k):
            tr += M[r, r]
        for r in range(k):
            M[r, r] += _JITTER * tr / k
        theta = _solve_in_place(M, rhs)
        cvec = _solve_in_place(M, e1)  # M is symmetric: row 1 of its inverse
        out_theta[q, :] = theta
        gsum = 0.0
        pos = 0
        p = lin.shape[0] + sq.shape[0]
        if want_S:
            out_S[q, :, :] = 0.0
        for t in range(B):
            g[t] = np.nan
            if has_usable and not usable[q, t]:
                continue
            leaf = leaves[q, t]
            size = leaf_ptr[leaf + 1] - leaf_ptr[leaf]
            if size == 0:
                continue
            acc = 0.0
            for _ in range(size):
                fit = 0.0
                cz = 0.0
                for r in range(k):
                    fit += Zb[pos, r] * theta[r]
                    cz += cvec[r] * Zb[pos, r]
                acc += ab[pos] * cz * (yb[pos] - fit)
                if want_S:
                    # equivalent-kernel weight of tau times w~ u u' (the bias moment)
                    lw = ab[pos] * cz * Zb[pos, 1]
                    for r in range(lin.shape[0]):
                        for c in range(lin.shape[0]):
                            out_S[q, r, c] += lw * Zb[pos, 2 + p + r] * Zb[pos, 2 + p + c]
                pos += 1
            g[t] = acc * nk
            gsum += g[t]
        gmean = gsum / nk
        for t in range(B):
            out_psi[q, t] = theta[1] + g[t] - gmean


@njit(cache=True, nogil=True, error_model="numpy")
def _path_block(leaves, usable, has_usable, leaf_ptr, leaf_rows, X, Q, wt, yt, sw, lin, sq,
                scale, penalties, out_tau):
    # the Gram matrix once per query, then one solve per row of penalties
    m, B = leaves.shape
    k = penalties.shape[1]
    z = np.empty(k)
    M = np.empty((k, k))
    A = np.empty((k, k))
    rhs = np.empty(k)
    for q in range(m):
        nk = 0
        for t in range(B):
            if has_usable and not usable[q, t]:
                continue
            leaf = leaves[q, t]
            if leaf_ptr[leaf + 1] > leaf_ptr[leaf]:
                nk += 1
        if nk == 0:
            out_tau[q, :] = np.nan
            continue
        M[:, :] = 0.0
        rhs[:] = 0.0
        xq = Q[q]
        for t in range(B):
            if has_usable and not usable[q, t]:
                continue
            leaf = leaves[q, t]
            a0, a1 = leaf_ptr[leaf], leaf_ptr[leaf + 1]
            if a1 == a0:
                continue
            base = 1.0 / ((a1 - a0) * nk)
            for s in range(a0, a1):
                i = leaf_rows[s]
                a = sw[i] * base
                _design_row(z, X[i], xq, wt[i], lin, sq, scale)
                for r in range(k):
                    ar = a * z[r]
                    rhs[r] += ar * yt[i]
                    for c in range(r, k):
                        M[r, c] += ar * z[c]
        for r in range(k):
            for c in range(r):
                M[r, c] = M[c, r]
        for j in range(penalties.shape[0]):
            A[:, :] = M
            for r in range(2, k):
                A[r, r] += penalties[j, r] * max(M[r, r], 1e-300)
            tr = 0.0
            for r in range(k):
                tr += A[r, r]
            for r in range(k):
                A[r, r] += _JITTER * tr / k
            out_tau[q, j] = _solve_in_place(A, rhs)[1]


def _blocks(m: int, n_jobs: int):
    step = max(_MIN_BLOCK, -(-m // max(1, n_jobs)))
    step = min(step, 1024) if n_jobs > 1 else max(m, 1)
    return [(a, min(m, a + step)) for a in range(0, m, step)]


def _as_index(cols):
    return np.ascontiguousarray(np.asarray(cols, dtype=np.int64).ravel())


def solve_effects(forest, leaves, usable, X, Q, wt, yt, sw, scale, linear, squared,
                  penalty, n_jobs=1, bias_moment=False):
    """Return (theta (m, k), psi (m, B)) of the effect forest's local solve at queries Q.

    Parameters
    ----------
    forest : ForestArrays (``leaf_ptr``, ``leaf_rows``); leaves : (m, B) global leaf ids.
    usable : (m, B) bool or None (out-of-bag: the trees that did not draw the row).
    X, Q : training rows and queries, all columns; wt, yt : centred treatment and outcome;
    sw : sample weights; scale : per-column scale of the standardised differences.
    linear, squared : column indices of the linear and squared local features.
    penalty : float or (k,) ridge penalties, relative to each column's local second
        moment (entries 0 and 1, the intercept and tau, are ignored).
    n_jobs : threads over blocks of queries.

    bias_moment : also return S (m, p, p) = sum_i l_i w~_i u_i u_i' over the linear
        features, l_i the equivalent-kernel weight of tau (its bias is 1/2 tr(H S) for a
        truth tau with Hessian H, to leading order).

    theta[:, 1] is tau(x); rows with no usable non-empty leaf are NaN throughout.
    """
    lin, sq = _as_index(linear), _as_index(squared)
    k = effect_design_size(lin.size, sq.size)
    pen = np.broadcast_to(np.asarray(penalty, dtype=np.float64), (k,)).copy()
    leaves = np.ascontiguousarray(leaves)
    m, B = leaves.shape
    theta = np.empty((m, k))
    psi = np.empty((m, B))
    has_usable = usable is not None
    u = (np.ascontiguousarray(usable, dtype=np.bool_) if has_usable
         else np.zeros((0, 0), dtype=np.bool_))
    X = np.ascontiguousarray(X, dtype=np.float64)
    Q = np.ascontiguousarray(Q, dtype=np.float64)
    S = np.zeros((m, lin.size, lin.size) if bias_moment else (0, 0, 0))
    args = (forest.leaf_ptr, forest.leaf_rows, X)
    rest = (np.ascontiguousarray(wt, dtype=np.float64),
            np.ascontiguousarray(yt, dtype=np.float64),
            np.ascontiguousarray(sw, dtype=np.float64), lin, sq,
            np.ascontiguousarray(scale, dtype=np.float64), pen)

    def run(ab):
        a, b = ab
        _effect_block(leaves[a:b], u[a:b] if has_usable else u, has_usable, *args, Q[a:b],
                      *rest, theta[a:b], psi[a:b], bias_moment,
                      S[a:b] if bias_moment else S)

    pieces = _blocks(m, n_jobs)
    if n_jobs <= 1 or len(pieces) <= 1:
        for p in pieces:
            run(p)
    else:
        with ThreadPoolExecutor(max_workers=n_jobs) as pool:
            list(pool.map(run, pieces))
    return (theta, psi, S) if bias_moment else (theta, psi)


def effect_penalty_path(forest, leaves, usable, X, Q, wt, yt, sw, scale, linear, squared,
                        penalties, n_jobs=1):
    """Return tau (m, L) at the queries for each of L penalties (floats or (L, k) rows).

    The same solve as ``solve_effects`` (tau only), with each query's Gram matrix
    accumulated once and re-solved per penalty.
    """
    lin, sq = _as_index(linear), _as_index(squared)
    k = effect_design_size(lin.size, sq.size)
    pen = np.asarray(penalties, dtype=np.float64)
    pen = np.ascontiguousarray(np.broadcast_to(pen.reshape(pen.shape[0], -1),
                                               (pen.shape[0], k)))
    leaves = np.ascontiguousarray(leaves)
    m = leaves.shape[0]
    out = np.empty((m, pen.shape[0]))
    has_usable = usable is not None
    u = (np.ascontiguousarray(usable, dtype=np.bool_) if has_usable
         else np.zeros((0, 0), dtype=np.bool_))
    X = np.ascontiguousarray(X, dtype=np.float64)
    Q = np.ascontiguousarray(Q, dtype=np.float64)
    rest = (np.ascontiguousarray(wt, dtype=np.float64),
            np.ascontiguousarray(yt, dtype=np.float64),
            np.ascontiguousarray(sw, dtype=np.float64), lin, sq,
            np.ascontiguousarray(scale, dtype=np.float64), pen)

    def run(ab):
        a, b = ab
        _path_block(leaves[a:b], u[a:b] if has_usable else u, has_usable, forest.leaf_ptr,
                    forest.leaf_rows, X, Q[a:b], *rest, out[a:b])

    pieces = _blocks(m, n_jobs)
    if n_jobs <= 1 or len(pieces) <= 1:
        for p in pieces:
            run(p)
    else:
        with ThreadPoolExecutor(max_workers=n_jobs) as pool:
            list(pool.map(run, pieces))
    return out


def solve_effects_loop(forest, leaves, usable, X, Q, wt, yt, sw, scale, linear, squared,
                       penalty):
    """Return what ``solve_effects`` returns, one query at a time in numpy (the reference)."""
    lin, sq = _as_index(linear), _as_index(squared)
    k = effect_design_size(lin.size, sq.size)
    pen = np.broadcast_to(np.asarray(penalty, dtype=np.float64), (k,))
    m, B = leaves.shape
    theta_out = np.full((m, k), np.nan)
    psi_out = np.full((m, B), np.nan)
    for q in range(m):
        starts = forest.leaf_ptr[leaves[q]]
        sizes = forest.leaf_ptr[leaves[q] + 1] - starts
        keep = (sizes > 0) if usable is None else (usable[q] & (sizes > 0))
        nk = int(keep.sum())
        if nk == 0:
            continue
        st, sz = starts[keep], sizes[keep]
        tree_of = np.repeat(np.arange(nk), sz)
        offs = np.arange(sz.sum()) - np.repeat(np.cumsum(sz) - sz, sz)
        rows = forest.leaf_rows[np.repeat(st, sz) + offs]
        a = sw[rows] / (np.repeat(sz, sz) * nk)
        w = wt[rows]
        U = (X[rows] - Q[q]) / scale
        F = np.column_stack([U[:, lin], U[:, sq] ** 2])
        Zm = np.column_stack([np.ones_like(w), w, w[:, None] * F, F])
        Za = Zm * a[:, None]
        M = Za.T @ Zm
        rhs = Za.T @ yt[rows]
        diag = np.diag(M)[2:].copy()
        M[2:, 2:] += np.diag(pen[2:] * np.maximum(diag, 1e-300))
        M += _JITTER * np.trace(M) / k * np.eye(k)
        theta = np.linalg.solve(M, rhs)
        resid = yt[rows] - Zm @ theta
        g = np.linalg.solve(M, (Za * resid[:, None]).T)[1]
        per_tree = np.bincount(tree_of, weights=g, minlength=nk) * nk
        theta_out[q] = theta
        psi_out[q, np.flatnonzero(keep)] = theta[1] + per_tree - per_tree.mean()
    return theta_out, psi_out
