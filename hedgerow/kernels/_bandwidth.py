"""Bandwidth rules: Silverman's rule of thumb and leave-one-out least-squares CV.

Cross-validation needs no refits: for any linear smoother whose fit at ``x_i`` is a
weighted (penalised) least-squares fit, deleting row ``i`` gives the leave-one-out value
``(yhat_i - L_ii y_i) / (1 - L_ii)``, where ``L_ii`` is the hat-matrix diagonal. For the
local fits of :mod:`hedgerow.local`, ``L_ii = w_ii (M_i^{-1})_{00}`` because the
correction column of row ``i`` is zero at its own query. Rows with a leverage near one
are the exception: they are recomputed in one batch with the row left out of its own
weights (see :data:`LOO_DIRECT_LEVERAGE`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numba
import numpy as np

from hedgerow.kernels._kernels import (
    _CODES,
    _EXP_LOWEST,
    GAUSSIAN_TRUNCATION,
    KernelRows,
    _check_kernel,
    _exp_nonpositive,
)
from hedgerow.local import default_scale, moment_features, moments_from_sums, solve_local
from hedgerow.local._solver import _binary_magnitude

__all__ = [
    "CV_BANDWIDTH_RANGE",
    "CV_FLAT_FROM",
    "CV_FLAT_TOLERANCE",
    "CV_GRID_FACTORS",
    "CVCurve",
    "LOO_DIRECT_LEVERAGE",
    "loo_cv_error",
    "loo_cv_gradient",
    "loo_residuals",
    "select_bandwidth_cv",
    "silverman_bandwidth",
]

#: Common factors of the rule-of-thumb start walked over (downhill from 1, in steps of
#: 2) in the first stage of :func:`select_bandwidth_cv`.
CV_GRID_FACTORS = np.geomspace(1.0 / 16.0, 64.0, 11)

#: Bandwidths are searched within these multiples of the column scale (s.d.).
CV_BANDWIDTH_RANGE = (1e-3, 1e3)

#: Columns whose bandwidth ends above this many column scales are tried with a flat
#: kernel (bandwidth ``inf``).
CV_FLAT_FROM = 10.0

#: A flat kernel (or, for local linear, leaving a flat column out of the local line) is
#: kept when it raises the leave-one-out error by at most this share.
CV_FLAT_TOLERANCE = 1e-7

# L-BFGS-B stopping rules on the error relative to the variance of y, in log bandwidth.
# At most CV_MAX_EVALUATIONS evaluations per quasi-Newton round, CV_REFINE_EVALUATIONS
# for the re-tuning after columns became flat (it starts next to its optimum).
CV_MAX_EVALUATIONS = 25
CV_REFINE_EVALUATIONS = 10
CV_FTOL = 1e-7
CV_GTOL = 1e-5
# Each quasi-Newton round may lower a log bandwidth by at most CV_STEP_DOWN (a factor
# of 8); a round that ends on that floor starts another, up to CV_ROUNDS in all.
CV_STEP_DOWN = math.log(8.0)
CV_ROUNDS = 4


def silverman_bandwidth(X) -> np.ndarray:
    """Return Silverman's rule-of-thumb bandwidth for each column of ``X``.

    ``0.9 * min(sd, IQR / 1.34) * n ** (-1/5)`` with the sample standard deviation
    (ddof=1), from Silverman (1986), *Density Estimation for Statistics and Data
    Analysis*, section 3.4.2. Where the minimum is zero (for example a column with more than
    half its values tied) the larger of the two spreads is used, and 1.0 for a constant
    column.

    Parameters
    ----------
    X : array-like of shape (n, d)

    Returns
    -------
    ndarray of shape (d,)
    """
    X = np.asarray(X, dtype=np.float64)
    n = X.shape[0]
    # each column divided by a power of two near its largest magnitude (exact): the
    # spread of a column near 1e300 does not overflow and one near 1e-300 does not
    # underflow to "constant"; ordinary columns give the same bits as without it
    p = _binary_magnitude(np.abs(X).max(axis=0)) if n else np.ones(X.shape[1])
    Xs = X / p
    sd = Xs.std(axis=0, ddof=1) if n > 1 else np.zeros(X.shape[1])
    q75, q25 = np.percentile(Xs, [75, 25], axis=0)
    iqr = (q75 - q25) / 1.34
    spread = np.minimum(sd, iqr)
    spread = np.where(spread > 0, spread, np.maximum(sd, iqr))
    return np.where(spread > 0, 0.9 * spread * n ** (-0.2) * p, 0.9 * n ** (-0.2))


#: Rows whose hat-matrix diagonal exceeds this are left out of their own weights and
#: refitted directly (one batch) instead of through the hat-matrix identity.
LOO_DIRECT_LEVERAGE = 1.0 - 1e-4


#: From this many rows on, leave-one-out sums run over the rows within the kernel's reach
#: along one column only (see ``_reach_windows``).
CV_WINDOW_FROM = 3000



def _reach_windows(X, bandwidth, kernel):
    """Return ``(order, first, last)`` or None: rows within reach along one column.

    Every weight of a training query beyond ``reach`` bandwidths in any one column is
    exactly zero: compact kernels beyond 1, the Gaussian beyond ``sqrt(2 ln(1 /
    GAUSSIAN_TRUNCATION))`` (8.6), where it is truncated (its shift is zero for a
    training row, its own nearest row). With the rows sorted along the column where the
    bandwidth is the smallest share of the range (``order``), query ``order[p]`` needs
    only the sorted rows ``first[p]:last[p]``. None where that would keep most rows.
    """
    shares = _reach_shares(X, bandwidth, kernel)
    if shares is None:
        return None
    h, reach, share = shares
    c = int(np.argmin(share))
    if 2.0 * reach * share[c] > 0.8:
        return None
    order = np.argsort(X[:, c], kind="stable")
    xs = X[order, c]
    first = np.searchsorted(xs, xs - reach * h[c], side="left")
    last = np.searchsorted(xs, xs + reach * h[c], side="right")
    return order, first, last


# Queries per block of the reach blocks (a strip's queries, in order along the second
# column), and the strip width in bandwidths of the first column (a share of the reach).
_REACH_QUERIES = 64
_STRIP_SHARE = 0.5


def _reach_shares(X, bandwidth, kernel):
    """Return ``(bandwidths, reach, share)`` for restricting sums to rows within reach.

    ``share``: each column's bandwidth as a share of its range (inf where the bandwidth
    is infinite or the column constant). None below :data:`CV_WINDOW_FROM` rows or when
    no bandwidth is finite (every row reaches every row).
    """
    h = np.asarray(bandwidth, dtype=np.float64)
    if X.shape[0] < CV_WINDOW_FROM or not np.isfinite(h).any():
        return None
    span = np.ptp(X, axis=0)
    share = np.where(np.isfinite(h) & (span > 0), h / np.where(span > 0, span, 1.0), np.inf)
    return h, _reach(kernel), share


def _reach(kernel):
    """Distance (in bandwidths) beyond which every training query's weight is zero."""
    return (math.sqrt(-2.0 * math.log(GAUSSIAN_TRUNCATION)) if kernel == "gaussian"
            else 1.0) * (1.0 + 1e-9)


