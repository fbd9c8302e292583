"""The batched weighted local-constant / local-linear ridge solve.

Every smoother in hedgerow is a sparse weighting of the training rows (an ``m x n``
matrix ``W`` whose rows sum to one) combined with a local model fitted at each query.
This module holds the one implementation of the local model:

1. :func:`local_moments` reduces ``W`` and the training data to a few weighted moments
   per query with sparse x dense products (no loop over queries);
2. :func:`solve_local` turns the moments into a fit by solving one small
   ``(k+1) x (k+1)`` system per query, batched; changing the ridge penalty re-runs only
   this step;
3. :func:`equivalent_kernel` gives the weights ``l_i(q)`` with ``fit.intercept = L @ y``,
   which standard errors and hat-matrix diagonals need.

Local model and penalty scaling
-------------------------------
For query ``q`` with weights ``w_i`` (``sum_i w_i = 1``) and standardised correction
columns ``z_i = (x_i - q) / scale``, the degree-1 fit minimises::

    sum_i w_i (y_i - a - z_i^T b)^2 + lam * ||b||^2

with the intercept ``a`` unpenalised. With uniform weights ``1/n`` this is ridge
regression with penalty ``n * lam`` on the standardised columns. If a row of ``W`` sums
to ``s0 != 1`` the penalty is applied as ``lam * s0``, so that the fit depends on the
row only through its normalised weights.

Fallback rule
-------------
A query whose degree-1 system is numerically singular -- the weighted spread of a
correction column is at round-off level, or the columns are collinear within the
neighbourhood (reciprocal condition number of the local correlation matrix below
:data:`COLLINEARITY_RCOND`) -- falls back to the local constant fit (the weighted mean
of ``y``, slopes zero) and is flagged in :attr:`LocalFit.fallback`. A query whose row of
``W`` has zero total weight has no estimate: its intercept and slopes are NaN and a
``RuntimeWarning`` states how many such queries there were.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp

from hedgerow._validation import check_ridge_penalty

__all__ = [
    "COLLINEARITY_RCOND",
    "LocalConstantFallbackWarning",
    "LocalFit",
    "LocalMoments",
    "binary_scale",
    "column_centre",
    "default_scale",
    "equivalent_kernel",
    "local_moments",
    "moment_features",
    "moments_from_sums",
    "ridge_path_intercepts",
    "solve_local",
    "subset_moments",
    "standardise",
    "warn_fallback",
]

#: Reciprocal condition number of the local correlation matrix of the correction columns
#: below which a degree-1 system counts as singular and falls back to degree 0.
COLLINEARITY_RCOND = 1e-10

# Margin over machine epsilon for the round-off floor of algebraically centred variances.
_ROUNDOFF_MARGIN = 1e3


@dataclass(frozen=True)
class LocalMoments:
    """Weighted moments of the training data at each query, for a local fit.

    All moments use ``z_i = (x_i - q) / scale`` for the correction columns of training
    row ``i`` and query ``q``.

    Attributes
    ----------
    degree : int
        0 (local constant) or 1 (local linear).
    scale : ndarray of shape (k,)
        Column scales used to standardise the correction columns; the ridge penalty acts
        on slopes per unit of ``scale``.
    s0 : ndarray of shape (m,)
        ``sum_i w_i``.
    s1 : ndarray of shape (m, k)
        ``sum_i w_i z_i``.
    s2 : ndarray of shape (m, k, k)
        ``sum_i w_i z_i z_i^T``.
    t0 : ndarray of shape (m,)
        ``sum_i w_i y_i``.
    t1 : ndarray of shape (m, k)
        ``sum_i w_i z_i y_i``.
    roundoff : ndarray of shape (m, k)
        Size of the terms cancelled when ``s2`` was centred at the query, times machine
        epsilon; a weighted variance below it is numerically zero.

    For ``degree=0``, ``s1``, ``t1`` and ``roundoff`` have shape ``(m, 0)`` and ``s2``
    ``(m, 0, 0)``.
    """

    degree: int
    scale: np.ndarray
    s0: np.ndarray
    s1: np.ndarray
    s2: np.ndarray
    t0: np.ndarray
    t1: np.ndarray
    roundoff: np.ndarray

    @property
    def n_queries(self) -> int:
        """Return the number of queries ``m``."""
        return self.s0.shape[0]


@dataclass(frozen=True)
class LocalFit:
    """Local fits at each query, as returned by :func:`solve_local`.

    Attributes
    ----------
    intercept : ndarray of shape (m,)
        The prediction at each query.
    slopes : ndarray of shape (m, k)
        Slopes in the original units of the correction columns (``(m, 0)`` for degree 0).
    slopes_scaled : ndarray of shape (m, k)
        Slopes per standardised unit (per unit of ``scale``). ``slopes_std`` is the older
        name of the same array (kept for callers; "std" elsewhere means standard error).
    gram_inv : ndarray of shape (m, k+1, k+1)
        Inverse of the penalised weighted Gram matrix
        ``M = sum_i w_i [1, z_i][1, z_i]^T + lam * s0 * diag(0, 1, ..., 1)``. For fallback
        queries it is the degree-0 inverse padded with zeros, ``diag(1/s0, 0, ..., 0)``.
        Shape ``(m, 1, k+1)``, its first row only, from ``solve_local(..., first_row=True)``.
    fallback : ndarray of shape (m,), bool
        Queries whose degree-1 system was singular and which fell back to the weighted
        mean (see the module notes).
    ridge_penalty : float
        The penalty ``lam`` used.
    """

    intercept: np.ndarray
    slopes: np.ndarray
    slopes_scaled: np.ndarray
    gram_inv: np.ndarray
    fallback: np.ndarray
    ridge_penalty: float

    @property
    def slopes_std(self) -> np.ndarray:
        """The older name of ``slopes_scaled`` (standardised slopes, not standard errors)."""
        return self.slopes_scaled


class LocalConstantFallbackWarning(RuntimeWarning):
    """Some queries of a local linear fit got the local constant fit instead."""


def warn_fallback(fit: LocalFit, what: str, stacklevel: int = 3) -> int:
    """Warn once, with the count and the reason, if any query of ``fit`` fell back.

    Returns the number of queries flagged in ``fit.fallback``.
    """
    count = int(np.count_nonzero(fit.fallback))
    if count:
        k = fit.slopes.shape[1] if fit.slopes.ndim == 2 else 0
        warnings.warn(
            f"{count} of {fit.fallback.size} queries of the {what} got the local constant "
            f"(Nadaraya-Watson) fit instead of a local line: their neighbourhood does not "
            f"support a line in {k} column(s) (too few distinct neighbours, or the columns "
            f"collinear there). The flags are in local_fit(X).fallback; use fewer columns "
            f"or a wider neighbourhood (larger bandwidth / leaves).",
            LocalConstantFallbackWarning,
            stacklevel=stacklevel,
        )
    return count


def _binary_magnitude(values) -> np.ndarray:
    """Return the power of two at or just below each ``|values|`` (1.0 where 0 or not finite).

    Dividing by a power of two is exact, so computing on ``x / p`` and scaling back gives
    the same bits as computing on ``x`` wherever ``x`` itself does not over- or underflow,
    and keeps squares of columns near 1e+-300 representable.
    """
    values = np.asarray(values, dtype=np.float64)
    ok = np.isfinite(values) & (values != 0.0)
    # 2**(e - 1) <= |v| < 2**e: the lower power, so that it stays finite near the
    # largest float (2**1024 is inf)
    return np.where(ok, np.ldexp(1.0, np.frexp(np.where(ok, values, 1.0))[1] - 1), 1.0)


def binary_scale(values) -> float:
    """Return the power of two at the order of the largest finite ``|values|`` (or 1.0)."""
    values = np.abs(np.asarray(values, dtype=np.float64))
    values = values[np.isfinite(values)]
    return float(_binary_magnitude(values.max() if values.size else 0.0))


def column_centre(X_c) -> np.ndarray:
    """Return the column means of ``X_c``, computed without overflow near 1e+-300."""
    X_c = np.asarray(X_c, dtype=np.float64)
    if X_c.shape[0] == 0:
        return np.zeros(X_c.shape[1])
    p = _binary_magnitude(np.abs(X_c).max(axis=0))
    return (X_c / p).mean(axis=0) * p


def default_scale(X_c) -> np.ndarray:
    """Return the column standard deviations of ``X_c`` (ddof=0), 1.0 for constant columns.

    Computed on each column divided by a power of two near its largest magnitude (exact),
    so a column near 1e300 does not overflow its spread and one near 1e-300 does not
    underflow to a "constant" column; ordinary columns get the same bits as ``X_c.std``.
    """
    X_c = np.asarray(X_c, dtype=np.float64)
    if not X_c.shape[0]:
        return np.ones(X_c.shape[1])
    p = _binary_magnitude(np.abs(X_c).max(axis=0))
    scale = (X_c / p).std(axis=0) * p
    # A constant column carries no local slope; any positive scale keeps z finite.
    return np.where(scale > 0.0, scale, 1.0)


def standardise(X_c, centre, scale) -> np.ndarray:
    """Return ``(X_c - centre) / scale`` without overflowing the difference near 1e+-300.

    The same bits as the plain formula on ordinary data (the power of two is exact).
    """
    p = _binary_magnitude(scale)
    return (np.asarray(X_c, dtype=np.float64) / p - centre / p) / (scale / p)


def _csr_dense_py(data, indices, indptr, BT):
    m = indptr.shape[0] - 1
    p = BT.shape[0]
    out = np.zeros((m, p))
    for i in range(m):
        lo, hi = indptr[i], indptr[i + 1]
        # One column at a time: a scalar accumulator and a contiguous column to gather.
        for c in range(p):
            col = BT[c]
            acc = 0.0
            for q in range(lo, hi):
                acc += data[q] * col[indices[q]]
            out[i, c] = acc
    return out


# For one to three columns (the local-constant moments) this compiled product is about
# twice as fast as scipy's; for more columns scipy's row-major kernel is as fast or faster.
_csr_dense = numba.njit(cache=True)(_csr_dense_py)
_COMPILED_MAX_COLUMNS = 3


def _weighted_sums(W, B) -> np.ndarray:
    """Return ``W @ B`` as a dense array (``W`` sparse or dense, ``B`` dense (n, p))."""
    if not sp.issparse(W):
        return np.asarray(W @ B)
    W = W.tocsr()
    if W.data.dtype != np.float64:
        W = W.astype(np.float64)
    B = np.asarray(B, dtype=np.float64)
    if B.shape[1] > _COMPILED_MAX_COLUMNS:
        return np.asarray(W @ B)
    return _csr_dense(W.data, W.indices, W.indptr, np.ascontiguousarray(B.T))


def _pair_indices(k: int):
    return np.triu_indices(k)


def local_moments(W, X_c, y, Q_c, *, degree: int, scale=None) -> LocalMoments:
    """Return the weighted moments of ``(X_c, y)`` at each query under the weights ``W``.

    Parameters
    ----------
    W : scipy.sparse matrix of shape (m, n)
        Weights of the training rows for each query (CSR preferred; rows normally sum to
        one). A dense ndarray is accepted too.
    X_c : array-like of shape (n, k)
        Correction columns of the training rows (ignored for ``degree=0``).
    y : array-like of shape (n,)
        Training responses.
    Q_c : array-like of shape (m, k)
        Correction columns of the queries.
    degree : {0, 1}
        Local constant or local linear.
    scale : array-like of shape (k,), optional
        Column scales for standardising; default :func:`default_scale` of ``X_c``.

    Returns
    -------
    LocalMoments

    Notes
    -----
    The moments are computed as ``W @ [1, x, x x^T, y, x y]`` (one sparse x dense
    product) and then centred at each query algebraically. To limit cancellation the
    columns are first centred at their training mean and divided by ``scale``.
    """
    if degree not in (0, 1):
        raise ValueError(f"The 'degree' parameter must be 0 or 1. Got {degree!r} instead.")
    if not sp.issparse(W):
        W = np.asarray(W, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    m, n = W.shape
    if y.shape[0] != n:
        raise ValueError(
            f"The 'y' parameter must have one entry per column of W ({n}). "
            f"Got {y.shape[0]} instead."
        )
    if degree == 0:
        B, centre = moment_features(None, y, None, degree=0)
        return moments_from_sums(_weighted_sums(W, B), None, centre, None, degree=0)

    X_c = np.asarray(X_c, dtype=np.float64)
    Q_c = np.asarray(Q_c, dtype=np.float64)
    if X_c.ndim != 2 or X_c.shape[0] != n:
        raise ValueError(
            f"The 'X_c' parameter must be a 2-d array with {n} rows (one per column of W). "
            f"Got shape {X_c.shape} instead."
        )
    k = X_c.shape[1]
    if Q_c.ndim != 2 or Q_c.shape != (m, k):
        raise ValueError(
            f"The 'Q_c' parameter must have shape ({m}, {k}) (one row per row of W). "
            f"Got shape {Q_c.shape} instead."
        )
    scale = default_scale(X_c) if scale is None else np.asarray(scale, dtype=np.float64)
    if scale.shape != (k,) or not np.all(np.isfinite(scale)) or np.any(scale <= 0):
        raise ValueError(
            f"The 'scale' parameter must hold {k} positive finite values (one per "
            f"correction column). Got {scale!r} instead."
        )
    B, centre = moment_features(X_c, y, scale)
    return moments_from_sums(_weighted_sums(W, B), Q_c, centre, scale)


def moment_features(X_c, y, scale, *, degree: int = 1):
    """Return ``(B, centre)``: per-row features whose weighted sums give the moments.

    ``B = [1, u, u u^T (upper triangle), y, u y]`` with ``u = (x - centre) / scale`` and
    ``centre`` the training mean of each column. Any weighting that can produce the
    weighted sums ``W @ B`` (a sparse product, dense kernel blocks, or averages of
    per-leaf means of ``B``) can then call :func:`moments_from_sums`. For ``degree=0``
    ``B = [1, y]`` and ``X_c`` and ``scale`` are not used (``centre`` is empty).
    """
    y = np.asarray(y, dtype=np.float64).ravel()
    if degree == 0:
        return np.ascontiguousarray(np.stack([np.ones(y.shape[0]), y], axis=1)), np.zeros(0)
    X_c = np.asarray(X_c, dtype=np.float64)
    n, k = X_c.shape
    centre = column_centre(X_c)
    Xs = standardise(X_c, centre, scale)
    iu, ju = _pair_indices(k)
    B = np.concatenate(
        [np.ones((n, 1)), Xs, Xs[:, iu] * Xs[:, ju], y[:, None], Xs * y[:, None]], axis=1
    )
    return np.ascontiguousarray(B), centre


def moments_from_sums(R, Q_c, centre, scale, *, degree: int = 1) -> LocalMoments:
    """Return the ``LocalMoments`` from weighted sums ``R = W @ B``.

    ``B``, ``centre`` and ``scale`` as from :func:`moment_features` with the same
    ``degree``; the degree-1 sums are centred at each query algebraically. For
    ``degree=0`` only ``R`` is used.
    """
    R = np.asarray(R, dtype=np.float64)
    if degree == 0:
        m = R.shape[0]
        empty = np.zeros((m, 0))
        return LocalMoments(
            degree=0,
            scale=np.ones(0),
            s0=R[:, 0].copy(),
            s1=empty,
            s2=np.zeros((m, 0, 0)),
            t0=R[:, 1].copy(),
            t1=empty.copy(),
            roundoff=empty.copy(),
        )
    Q_c = np.asarray(Q_c, dtype=np.float64)
    m, k = Q_c.shape
    Qs = standardise(Q_c, centre, scale)
    iu, ju = _pair_indices(k)
    p = len(iu)
    s0 = R[:, 0]
    mx = R[:, 1 : 1 + k]
    mxx_flat = R[:, 1 + k : 1 + k + p]
    t0 = R[:, 1 + k + p]
    mxy = R[:, 2 + k + p :]

    mxx = np.empty((m, k, k))
    mxx[:, iu, ju] = mxx_flat
    mxx[:, ju, iu] = mxx_flat
    s1 = mx - s0[:, None] * Qs
    # sum w (x - q)(x - q)^T = sum w x x^T - (sum w x) q^T - q (sum w x)^T + s0 q q^T
    s2 = (
        mxx
        - mx[:, :, None] * Qs[:, None, :]
        - Qs[:, :, None] * mx[:, None, :]
        + s0[:, None, None] * Qs[:, :, None] * Qs[:, None, :]
    )
    t1 = mxy - t0[:, None] * Qs
    diag = np.arange(k)
    roundoff = (
        _ROUNDOFF_MARGIN
        * np.finfo(np.float64).eps
        * (np.abs(mxx[:, diag, diag]) + np.abs(s0)[:, None] * Qs**2)
    )
    return LocalMoments(
        degree=1, scale=scale, s0=s0, s1=s1, s2=s2, t0=t0, t1=t1, roundoff=roundoff
    )


@numba.njit(cache=True)
def _shifted_cholesky_exists(C, shift, out):
    m, k, _ = C.shape
    L = np.empty((k, k))
    for q in range(m):
        ok = True
        for j in range(k):
            acc = C[q, j, j] - shift
            for t in range(j):
                acc -= L[j, t] * L[j, t]
            if not acc > 0.0:  # also NaN
                ok = False
                break
            L[j, j] = np.sqrt(acc)
            for i in range(j + 1, k):
                acc = C[q, i, j]
                for t in range(j):
                    acc -= L[i, t] * L[j, t]
                L[i, j] = acc / L[j, j]
        out[q] = ok


def _clears_collinearity(C, shift) -> np.ndarray:
    """Return which correlation matrices certainly pass the collinearity rule.

    ``C - shift I`` has a Cholesky factor only if ``lambda_min(C) > shift`` (up to
    rounding of order ``k eps``), and ``lambda_max(C) <= trace(C) = k``; with
    ``shift = 2 k COLLINEARITY_RCOND`` a factorisable system has
    ``lambda_min > COLLINEARITY_RCOND * lambda_max`` with a wide margin, so the
    eigenvalues (several times costlier) are needed only for the others.
    """
    out = np.zeros(C.shape[0], dtype=np.bool_)
    _shifted_cholesky_exists(np.ascontiguousarray(C), float(shift), out)
    return out


def _degenerate(S, roundoff, empty) -> np.ndarray:
    """Return which penalised slope systems ``S`` (m, k, k) fall back (the module notes)."""
    k = S.shape[1]
    dS = np.diagonal(S, axis1=1, axis2=2)
    degenerate = np.any(dS <= roundoff, axis=1) | empty
    if k > 1:
        d = np.sqrt(np.where(dS > 0, dS, 1.0))
        C = S / d[:, :, None] / d[:, None, :]
        # Eigenvalues only where a shifted Cholesky factorisation cannot clear the system
        # (the decisions are those of eigenvalues everywhere; see _clears_collinearity).
        check = ~degenerate & ~_clears_collinearity(C, 2.0 * k * COLLINEARITY_RCOND)
        if check.any():
            ev = np.linalg.eigvalsh(C[check])
            degenerate[check] = ev[:, 0] <= COLLINEARITY_RCOND * ev[:, -1]
    return degenerate


def subset_moments(moments: LocalMoments, rows) -> LocalMoments:
    """Return the ``LocalMoments`` of the queries ``rows`` (a slice or an index array)."""
    return LocalMoments(degree=moments.degree, scale=moments.scale, s0=moments.s0[rows],
                        s1=moments.s1[rows], s2=moments.s2[rows], t0=moments.t0[rows],
                        t1=moments.t1[rows], roundoff=moments.roundoff[rows])


def ridge_path_intercepts(moments: LocalMoments, ridge_penalties) -> np.ndarray:
    """Return the (m, P) intercepts of ``solve_local`` at every penalty, one factorisation.

    The slope block's Schur complement is ``S(lam) = C + lam s0 I`` with ``C`` the
    weighted local covariance, so one eigendecomposition ``C = V diag(e) V'`` per query
    gives every penalty: ``s1' S(lam)^-1 r = sum_j (V's1)_j (V'r)_j / (e_j + lam s0)``,
    O(k) per penalty instead of a solve. Equal to ``solve_local(moments, lam).intercept``
    up to rounding (a different factorisation of the same system; tests hold it within
    1e-10). The fallback rule is applied exactly: adding ``lam s0 I`` can only raise the
    smallest eigenvalue of the diagonally scaled system relative to its largest (with
    ``T = diag(sqrt(c_jj / (c_jj + mu)))`` the scaled system is ``T R T + I - T^2``, whose
    Rayleigh quotients lie between those of ``R`` and 1) and every diagonal entry, so a
    query that does not fall back at ``lam = 0`` falls back at no penalty; the queries
    that do are solved by ``solve_local`` itself at each penalty.
    """
    lams = [check_ridge_penalty(v) for v in np.atleast_1d(ridge_penalties)]
    m = moments.s0.shape[0]
    k = moments.s1.shape[1]
    out = np.empty((m, len(lams)))
    if moments.degree == 0 or k == 0 or m == 0:
        for i, lam in enumerate(lams):
            out[:, i] = _quiet_solve(moments, lam).intercept
        return out
    s0 = moments.s0
    empty = ~(s0 > 0.0)
    safe_s0 = np.where(empty, 1.0, s0)
    mean = moments.t0 / safe_s0
    s1 = moments.s1
    C = moments.s2 - s1[:, :, None] * s1[:, None, :] / safe_s0[:, None, None]
    C = 0.5 * (C + np.swapaxes(C, 1, 2))
    hard = _degenerate(C, moments.roundoff, empty)
    easy = np.flatnonzero(~hard)
    e, V = np.linalg.eigh(C[easy])
    r = moments.t1[easy] - s1[easy] * mean[easy, None]
    u = np.einsum("mkj,mk->mj", V, s1[easy])
    v = np.einsum("mkj,mk->mj", V, r)
    uv = u * v
    s0e = safe_s0[easy]
    hard_rows = np.flatnonzero(hard)
    sub = subset_moments(moments, hard_rows) if hard_rows.size else None
    for i, lam in enumerate(lams):
        quad = np.sum(uv / (e + (lam * s0e)[:, None]), axis=1)
        out[easy, i] = mean[easy] - quad / s0e
        if sub is not None:
            out[hard_rows, i] = _quiet_solve(sub, lam).intercept
    return out


def _quiet_solve(moments, lam):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # zero-weight rows: NaN, as asked
        return solve_local(moments, lam)


def solve_local(moments: LocalMoments, ridge_penalty: float = 0.0, *,
                first_row: bool = False) -> LocalFit:
    """Return the local fits at every query from precomputed moments.

    Parameters
    ----------
    moments : LocalMoments
        From :func:`local_moments`.
    ridge_penalty : float, default=0.0
        Penalty ``lam >= 0`` on the standardised slopes (intercept unpenalised); see the
        module notes for its scaling. Ignored for degree 0.
    first_row : bool, default=False
        Keep only the first row of ``gram_inv`` (shape ``(m, 1, k+1)``): what leverages
        and equivalent kernels need, two right-hand sides per system instead of
        ``k + 2`` (the leave-one-out search).

    Returns
    -------
    LocalFit

    Notes
    -----
    Only the small per-query systems are solved (batched), so calling this again with
    another penalty costs ``O(m k^3)`` and does not touch the training data. The slope
    block is solved through its Schur complement
    ``S = s2 - s1 s1^T / s0 + lam s0 I`` (the weighted local covariance, penalised),
    which is better conditioned than the full Gram matrix.
    """
    lam = check_ridge_penalty(ridge_penalty)
    s0 = moments.s0
    m = s0.shape[0]
    k = moments.s1.shape[1]
    empty = ~(s0 > 0.0)
    n_empty = int(empty.sum())
    if n_empty:
        warnings.warn(
            f"{n_empty} of {m} queries have zero total weight; their predictions are NaN.",
            RuntimeWarning,
            stacklevel=2,
        )
    safe_s0 = np.where(empty, 1.0, s0)
    mean = moments.t0 / safe_s0

    if moments.degree == 0 or k == 0:
        intercept = np.where(empty, np.nan, mean)
        gram_inv = np.where(empty, np.nan, 1.0 / safe_s0)[:, None, None]
        slopes = np.zeros((m, k))
        slopes[empty] = np.nan
        return LocalFit(
            intercept=intercept,
            slopes=slopes,
            slopes_scaled=slopes.copy(),
            gram_inv=gram_inv,
            fallback=np.zeros(m, dtype=bool),
            ridge_penalty=lam,
        )

    s1, t1 = moments.s1, moments.t1
    eye = np.eye(k)
    S = (
        moments.s2
        - s1[:, :, None] * s1[:, None, :] / safe_s0[:, None, None]
        + (lam * safe_s0)[:, None, None] * eye
    )
    S = 0.5 * (S + np.swapaxes(S, 1, 2))
    degenerate = _degenerate(S, moments.roundoff, empty)
    S_ok = np.where(degenerate[:, None, None], eye, S)

    r = t1 - s1 * mean[:, None]
    parts = [r[:, :, None], s1[:, :, None]]
    if not first_row:
        parts.append(np.broadcast_to(eye, (m, k, k)))
    sol = np.linalg.solve(S_ok, np.concatenate(parts, 2))
    b = sol[:, :, 0]
    Sinv_s1 = sol[:, :, 1]
    a = mean - np.einsum("mk,mk->m", s1, b) / safe_s0

    gram_inv = np.empty((m, 1 if first_row else k + 1, k + 1))
    gram_inv[:, 0, 0] = 1.0 / safe_s0 + np.einsum("mk,mk->m", s1, Sinv_s1) / safe_s0**2
    gram_inv[:, 0, 1:] = -Sinv_s1 / safe_s0[:, None]
    if not first_row:
        gram_inv[:, 1:, 0] = gram_inv[:, 0, 1:]
        gram_inv[:, 1:, 1:] = sol[:, :, 2:]

    fallback = degenerate & ~empty
    a = np.where(degenerate, mean, a)
    b[degenerate] = 0.0
    gram_inv[degenerate] = 0.0
    gram_inv[degenerate, 0, 0] = 1.0 / safe_s0[degenerate]
    a[empty] = np.nan
    b[empty] = np.nan
    gram_inv[empty] = np.nan
    return LocalFit(
        intercept=a,
        slopes=b / moments.scale,
        slopes_scaled=b,
        gram_inv=gram_inv,
        fallback=fallback,
        ridge_penalty=lam,
    )


def equivalent_kernel(W, X_c, Q_c, fit: LocalFit, scale=None) -> sp.csr_matrix:
    """Return the equivalent-kernel weights ``L`` (CSR, ``W``'s sparsity) of a local fit.

    ``L[q, i] = e_1^T M_q^{-1} w_i(q) [1, z_i(q)]``, so that ``L @ y`` reproduces
    ``fit.intercept``. For degree 1 at ``ridge_penalty=0`` every non-empty row sums to
    one (the fit reproduces constants); for degree 0 ``L`` is ``W`` with rows normalised.
    Rows of ``W`` with zero total weight are empty.

    Parameters
    ----------
    W : scipy.sparse matrix of shape (m, n)
        The weights passed to :func:`local_moments`.
    X_c : array-like of shape (n, k)
        Correction columns of the training rows.
    Q_c : array-like of shape (m, k)
        Correction columns of the queries.
    fit : LocalFit
        From :func:`solve_local` on the moments of ``(W, X_c, Q_c)``.
    scale : array-like of shape (k,), optional
        The scale used in :func:`local_moments` (``moments.scale``); default
        :func:`default_scale` of ``X_c``.

    Returns
    -------
    scipy.sparse.csr_matrix of shape (m, n)
    """
    W = sp.csr_matrix(W, dtype=np.float64)
    W.sum_duplicates()
    m, n = W.shape
    rows = np.repeat(np.arange(m), np.diff(W.indptr))
    g = fit.gram_inv[:, 0, :]
    data = W.data * g[rows, 0]
    k = g.shape[1] - 1
    if k:
        X_c = np.asarray(X_c, dtype=np.float64)
        Q_c = np.asarray(Q_c, dtype=np.float64)
        scale = default_scale(X_c) if scale is None else np.asarray(scale, dtype=np.float64)
        Z = (X_c[W.indices] - Q_c[rows]) / scale
        data = data + W.data * np.einsum("ik,ik->i", g[rows, 1:], Z)
    data = np.where(np.isnan(data), 0.0, data)
    L = sp.csr_matrix((data, W.indices.copy(), W.indptr.copy()), shape=(m, n))
    return L