def _reach_blocks(X, bandwidth, kernel):
    """Return blocks ``[(queries, rows), ...]`` of training queries, or None.

    Every row is a query of exactly one block, and ``rows`` holds every row with a
    non-zero weight at any of the block's queries (with the row itself: shift zero).
    Two columns are used, those where the bandwidth is the smallest share of the range
    (``c0``, ``c1``): rows in strips of ``_STRIP_SHARE`` times the reach along ``c0``,
    ordered along ``c1`` within a strip; a block is up to ``_REACH_QUERIES`` consecutive
    queries of one strip, and its rows are, in every strip within reach, those within
    reach along ``c1`` of the block's ``c1`` range. The Gaussian (truncated where its
    squared distance exceeds ``2 ln(1 / GAUSSIAN_TRUNCATION)`` for a training query)
    reaches a disc of radius 8.6 bandwidths in (``c0``, ``c1``), so a strip at distance
    ``delta`` along ``c0`` keeps ``sqrt(reach^2 - delta^2)`` along ``c1``; compact
    kernels reach one bandwidth in each column. None below :data:`CV_WINDOW_FROM` rows or
    where the blocks would keep over 80% of all pairs.
    """
    n, d = X.shape
    shares = _reach_shares(X, bandwidth, kernel)
    if shares is None:
        return None
    h, reach, share = shares
    cols = np.argsort(share, kind="stable")[:2]
    cols = cols[np.isfinite(share[cols])]
    if not cols.size or 2.0 * reach * share[cols[0]] > 0.9:
        return None
    u0 = X[:, cols[0]] / h[cols[0]]
    u1 = X[:, cols[1]] / h[cols[1]] if cols.size > 1 else np.zeros(n)
    width = _STRIP_SHARE * reach
    strip = np.floor((u0 - u0.min()) / width).astype(np.int64)
    order = np.lexsort((u1, strip))
    strip, u0, u1 = strip[order], u0[order], u1[order]
    ids, starts = np.unique(strip, return_index=True)
    ends = np.append(starts[1:], n)
    lo0 = np.minimum.reduceat(u0, starts)
    hi0 = np.maximum.reduceat(u0, starts)
    near = int(math.ceil(reach / width)) + 1
    blocks, pairs = [], 0
    for a in range(ids.size):
        others = np.flatnonzero(np.abs(ids - ids[a]) <= near)
        for q0 in range(starts[a], ends[a], _REACH_QUERIES):
            q1 = min(ends[a], q0 + _REACH_QUERIES)
            qlo0, qhi0 = u0[q0:q1].min(), u0[q0:q1].max()
            qlo1, qhi1 = u1[q0], u1[q1 - 1]
            parts = []
            for b in others:
                gap = max(0.0, lo0[b] - qhi0, qlo0 - hi0[b])
                if gap > reach:
                    continue
                half = math.sqrt(reach * reach - gap * gap) if kernel == "gaussian" else reach
                seg = u1[starts[b]:ends[b]]
                j0 = starts[b] + np.searchsorted(seg, qlo1 - half, side="left")
                j1 = starts[b] + np.searchsorted(seg, qhi1 + half, side="right")
                if j1 > j0:
                    parts.append(np.arange(j0, j1))
            rows = order[np.concatenate(parts)]
            pairs += (q1 - q0) * rows.size
            blocks.append((order[q0:q1], rows))
    if pairs > 0.8 * float(n) * n:
        return None
    return blocks


def _windowed_sums(X, B, bandwidth, kernel, blocks):
    """Return ``W @ B`` over the training rows as queries, summed block by block."""
    R = np.empty((X.shape[0], B.shape[1]))
    for queries, rows in blocks:
        kr = KernelRows(X[rows], bandwidth, kernel)
        R[queries] = kr.sums(X[queries], B[rows], stable=False)
    return R


def _loo_parts(X, y, bandwidth, kernel, degree, scale, features=None, weights=None):
    """Return ``(resid, fit, leverage, direct, direct_fit, W)`` of the leave-one-out fits.

    ``resid`` are the leave-one-out residuals ``y_i - g_{-i}(x_i)`` (NaN where
    undefined), ``fit`` the local fits at the training rows with every row included,
    ``leverage`` the hat-matrix diagonal, ``direct`` the rows refitted directly and
    ``direct_fit`` their fits without themselves (None if there are none).

    Rows with leverage near one -- nearly alone in their neighbourhood -- are recomputed
    with the row excluded from its own weights: there ``1 - L_ii`` carries few correct
    digits, and Gaussian truncation against the row's own (self) weight may have dropped
    all of its neighbours. ``features`` are ``moment_features(X, y, scale, degree=degree)``
    when the caller has them (they do not depend on the bandwidth). ``weights``: an
    ``(n, n)`` array to hold the unnormalised weight matrix ``W`` where every row is
    summed over all rows (then ``R = W @ B`` is one product and the gradient reads ``W``
    instead of recomputing it); ``W`` is None otherwise.
    """
    # Unnormalised rows: leverages and fits do not depend on the scaling of a row. The
    # weighted sums come from dense kernel blocks; no n x n matrix is formed.
    B, centre = moment_features(X, y, scale, degree=degree) if features is None else features
    rows = KernelRows(X, bandwidth, kernel)
    # one fixed set of queries (the training rows): BLAS products (stable=False)
    blocks = _reach_blocks(X, bandwidth, kernel)
    W = None
    if blocks is not None:
        R = _windowed_sums(X, B, bandwidth, kernel, blocks)
    elif weights is not None:
        W = _all_weights(rows, X, weights)
        R = W @ B
    else:
        R = rows.sums(X, B, stable=False)
    moments = moments_from_sums(R, X, centre, scale, degree=degree)
    with warnings.catch_warnings():
        # Empty rows only arise in the direct refits; they are reported as NaN.
        warnings.simplefilter("ignore", RuntimeWarning)
        fit = solve_local(moments, 0.0, first_row=True)
        # A row's own unnormalised weight is k(0) = 1: it is its own nearest row, so the
        # Gaussian shift is zero (a test checks the diagonal).
        leverage = fit.gram_inv[:, 0, 0]
        with np.errstate(divide="ignore", invalid="ignore"):
            resid = (y - fit.intercept) / (1.0 - leverage)
        direct = np.flatnonzero(~(leverage <= LOO_DIRECT_LEVERAGE))
        fd = None
        if direct.size:
            Xd = X[direct]
            Rd = rows.sums(Xd, B, exclude=direct)
            fd = solve_local(moments_from_sums(Rd, Xd, centre, scale, degree=degree), 0.0,
                             first_row=True)
            resid[direct] = y[direct] - fd.intercept
    return resid, fit, leverage, direct, fd, W


def _all_weights(rows, X, out):
    """Write the unnormalised weights of every training row at every training query."""
    from hedgerow.kernels._kernels import _block_weights

    Qs, skip = rows._queries(X, None)
    nnz = np.empty(X.shape[0], dtype=np.int64)
    _block_weights(rows.XT, Qs, 0, skip, rows.code, -math.log(GAUSSIAN_TRUNCATION), out, nnz)
    return out


#: The search keeps the whole weight matrix (Gaussian kernel) up to this many entries
#: (32 MiB): the gradient then reads the weights of the sums.
_KEEP_WEIGHTS_ENTRIES = 1 << 22


def _loo_residuals(X, y, bandwidth, kernel, degree, scale, features=None):
    """Return the leave-one-out residuals ``y_i - g_{-i}(x_i)`` (see :func:`_loo_parts`)."""
    return _loo_parts(X, y, bandwidth, kernel, degree, scale, features)[0]


@numba.njit(cache=True, fastmath={"reassoc", "contract"})
def _gradient_sums(XT, XsT, y, code, log_cut, g, beta, resid, factor, alone, first, last,
                   out):
    """Add ``sum_i factor_i sum_j w_ij a_ij (-e_ij - r_i a_ij) phi(u_ijc)`` to ``out[c]``.

    Query ``i`` runs over the training rows (columns of ``XT``, centred and divided by
    the bandwidths; ``XsT`` the same divided by the local solve's scales, no rows for
    degree 0). ``a_ij = g_i^T z_ij`` is row ``j``'s unnormalised equivalent-kernel
    factor in the fit at ``x_i`` (``g_i`` the first row of the inverse Gram matrix),
    ``e_ij = y_j - beta_i^T z_ij`` its residual from that local line, and
    ``phi(u) = -u k'(u) / k(u)`` the derivative of a kernel factor in log bandwidth over
    the factor: ``u^2`` (Gaussian), ``2 u^2 / (1 - u^2)`` (Epanechnikov),
    ``9 |u|^3 / (1 - |u|^3)`` (tricube). A query marked ``alone`` (refitted without
    itself) leaves its own row out and, for the Gaussian, shifts and truncates its
    weights by its nearest other row, as the refit did. Query ``i`` sums over the rows
    ``first[i]:last[i]`` only (the rows within the kernel's reach; all for ``alone``).
    """
    d, n = XT.shape
    k = XsT.shape[0]
    w = np.empty(n)
    v = np.empty(n)
    e = np.empty(n)
    for i in range(n):
        if factor[i] == 0.0:
            continue
        j0, j1 = first[i], last[i]
        if code == 0:
            for j in range(j0, j1):
                w[j] = 0.0
            for c in range(d):
                q = XT[c, i]
                row = XT[c]
                for j in range(j0, j1):
                    t = row[j] - q
                    w[j] += t * t
            sh = 0.0
            if alone[i]:
                w[i] = np.inf
                sh = np.inf
                for j in range(j0, j1):
                    sh = min(sh, w[j])
                if not np.isfinite(sh):
                    sh = 0.0
            cut = 2.0 * log_cut + sh
            for j in range(j0, j1):
                dist = w[j]
                w[j] = (_exp_nonpositive(max(-0.5 * (dist - sh), _EXP_LOWEST)) if dist <= cut
                        else 0.0)
        else:
            for j in range(j0, j1):
                w[j] = 1.0
            for c in range(d):
                q = XT[c, i]
                row = XT[c]
                for j in range(j0, j1):
                    t = abs(row[j] - q)
                    if code == 1:
                        f = 1.0 - t * t
                    else:
                        a = 1.0 - t * t * t
                        f = a * a * a
                    w[j] *= max(f, 0.0)
            if alone[i]:
                w[i] = 0.0
        # a_ij and e_ij, accumulated column by column (z_ij = [1, x_j - x_i] / scale)
        a0 = g[i, 0]
        b0 = beta[i, 0]
        r = resid[i]
        for j in range(j0, j1):
            v[j] = a0
        for j in range(j0, j1):
            e[j] = y[j] - b0
        for c in range(k):
            q = XsT[c, i]
            gc = g[i, 1 + c]
            bc = beta[i, 1 + c]
            row = XsT[c]
            for j in range(j0, j1):
                z = row[j] - q
                v[j] += gc * z
                e[j] -= bc * z
        for j in range(j0, j1):
            a = v[j]
            v[j] = factor[i] * w[j] * a * (-e[j] - r * a)
        for c in range(d):
            q = XT[c, i]
            row = XT[c]
            acc = 0.0
            for j in range(j0, j1):
                t = row[j] - q
                t2 = t * t
                if code == 0:
                    phi = t2
                elif code == 1:
                    phi = 2.0 * t2 / max(1.0 - t2, 1e-300)
                else:
                    t3 = t2 * abs(t)
                    phi = 9.0 * t3 / max(1.0 - t3, 1e-300)
                acc += v[j] * phi if v[j] != 0.0 else 0.0
            out[c] += acc


@numba.njit(cache=True, fastmath={"reassoc", "contract"})
def _gradient_block_terms(W, A, yw, factor, r, out):
    """Write ``factor_i w_ij a_ij (A'_ij - y_j - r_i a_ij)`` into ``out`` (see below).

    ``A`` holds ``a_ij`` in its first half of rows and ``beta_i^T z_ij`` in the second,
    so that ``A'_ij - y_j = -e_ij``.
    """
    m, p = W.shape
    for i in range(m):
        f = factor[i]
        ri = r[i]
        row = W[i]
        res = out[i]
        a = A[i]
        b = A[m + i]
        if f == 0.0:
            res[:] = 0.0
            continue
        for j in range(p):
            aj = a[j]
            res[j] = f * row[j] * aj * (b[j] - yw[j] - ri * aj)


def _gaussian_gradient_blocks(XT, XsT, y, log_cut, g, beta, r, factor, blocks, out,
                              weights=None):
    """Add the Gaussian gradient terms of the queries with ``factor != 0`` to ``out``.

    The same sum as :func:`_gradient_sums` (``phi(u) = u^2``), for queries that keep their
    own row (shift zero), block by block (``blocks``: ``(queries, rows)`` index arrays,
    ``rows`` None for all, ``queries`` then a slice): the weights of a block over its
    rows from the compiled dense-block loop (or the rows of ``weights``, the whole matrix,
    when given), ``a_ij`` and ``beta_i^T z_ij`` as one BLAS product of the block's
    ``[g_i; beta_i]`` (expanded at the block's mean) with ``[1, x_j]``, and
    ``sum_j v_ij (u_jc - u_ic)^2`` expanded into one product of ``v`` with
    ``[u_j, u_j^2, 1]`` (``u`` centred at the block's mean too, so that the expansion
    loses few digits).
    """
    from hedgerow.kernels._kernels import _block_weights

    d, n = XT.shape
    k = XsT.shape[0]
    U = XT.T
    Xs = XsT.T
    for queries, rows in blocks:
        if not isinstance(queries, slice):
            queries = queries[factor[queries] != 0.0]
        elif not factor[queries].any():
            continue
        m = factor[queries].size
        if not m:
            continue
        Ur, Xr, yr = (U, Xs, y) if rows is None else (U[rows], Xs[rows], y[rows])
        Uq = U[queries]
        mu = Uq.mean(axis=0)
        Uw = Ur - mu
        Qs = np.ascontiguousarray(Uq - mu)
        p = Uw.shape[0]
        if weights is not None:
            W = weights[queries]
        else:
            W = np.empty((m, p))
            nnz = np.empty(m, dtype=np.int64)
            _block_weights(np.ascontiguousarray(Uw.T), Qs, 0,
                           np.full(m, -1, dtype=np.int64), 0, log_cut, W, nnz)
        V = np.empty((m, p))
        # a_ij = g_i0 + sum_c g_ic (xs_jc - xs_ic): coefficients of [1, xs_j - nu]
        Xq = Xs[queries]
        nu = Xq.mean(axis=0) if k else np.zeros(0)
        Z = np.empty((p, k + 1))
        Z[:, 0] = 1.0
        Z[:, 1:] = Xr - nu
        coef = np.concatenate([g[queries], beta[queries]], axis=0)
        if k:
            shift = np.concatenate([Xq - nu, Xq - nu], axis=0)
            coef[:, 0] -= np.einsum("ik,ik->i", coef[:, 1:], shift)
        A = coef @ Z.T
        _gradient_block_terms(W, A, np.ascontiguousarray(yr), factor[queries], r[queries], V)
        F = np.empty((p, 2 * d + 1))
        F[:, :d] = Uw
        F[:, d:2 * d] = Uw * Uw
        F[:, 2 * d] = 1.0
        P = V @ F
        out += (P[:, d:2 * d] - 2.0 * Qs * P[:, :d] + Qs * Qs * P[:, 2 * d:]).sum(axis=0)


# Weights per query block of the blocked Gaussian gradient (512 KiB of doubles).
_GRADIENT_BLOCK_ENTRIES = 1 << 16


def _loo_gradient(X, y, bandwidth, kernel, degree, scale, parts):
    """Return the gradient of the leave-one-out error in log bandwidth (see below).

    With ``r_i = (y_i - yhat_i) / (1 - L_ii)``, ``yhat_i = e_0^T M_i^{-1} m_i`` and
    ``L_ii = e_0^T M_i^{-1} e_0`` (``M_i = sum_j w_ij z_j z_j^T``, ``m_i = sum_j w_ij z_j
    y_j``, unnormalised weights), a change ``dw_ij`` of the weights changes
    ``yhat_i`` by ``g^T (dm - dM beta)`` and ``L_ii`` by ``-g^T dM g``, so

        dr_i = sum_j dw_ij a_ij (-e_ij - r_i a_ij) / (1 - L_ii)

    with ``a_ij = g_i^T z_j`` and ``e_ij = y_j - beta_i^T z_j``; and
    ``dw_ij / d log h_c = w_ij phi(u_ijc)``. The row's own weight does not depend on the
    bandwidth. A row refitted directly (leverage near one) has no hat-matrix term: its
    ``dr_i = -dyhat_{-i}`` uses ``g`` and ``beta`` of its fit without itself. Columns
    with an infinite bandwidth get 0.
    """
    resid, fit, leverage, direct, fd, W = parts
    n, d = X.shape
    h = np.asarray(bandwidth, dtype=np.float64)
    centre = X.mean(axis=0)
    XT = np.ascontiguousarray(((X - centre) / h).T)
    if degree:
        XsT = np.ascontiguousarray(((X - centre) / scale).T)
        beta = np.ascontiguousarray(np.column_stack([fit.intercept, fit.slopes_std]))
    else:
        XsT = np.empty((0, n))
        beta = np.ascontiguousarray(fit.intercept[:, None])
    g = np.ascontiguousarray(fit.gram_inv[:, 0, :])
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = resid / (1.0 - leverage)
    r = resid.copy()
    alone = np.zeros(n, dtype=np.bool_)
    alone[direct] = True
    if direct.size:
        g[direct] = fd.gram_inv[:, 0, :]
        beta[direct, 0] = fd.intercept
        if degree:
            beta[direct, 1:] = fd.slopes_std
        factor[direct] = resid[direct]
        r[direct] = 0.0
    bad = ~(np.isfinite(factor) & np.isfinite(g).all(axis=1) & np.isfinite(beta).all(axis=1))
    factor[bad] = 0.0
    r[bad] = 0.0
    g[bad] = 0.0
    beta[bad] = 0.0
    out = np.zeros(d)
    code = _CODES[kernel]
    log_cut = -math.log(GAUSSIAN_TRUNCATION)
    yy = np.ascontiguousarray(y)
    if code == 0:
        # dense blocks and BLAS for the rows in the hat-matrix identity; the few rows
        # refitted alone (their own shift, all rows) through the row-by-row loop below
        blocks = None if W is not None else _reach_blocks(X, h, kernel)
        if blocks is None:
            step = max(8, _GRADIENT_BLOCK_ENTRIES // max(n, 1))
            blocks = [(slice(i, min(n, i + step)), None) for i in range(0, n, step)]
        _gaussian_gradient_blocks(XT, XsT, yy, log_cut, g, beta, r,
                                  np.where(alone, 0.0, factor), blocks, out, W)
        factor = np.where(alone, factor, 0.0)
        if factor.any():
            first, last = np.zeros(n, dtype=np.int64), np.full(n, n, dtype=np.int64)
            _gradient_sums(XT, XsT, yy, code, log_cut, g, beta, r, factor, alone, first,
                           last, out)
    else:
        windows = _reach_windows(X, h, kernel)
        if windows is None:
            first, last = np.zeros(n, dtype=np.int64), np.full(n, n, dtype=np.int64)
        else:  # the sums do not depend on the order of the rows: sort them
            order, first, last = windows
            XT, XsT = np.ascontiguousarray(XT[:, order]), np.ascontiguousarray(XsT[:, order])
            g, beta = np.ascontiguousarray(g[order]), np.ascontiguousarray(beta[order])
            r, factor, alone = r[order], factor[order], alone[order]
            yy = np.ascontiguousarray(y[order])
            first, last = first.astype(np.int64), last.astype(np.int64)
            first[alone], last[alone] = 0, n
        _gradient_sums(XT, XsT, yy, code, log_cut, g, beta, r, factor, alone, first, last,
                       out)
    out *= 2.0 / n
    out[np.isinf(h)] = 0.0
    return out


def loo_cv_gradient(X, y, bandwidth, kernel: str = "gaussian", degree: int = 0):
    """Return the leave-one-out error and its gradient in the log bandwidths.

    Parameters as in :func:`loo_cv_error`. The gradient is in closed form from the same
    weighted sums (derivation in ``_loo_gradient``): ``d CV / d log h_c`` per column.

    Returns
    -------
    error : float
    gradient : ndarray of shape (d,)
    """
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    _check_kernel(kernel)
    h = np.asarray(bandwidth, dtype=np.float64)
    scale = default_scale(X)
    parts = _loo_parts(X, y, h, kernel, degree, scale)
    resid = parts[0]
    if not np.all(np.isfinite(resid)):
        return np.inf, np.full(X.shape[1], np.nan)
    return float(np.mean(resid**2)), _loo_gradient(X, y, h, kernel, degree, scale, parts)


def loo_residuals(X, y, bandwidth, kernel: str, degree: int, scale) -> np.ndarray:
    """Return the leave-one-out residuals ``y_i - g_{-i}(x_i)`` of a kernel smoother.

    ``bandwidth`` per column in the units of ``X``; ``scale`` the column scales of the
    local solve. NaN where no other row carries weight.
    """
    return _loo_residuals(
        np.asarray(X, dtype=np.float64), np.asarray(y, dtype=np.float64),
        np.asarray(bandwidth, dtype=np.float64), kernel, degree, scale,
    )


def loo_cv_error(X, y, bandwidth, kernel: str = "gaussian", degree: int = 0) -> float:
    """Return the leave-one-out mean squared error of a kernel smoother.

    ``CV(h) = n^{-1} sum_i (y_i - g_{-i}(x_i))^2`` with ``g_{-i}`` the smoother fitted
    without row ``i``, computed from the hat-matrix diagonal (no refits).

    Parameters
    ----------
    X : array-like of shape (n, d)
    y : array-like of shape (n,)
    bandwidth : array-like of shape (d,)
        Bandwidth per column in the units of ``X``.
    kernel : {"gaussian", "epanechnikov", "tricube"}, default="gaussian"
    degree : {0, 1}, default=0
        0 for Nadaraya--Watson, 1 for local linear.

    Returns
    -------
    float
        The error; ``inf`` when some row has no other row inside a compact kernel's
        support (its leave-one-out fit is undefined).
    """
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    resid = _loo_residuals(X, y, bandwidth, kernel, degree, default_scale(X))
    if not np.all(np.isfinite(resid)):
        return np.inf
    return float(np.mean(resid**2))


@dataclass(frozen=True)
class CVCurve:
    """Record of a leave-one-out bandwidth search, as returned by select_bandwidth_cv.

    Attributes
    ----------
    grid_bandwidth : ndarray of shape (G, d)
        First stage: common multiples (``grid_factor``) of the Silverman bandwidths, in
        the units of the columns.
    grid_factor : ndarray of shape (G,)
    grid_loo_error : ndarray of shape (G,)
        Leave-one-out mean squared error at each grid point (``inf`` where undefined).
    path_bandwidth : ndarray of shape (T, d)
        Later stages: every bandwidth vector evaluated by the quasi-Newton search and the
        flat-column checks (``inf`` where a column's kernel was made flat).
    path_loo_error : ndarray of shape (T,)
    bandwidth : ndarray of shape (d,)
        The selected bandwidths; ``inf`` for a column the kernel is flat in.
    loo_error : float
        Leave-one-out error at ``bandwidth`` (and without the ``ignored`` columns).
    ignored : ndarray of shape (d,), bool
        Columns the selected smoother does not use at all. For local constant fits these
        are the columns with an infinite bandwidth; a local linear fit keeps such a
        column as one global slope unless leaving it out of the local line too does not
        raise the error (then it is ignored).
    """

    grid_bandwidth: np.ndarray
    grid_factor: np.ndarray
    grid_loo_error: np.ndarray
    path_bandwidth: np.ndarray
    path_loo_error: np.ndarray
    bandwidth: np.ndarray
    loo_error: float
    ignored: np.ndarray


def select_bandwidth_cv(X, y, kernel: str = "gaussian", degree: int = 0, *,
                        progress=False) -> CVCurve:
    """Return the bandwidths minimising leave-one-out CV, one per column, with the search.

    Stage 1 evaluates :data:`CV_GRID_FACTORS` times the Silverman bandwidths (a common
    factor, log grid), so that the next stage starts near the right overall scale and
    not in a poor local minimum. Stage 2 minimises the error over all log bandwidths at
    once by L-BFGS-B (``scipy.optimize.minimize``) from the best grid point, with the
    closed-form gradient of :func:`loo_cv_gradient` (one weighted-sum pass more per
    evaluation, however many columns), within :data:`CV_BANDWIDTH_RANGE` column scales.
    Stage 3 makes the kernel flat (bandwidth ``inf``) in every column whose bandwidth
    ended above :data:`CV_FLAT_FROM` column scales, where that raises the error by at
    most :data:`CV_FLAT_TOLERANCE` (relative): a column the response does not depend on
    drifts to large bandwidths and drops out of the kernel (Hall, Li & Racine 2007,
    *Review of Economics and Statistics* 89(4)). A local linear fit then still has a
    global slope in such a column; it is left out of the local line too where that does
    not raise the error by more than the same tolerance (``CVCurve.ignored``). Stage 4
    re-tunes the remaining finite bandwidths by L-BFGS-B once columns became flat.

    Parameters
    ----------
    X : array-like of shape (n, d)
    y : array-like of shape (n,)
    kernel : {"gaussian", "epanechnikov", "tricube"}, default="gaussian"
    degree : {0, 1}, default=0
    progress : bool or RunControl, default=False
        Show a bar counting the leave-one-out evaluations (their number depends on the
        search, so the bar has no total). Ctrl-C (or a cancelled RunControl) stops the
        search by raising; an estimator's fit then keeps its earlier state.

    Returns
    -------
    CVCurve
    """
    from hedgerow._progress import progress_bar

    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    _check_kernel(kernel)
    label = "local linear" if degree else "Nadaraya-Watson"
    bar = progress_bar(None, f"{label} bandwidths (leave-one-out CV)", progress)
    try:
        with _one_blas_thread():
            return _Search(X, y, kernel, degree, bar).run()
    finally:
        bar.close()


def _one_blas_thread():
    """Return a context running BLAS on one thread.

    The search's products are small (a block of about 64 queries times n rows times a
    few dozen features): with two threads on a busy two-core machine one of them waits
    for a core, and a product measured 40x slower than single-threaded.
    """
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


class _Search:
    """The three stages of :func:`select_bandwidth_cv`, with one cache of evaluations."""

    def __init__(self, X, y, kernel, degree, bar):
        self.X, self.y, self.kernel, self.degree, self.bar = X, y, kernel, degree, bar
        self.d = X.shape[1]
        self.scale = default_scale(X)
        self.features = moment_features(X, y, self.scale, degree=degree)
        self.base = silverman_bandwidth(X)
        self.lo, self.hi = CV_BANDWIDTH_RANGE[0] * self.scale, CV_BANDWIDTH_RANGE[1] * self.scale
        # the objective handed to the optimiser is relative to the variance of y
        spread = float(np.var(y)) if y.size else 0.0
        self.unit = spread if spread > 0 else 1.0
        self.seen: dict[bytes, tuple[float, np.ndarray | None]] = {}
        self.path_h: list[np.ndarray] = []
        self.path_e: list[float] = []
        self.drop_results: dict[bytes, float] = {}
        self._parts = None  # (key, leave-one-out parts) of the latest evaluation
        n = X.shape[0]
        self._weights = (np.empty((n, n)) if kernel == "gaussian" and n * n
                         <= _KEEP_WEIGHTS_ENTRIES else None)

    def evaluate(self, h, gradient=False, record=True):
        """Return ``(error, gradient or None)`` at ``h``; each new evaluation is a step."""
        key = np.asarray(h, dtype=np.float64).tobytes()
        hit = self.seen.get(key)
        if hit is not None and (hit[1] is not None or not gradient):
            return hit
        if hit is not None and self._parts is not None and self._parts[0] == key:
            parts = self._parts[1]  # the error is known here: only the gradient is new
        else:
            parts = _loo_parts(self.X, self.y, h, self.kernel, self.degree, self.scale,
                               self.features, self._weights)
        # kept for a gradient asked for later at the same point (the start of stage 2
        # is the best point of stage 1)
        self._parts = (key, parts)
        resid = parts[0]
        if np.all(np.isfinite(resid)):
            err = float(np.mean(resid**2))
            grad = (_loo_gradient(self.X, self.y, h, self.kernel, self.degree, self.scale,
                                  parts) if gradient else None)
        else:
            err, grad = np.inf, (np.zeros(self.d) if gradient else None)
        self.seen[key] = (err, grad)
        self.bar.update(1)
        if record:
            self.path_h.append(np.array(h, dtype=np.float64))
            self.path_e.append(err)
        return err, grad

    def evaluate_without(self, h, drop):
        """Return the error with the columns ``drop`` left out entirely (one step)."""
        key = np.asarray(drop).tobytes() + np.asarray(h, dtype=np.float64).tobytes()
        if key not in self.drop_results:
            keep = ~drop
            Xk = np.ascontiguousarray(self.X[:, keep])
            resid = _loo_residuals(Xk, self.y, h[keep], self.kernel, self.degree,
                                   self.scale[keep])
            self.drop_results[key] = (float(np.mean(resid**2)) if np.all(np.isfinite(resid))
                                      else np.inf)
            self.bar.update(1)
            self.path_h.append(np.where(drop, np.inf, h))
            self.path_e.append(self.drop_results[key])
        return self.drop_results[key]

    def start(self):
        """Return the rule-of-thumb start: the normal reference rule in d dimensions.

        ``spread_j * (4 / (d + 2)) ** (1 / (d + 4)) * n ** (-1 / (d + 4))`` with
        Silverman's robust spread (Silverman 1986, eq. 4.14, per column): Silverman's
        one-dimensional rule is far too narrow for a product kernel over many columns.
        """
        n, d = self.X.shape
        spread = self.base / (0.9 * max(n, 1) ** (-0.2))
        return spread * (4.0 / (d + 2.0)) ** (1.0 / (d + 4.0)) * max(n, 1) ** (-1.0 / (d + 4.0))

    def common_factor(self, start):
        """Stage 1: walk over common factors of ``start`` in steps of 2, downhill."""
        factors = CV_GRID_FACTORS
        errors = np.full(factors.size, np.nan)
        origin = int(np.argmin(np.abs(np.log(factors))))  # the factor 1

        def at(i):
            if np.isnan(errors[i]):
                h = np.clip(factors[i] * start, self.lo, self.hi)
                errors[i] = self.evaluate(h, record=False)[0]
            return errors[i]

        best = origin
        # narrower first: the rule of thumb tends to oversmooth a curved response, and
        # narrow bandwidths are the cheap ones from CV_WINDOW_FROM rows on
        for step in (-1, 1):
            i = origin
            while 0 <= i + step < factors.size and at(i + step) < at(i):
                i += step
            if at(i) < at(best):
                best = i
            if i != origin:
                break  # moved downhill one way: the other way is uphill
        done = ~np.isnan(errors)
        grid_h = np.clip(factors[done, None] * start[None, :], self.lo, self.hi)
        return grid_h, factors[done], errors[done]

    def run(self):
        grid_h, grid_f, grid_e = self.common_factor(self.start())
        best = int(np.argmin(grid_e))
        h, err = grid_h[best].copy(), float(grid_e[best])
        ignored = np.zeros(self.d, dtype=bool)
        if np.isfinite(err):
            penalty = 10.0 * err / self.unit  # stands in for an undefined error

            def objective(theta):
                e, g = self.evaluate(np.exp(theta), gradient=True)
                if not np.isfinite(e):
                    return penalty, -np.ones(self.d) * penalty
                return e / self.unit, g / self.unit

            log_lo, log_hi = np.log(self.lo), np.log(self.hi)
            for _round in range(CV_ROUNDS):
                # A box below the start keeps the first steps from jumping into the
                # nearest-neighbour plateau of tiny bandwidths; upward moves are free.
                floor = np.maximum(np.log(h) - CV_STEP_DOWN, log_lo)
                res = self._quasi_newton(objective, np.log(h), floor, log_hi)
                h, err = self._best(h, err)
                if not np.any((res.x <= floor + 1e-9) & (floor > log_lo)):
                    break
            h, err, ignored = self._flatten(h, err)
            refined, err = self._refine(h, err, ignored)
            if not np.array_equal(refined, h):  # re-tuned columns may have widened
                h, err, more = self._flatten(refined, err, ignored)
                ignored |= more
        return CVCurve(
            grid_bandwidth=grid_h,
            grid_factor=grid_f,
            grid_loo_error=grid_e,
            path_bandwidth=np.array(self.path_h).reshape(-1, self.d),
            path_loo_error=np.array(self.path_e),
            bandwidth=h,
            loo_error=float(err),
            ignored=ignored,
        )

    def _quasi_newton(self, objective, theta, lo, hi, budget=None):
        from scipy.optimize import minimize

        return minimize(objective, theta, jac=True, method="L-BFGS-B",
                        bounds=list(zip(lo, hi, strict=True)),
                        options={"maxfun": budget or CV_MAX_EVALUATIONS, "ftol": CV_FTOL,
                                 "gtol": CV_GTOL})

    def _refine(self, h, err, ignored):
        """Stage 4: once columns are flat or dropped, re-tune the others' bandwidths.

        Their best values move when a flat column leaves the local line. One L-BFGS-B
        run over the finite bandwidths of the remaining columns, from ``h``.
        """
        keep = ~ignored
        tune = np.isfinite(h)[keep]
        if tune.all() and keep.all() or not tune.any():
            return h, err
        sub = _Search(np.ascontiguousarray(self.X[:, keep]), self.y, self.kernel,
                      self.degree, self.bar)
        hk = h[keep].copy()
        penalty = 10.0 * err / self.unit

        def objective(theta):
            trial = hk.copy()
            trial[tune] = np.exp(theta)
            e, g = sub.evaluate(trial, gradient=True)
            if not np.isfinite(e):
                return penalty, -np.ones(theta.size) * penalty
            return e / self.unit, g[tune] / self.unit

        theta = np.log(hk[tune])
        self._quasi_newton(objective, theta, np.maximum(theta - CV_STEP_DOWN,
                                                        np.log(sub.lo[tune])),
                           np.log(sub.hi[tune]), CV_REFINE_EVALUATIONS)
        for trial, e in zip(sub.path_h, sub.path_e, strict=True):
            full = np.where(ignored, np.inf, h)
            full[keep] = trial
            self.path_h.append(full)
            self.path_e.append(e)
            if e < err:
                h, err = np.where(ignored, h, full), e
        return h, err

    def _best(self, h, err):
        """Return the best evaluated point of the quasi-Newton stage (or ``h``)."""
        if self.path_e:
            i = int(np.argmin(self.path_e))
            if self.path_e[i] < err:
                return self.path_h[i].copy(), self.path_e[i]
        return h, err

    def _accept(self, trial_err, err):
        return trial_err <= err * (1.0 + CV_FLAT_TOLERANCE)

    def _flatten(self, h, err, ignored=None):
        """Stage 3: flat kernels in wide columns, then (local linear) drop them.

        ``ignored``: columns already left out (a second pass after stage 4).
        """
        before = np.zeros(self.d, dtype=bool) if ignored is None else ignored
        wide = np.flatnonzero((h >= CV_FLAT_FROM * self.scale) & np.isfinite(h) & ~before)
        if wide.size:
            trials = [wide] + ([[j] for j in wide] if wide.size > 1 else [])
            for cols in trials:
                if np.isinf(h[cols]).all():
                    continue
                trial = h.copy()
                trial[cols] = np.inf
                e = (self.evaluate_without(trial, before) if before.any()
                     else self.evaluate(trial)[0])
                if self._accept(e, err):
                    h, err = trial, e
                    if cols is wide:
                        break
        flat = np.isinf(h) & ~before
        ignored = before.copy()
        if not flat.any():
            return h, err, ignored
        if self.degree == 0:
            return h, err, flat | before
        if (flat | before).all():  # a flat kernel's local line is one global line: keep it
            return h, err, ignored
        cols = np.flatnonzero(flat)
        trials = [cols] + ([[j] for j in cols] if cols.size > 1 else [])
        for group in trials:
            drop = ignored.copy()
            drop[group] = True
            if drop.all() or (drop == ignored).all():
                continue
            e = self.evaluate_without(h, drop)
            if self._accept(e, err):
                ignored, err = drop, e
                if group is cols:
                    break
        return h, err, ignored
