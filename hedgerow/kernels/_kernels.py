"""Product kernels, sparse kernel weight matrices and dense weighted sums.

A kernel smoother at query ``q`` weights training row ``i`` by the product kernel
``K(u) = prod_j k(u_j)`` with ``u_j = (x_ij - q_j) / h_j``. Weights are returned as a
scipy CSR matrix of shape ``(m, n)`` whose rows sum to one -- the same object the forests
return as neighbour weights.

Kernels (profiles scaled so that ``k(0) = 1``; constant factors cancel when rows are
normalised):

- ``"gaussian"``: ``exp(-u^2 / 2)``;
- ``"epanechnikov"``: ``1 - u^2`` for ``|u| < 1``;
- ``"tricube"``: ``(1 - |u|^3)^3`` for ``|u| < 1``.

Sparsity: compact kernels are exactly zero outside ``|u_j| < 1``. Gaussian weights are
truncated below :data:`GAUSSIAN_TRUNCATION` times the largest weight in the row. The
dropped mass is then at most ``n * GAUSSIAN_TRUNCATION`` of the kept mass, so a
prediction moves by at most ``n * 1e-16 * range(y)`` -- below double-precision noise
for any ``n`` this library is used with -- while rows stay sparse at small bandwidths
(only rows within about 8.6 bandwidths of the nearest one are kept). A query
outside the support of a compact kernel has an empty row (total weight zero).

Weighted sums without the matrix: a local fit needs only ``W @ B`` for a few feature
columns ``B`` (see :func:`hedgerow.local.moment_features`). :func:`kernel_sums` (and
:meth:`KernelRows.sums`, for rows prepared once) forms them from dense blocks of weights,
one block of queries at a time, kept in cache, with the entries of
``kernel_weights(..., normalize=False)``; rows with few non-zero weights are summed
sparsely. Every query is compared with every training row either way, so the sparse
matrix only pays off when it is needed itself (neighbour weights); for the sums the
dense blocks are several times faster, above all for the Gaussian, whose rows are rarely
sparse at useful bandwidths.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.sparse as sp

from hedgerow.local import column_centre, standardise

__all__ = [
    "GAUSSIAN_TRUNCATION",
    "KERNELS",
    "KernelRows",
    "kernel_profile",
    "kernel_sums",
    "kernel_weights",
    "warm_up",
]

#: Names of the supported kernels.
KERNELS = ("gaussian", "epanechnikov", "tricube")

#: Gaussian weights below this fraction of their row's largest weight are dropped.
GAUSSIAN_TRUNCATION = 1e-16

_CODES = {name: code for code, name in enumerate(KERNELS)}

# Queries are processed in blocks of about this many (query, row) pairs, so that the
# output of one block stays within a few hundred megabytes even for wide bandwidths.
_BLOCK_ENTRIES = 16_000_000

# Dense blocks of kernel_sums hold about this many entries (512 KiB), so that a block is
# still in cache when the exponential and the product read it again.
_DENSE_BLOCK_ENTRIES = 1 << 16

# A row of weights with fewer than 1/8 of its entries non-zero is summed sparsely (only
# its non-zero rows of B); a block that sparse skips BLAS too.
_SPARSE_ROW_SHARE = 8
_NO_ROWS = np.empty((0, 0))


def _check_kernel(kernel) -> int:
    if not isinstance(kernel, str) or kernel not in _CODES:
        raise ValueError(
            f"The 'kernel' parameter must be one of {set(KERNELS)!r}. Got {kernel!r} instead."
        )
    return _CODES[kernel]


def kernel_profile(kernel: str, u) -> np.ndarray:
    """Return the one-dimensional kernel profile ``k(u)`` (with ``k(0) = 1``).

    Parameters
    ----------
    kernel : {"gaussian", "epanechnikov", "tricube"}
    u : array-like
        Distances in bandwidth units.

    Returns
    -------
    ndarray
        ``k(u)``, same shape as ``u``.
    """
    code = _check_kernel(kernel)
    u = np.abs(np.asarray(u, dtype=np.float64))
    if code == 0:
        return np.exp(-0.5 * u**2)
    inside = u < 1.0
    if code == 1:
        return np.where(inside, 1.0 - u**2, 0.0)
    return np.where(inside, (1.0 - np.minimum(u, 1.0) ** 3) ** 3, 0.0)


# exp(x) for x in [_EXP_LOWEST, 0]: x = k ln 2 + r with |r| <= ln(2) / 2 (Cody & Waite
# reduction: ln 2 split in two so that k * _LN2_HI is exact), exp(r) by its Taylor
# polynomial to degree 13 (truncation error below 1e-17), times 2^k built from its bits.
# Within 1 ulp of numpy's exp (a test checks it over the whole range); unlike a libm
# call it vectorises, which makes the dense Gaussian blocks several times cheaper.
_EXP_LOWEST = -700.0
_INF_BITS = np.int64(0x7FF0000000000000)  # the bits of +inf
_LOG2E = 1.4426950408889634
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_ROUND_MAGIC = 6755399441055744.0  # 1.5 * 2^52: adding and subtracting it rounds to an integer
_EXP_TAYLOR = tuple(1.0 / math.factorial(i) for i in range(14))


@numba.njit(cache=True, inline="always", fastmath={"contract"})
def _exp_nonpositive(x):
    kf = (x * _LOG2E + _ROUND_MAGIC) - _ROUND_MAGIC
    r = (x - kf * _LN2_HI) - kf * _LN2_LO
    c = _EXP_TAYLOR
    p = c[13]
    p = p * r + c[12]
    p = p * r + c[11]
    p = p * r + c[10]
    p = p * r + c[9]
    p = p * r + c[8]
    p = p * r + c[7]
    p = p * r + c[6]
    p = p * r + c[5]
    p = p * r + c[4]
    p = p * r + c[3]
    p = p * r + c[2]
    p = p * r + c[1]
    p = p * r + c[0]
    two_k = np.int64((np.int64(kf) + 1023) << 52).view(np.float64)
    return p * two_k


@numba.njit(cache=True)
def _row_values(XT, Qs, i, code, skip_i, buf):
    """Fill ``buf`` with query ``i``'s squared distances (Gaussian) or kernel values.

    Column by column over contiguous rows of ``XT`` (d, n), branch-free, so that the
    loops vectorise. The excluded row gets distance inf / weight 0.
    """
    d, n = XT.shape
    if code == 0:
        buf[:] = 0.0
        for c in range(d):
            q = Qs[i, c]
            row = XT[c]
            for j in range(n):
                t = row[j] - q
                buf[j] += t * t
        if skip_i >= 0:
            buf[skip_i] = np.inf
    else:
        buf[:] = 1.0
        for c in range(d):
            q = Qs[i, c]
            row = XT[c]
            for j in range(n):
                t = abs(row[j] - q)
                if code == 1:
                    f = 1.0 - t * t
                else:
                    a = 1.0 - t * t * t
                    f = a * a * a
                # Negative beyond |u| = 1 for both profiles: clip to the support.
                buf[j] *= max(f, 0.0)
        if skip_i >= 0:
            buf[skip_i] = 0.0


def _count_py(XT, Qs, code, log_cut, skip, counts, shift):
    """Count each query's kept entries (and, for the Gaussian, its distance shift)."""
    m = Qs.shape[0]
    n = XT.shape[1]
    for i in range(m):
        buf = np.empty(n)
        _row_values(XT, Qs, i, code, skip[i], buf)
        c = 0
        if code == 0:
            # Shift by the nearest row so that far-away queries do not underflow to 0.
            sh = buf.min() if n > 0 else 0.0
            if not np.isfinite(sh):
                sh = 0.0
            shift[i] = sh
            cut = 2.0 * log_cut + sh
            for j in range(n):
                c += buf[j] <= cut
        else:
            for j in range(n):
                c += buf[j] > 0.0
        counts[i + 1] = c


def _fill_py(XT, Qs, code, log_cut, skip, shift, indptr, data, indices):
    """Write each query's kept entries (Gaussian: as log-weights) into the CSR arrays.

    Distances are recomputed rather than stored: that is cheaper than touching a
    query-by-row scratch array. The writes are branch-free into a row-local list first.
    """
    m = Qs.shape[0]
    n = XT.shape[1]
    for i in range(m):
        buf = np.empty(n)
        idx = np.empty(n, dtype=np.int32)
        _row_values(XT, Qs, i, code, skip[i], buf)
        c = 0
        if code == 0:
            cut = 2.0 * log_cut + shift[i]
            for j in range(n):
                idx[c] = j
                c += buf[j] <= cut
        else:
            for j in range(n):
                idx[c] = j
                c += buf[j] > 0.0
        start = indptr[i]
        sh = shift[i]
        if code == 0:
            for q in range(c):
                j = idx[q]
                indices[start + q] = j
                # Exponentiated afterwards, vectorised.
                data[start + q] = -0.5 * (buf[j] - sh)
        else:
            for q in range(c):
                j = idx[q]
                indices[start + q] = j
                data[start + q] = buf[j]


def _normalize_rows_py(data, indptr):
    m = indptr.shape[0] - 1
    for i in range(m):
        total = 0.0
        for q in range(indptr[i], indptr[i + 1]):
            total += data[q]
        if total > 0.0:
            inv = 1.0 / total
            for q in range(indptr[i], indptr[i + 1]):
                data[q] *= inv


@numba.njit(cache=True, inline="always")
def _nonzeros(row):
    """Return the number of non-zero entries of ``row`` (an integer sum: it vectorises)."""
    c = 0
    for j in range(row.shape[0]):
        c += row[j] != 0.0
    return c


def _block_weights_py(XT, Qs, start, skip, code, log_cut, out, nnz):
    """Fill ``out`` (rows = queries ``start, start + 1, ...``) with unnormalised weights.

    The entries of :func:`kernel_weights` with ``normalize=False``: compact kernels the
    product kernel; Gaussian ``exp(-(v - shift) / 2)`` of the squared distances ``v`` in
    bandwidth units, shifted by the row's smallest (as in :func:`_fill_py`), 0 where the
    truncation drops them. ``nnz`` receives each row's number of non-zero weights.
    Every loop vectorises: the row minimum is taken over the integer view of the
    (non-negative) distances, whose bits order like their values.
    """
    n = XT.shape[1]
    for r in range(out.shape[0]):
        row = out[r]
        _row_values(XT, Qs, start + r, code, skip[start + r], row)
        c = 0
        if code == 0:
            bits = row.view(np.int64)
            low = _INF_BITS
            for j in range(n):
                low = min(low, bits[j])
            sh = np.int64(low).view(np.float64)
            if not np.isfinite(sh):
                sh = 0.0
            cut = 2.0 * log_cut + sh
            for j in range(n):
                v = row[j]
                # Dropped entries are clamped so that the exponential sees no special
                # values; exponentiating here, in a pass that reads the row anyway.
                w = _exp_nonpositive(max(-0.5 * (v - sh), _EXP_LOWEST))
                kept = v <= cut
                row[j] = w if kept else 0.0
                c += kept
        else:
            c = _nonzeros(row)
        nnz[r] = c


def _row_nonzeros_py(part, nnz):
    for r in range(part.shape[0]):
        nnz[r] = _nonzeros(part[r])


def _row_products_py(part, B, BT, nnz, out, idx):
    """Write ``part @ B`` into ``out``, one query row at a time.

    Every row runs the same loops, chosen by its own number of non-zero weights ``nnz``,
    so its result does not depend on the other rows of the block (BLAS may tile
    differently by position). A dense row is one reduction per column of ``B`` (through
    ``BT = B.T``; reassociation lets it vectorise, in an order fixed by the compiled code
    and the row length); a row with few non-zero weights (narrow bandwidths, many
    columns) adds up only those rows of ``B``, in order (``idx`` is scratch).
    """
    n, p = B.shape
    for r in range(part.shape[0]):
        row = part[r]
        res = out[r]
        if nnz[r] * _SPARSE_ROW_SHARE < n:
            c = 0
            for j in range(n):
                idx[c] = j
                c += row[j] != 0.0
            res[:] = 0.0
            for q in range(c):
                j = idx[q]
                w = row[j]
                Bj = B[j]
                for k in range(p):
                    res[k] += w * Bj[k]
        else:
            for k in range(p):
                col = BT[k]
                acc = 0.0
                for j in range(n):
                    acc += row[j] * col[j]
                res[k] = acc


def _exp_inplace_py(data):
    for q in range(data.shape[0]):
        data[q] = _exp_nonpositive(data[q])


# Compiled single-threaded: on the 2-core machines this is developed on, threads gave at
# most 1.5x and, with another process busy, parallel regions stalled for tens of ms.
def _compile(fn):
    return numba.njit(cache=True)(fn)


_count = _compile(_count_py)
_fill = _compile(_fill_py)
_normalize_rows = _compile(_normalize_rows_py)
# Fused multiply-adds for the exponential's polynomial (its 1-ulp test is run on this).
_block_weights = numba.njit(cache=True, fastmath={"contract"})(_block_weights_py)
_exp_inplace = numba.njit(cache=True, fastmath={"contract"})(_exp_inplace_py)
_row_products = numba.njit(cache=True, fastmath={"reassoc", "contract"})(_row_products_py)
_row_nonzeros = _compile(_row_nonzeros_py)


class KernelRows:
    """Training rows prepared once for repeated kernel queries.

    Holds the rows centred at their mean, divided by the bandwidths and transposed (the
    layout the compiled loops read), so that a smoother asking about a probe or a slice
    does not redo that for every call. :func:`kernel_weights` and :func:`kernel_sums`
    are one-off calls of :meth:`weights` and :meth:`sums`.

    Parameters
    ----------
    X_train : array-like of shape (n, d)
        Training rows.
    bandwidth : array-like of shape (d,)
        Bandwidth per column, in the units of the columns, all positive. ``inf`` makes
        the kernel flat in that column (its scaled distances are exactly zero), as a
        bandwidth search does for a column the response does not depend on.
    kernel : {"gaussian", "epanechnikov", "tricube"}, default="gaussian"
    """

    def __init__(self, X_train, bandwidth, kernel: str = "gaussian"):
        self.code = _check_kernel(kernel)
        X_train = np.asarray(X_train, dtype=np.float64)
        h = np.asarray(bandwidth, dtype=np.float64).ravel()
        d = X_train.shape[1]
        if h.shape != (d,) or np.any(np.isnan(h)) or np.any(h <= 0):
            raise ValueError(
                f"The 'bandwidth' parameter must hold {d} positive finite values (one per "
                f"column; inf for a column the kernel is flat in). Got {bandwidth!r} "
                "instead."
            )
        # Centre before scaling so that squared distances are formed from small numbers.
        # (column_centre / standardise: no overflow near 1e+-300, same bits otherwise)
        self.centre = column_centre(X_train)
        self.bandwidth = h
        self.XT = np.ascontiguousarray(standardise(X_train, self.centre, h).T)

    @property
    def n_rows(self) -> int:
        """Return the number of training rows."""
        return self.XT.shape[1]

    def _queries(self, Q, exclude):
        d = self.XT.shape[0]
        Q = np.asarray(Q, dtype=np.float64)
        if Q.ndim != 2 or Q.shape[1] != d:
            raise ValueError(
                f"The 'Q' parameter must be a 2-d array with {d} columns. "
                f"Got shape {Q.shape} instead."
            )
        Qs = np.ascontiguousarray(standardise(Q, self.centre, self.bandwidth))
        m = Qs.shape[0]
        skip = (np.full(m, -1, dtype=np.int64) if exclude is None
                else np.asarray(exclude, np.int64))
        if skip.shape != (m,):
            raise ValueError(
                f"The 'exclude' parameter must hold {m} indices (one per query). "
                f"Got shape {skip.shape} instead."
            )
        return Qs, skip

    def weights(self, Q, *, normalize: bool = True, exclude=None) -> sp.csr_matrix:
        """Return the kernel weights of the training rows for each query (CSR).

        See :func:`kernel_weights` for the parameters and the result.
        """
        Qs, skip = self._queries(Q, exclude)
        XT, code = self.XT, self.code
        m, n = Qs.shape[0], XT.shape[1]
        log_cut = -math.log(GAUSSIAN_TRUNCATION)
        block = max(1, _BLOCK_ENTRIES // max(n, 1))
        parts = []
        for start in range(0, m, block):
            stop = min(m, start + block)
            mb = stop - start
            counts = np.zeros(mb + 1, dtype=np.int64)
            shift = np.zeros(mb)
            Qb, skip_b = Qs[start:stop], skip[start:stop]
            _count(XT, Qb, code, log_cut, skip_b, counts, shift)
            indptr = np.cumsum(counts)
            data = np.empty(indptr[-1])
            indices = np.empty(indptr[-1], dtype=np.int32)
            _fill(XT, Qb, code, log_cut, skip_b, shift, indptr, data, indices)
            if code == 0:
                _exp_inplace(data)
            if normalize:
                _normalize_rows(data, indptr)
            parts.append((data, indices, indptr))
        if not parts:
            return sp.csr_matrix((m, n))
        if len(parts) == 1:
            data, indices, indptr = parts[0]
        else:
            data = np.concatenate([p[0] for p in parts])
            indices = np.concatenate([p[1] for p in parts])
            offsets = np.cumsum([0] + [p[2][-1] for p in parts[:-1]])
            tails = [p[2][1:] + o for p, o in zip(parts, offsets, strict=True)]
            indptr = np.concatenate([np.zeros(1, dtype=np.int64)] + tails)
        return sp.csr_matrix((data, indices, indptr), shape=(m, n))

    def _features(self, name, B):
        n = self.n_rows
        B = np.ascontiguousarray(B, dtype=np.float64)
        if B.ndim != 2 or B.shape[0] != n:
            raise ValueError(
                f"The '{name}' parameter must be a 2-d array with {n} rows (one per training "
                f"row). Got shape {B.shape} instead."
            )
        return B

    def sums(self, Q, B, *, squared=None, exclude=None, stable: bool = True):
        """Return ``W @ B`` (and ``(W ** 2) @ squared``) without forming ``W``.

        See :func:`kernel_sums` for the parameters and the result.
        """
        Qs, skip = self._queries(Q, exclude)
        B = self._features("B", B)
        pairs = [(B, np.zeros((Qs.shape[0], B.shape[1])))]
        if squared is not None:
            S = self._features("squared", squared)
            pairs.append((S, np.zeros((Qs.shape[0], S.shape[1]))))
        m, n = Qs.shape[0], self.n_rows
        if m and n:
            self._sum_blocks(Qs, skip, pairs, stable)
        return pairs[0][1] if squared is None else (pairs[0][1], pairs[1][1])

    def _sum_blocks(self, Qs, skip, pairs, stable):
        m, n = Qs.shape[0], self.n_rows
        log_cut = -math.log(GAUSSIAN_TRUNCATION)
        block = max(1, min(m, _DENSE_BLOCK_ENTRIES // n))
        buf = np.empty((block, n))
        nnz = np.empty(block, dtype=np.int64)
        idx = np.empty(n, dtype=np.int64)
        transposed = [None] * len(pairs)  # B.T for dense rows, built on first need
        for start in range(0, m, block):
            stop = min(m, start + block)
            part = buf[: stop - start]
            counts = nnz[: stop - start]
            _block_weights(self.XT, Qs, start, skip, self.code, log_cut, part, counts)
            for which, (F, out) in enumerate(pairs):
                if which:  # the squared weights, for variances (small ones may underflow)
                    np.square(part, out=part)
                    _row_nonzeros(part, counts)
                if not stable and counts.sum() * _SPARSE_ROW_SHARE >= part.size:
                    np.matmul(part, F, out=out[start:stop])
                    continue
                if transposed[which] is None and (counts * _SPARSE_ROW_SHARE >= n).any():
                    transposed[which] = np.ascontiguousarray(F.T)
                FT = _NO_ROWS if transposed[which] is None else transposed[which]
                _row_products(part, F, FT, counts, out[start:stop], idx)


def kernel_weights(
    X_train, Q, bandwidth, kernel: str = "gaussian", *, normalize: bool = True, exclude=None
) -> sp.csr_matrix:
    """Return the product-kernel weights of the training rows for each query (CSR).

    Parameters
    ----------
    X_train : array-like of shape (n, d)
        Training rows.
    Q : array-like of shape (m, d)
        Queries.
    bandwidth : array-like of shape (d,)
        Bandwidth per column, in the units of the columns, all positive and finite.
    kernel : {"gaussian", "epanechnikov", "tricube"}, default="gaussian"
    normalize : bool, default=True
        Divide each row by its sum (rows then sum to one; empty rows stay empty). With
        ``normalize=False`` rows are left unscaled: compact-kernel rows hold ``K(u)``
        and Gaussian rows ``K(u) / max_row K`` (largest entry 1). The local fits of
        :mod:`hedgerow.local` do not depend on the scaling of a row.
    exclude : array-like of int of shape (m,), optional
        For each query, the index of one training row to leave out (-1 for none), as if
        that row were not in ``X_train``; used for leave-one-out fits.

    Returns
    -------
    scipy.sparse.csr_matrix of shape (m, n)
        Non-negative weights; entries are dropped as described in the module notes.
    """
    return KernelRows(X_train, bandwidth, kernel).weights(Q, normalize=normalize,
                                                          exclude=exclude)


def kernel_sums(
    X_train, Q, bandwidth, B, kernel: str = "gaussian", *, squared=None, exclude=None,
    stable: bool = True,
):
    """Return ``W @ B`` for the unnormalised kernel weights ``W``, without forming ``W``.

    ``W`` is ``kernel_weights(X_train, Q, bandwidth, kernel, normalize=False,
    exclude=exclude)``: the same entries, the same truncation and the same per-row
    scaling, so any fit that depends on a row of weights only up to scale (the local fits
    of :mod:`hedgerow.local`) is the same from either. Only the order of summation
    differs (round-off).

    Parameters
    ----------
    X_train : array-like of shape (n, d)
        Training rows.
    Q : array-like of shape (m, d)
        Queries.
    bandwidth : array-like of shape (d,)
        Bandwidth per column, in the units of the columns, all positive and finite.
    B : array-like of shape (n, p)
        Per-row features to sum, for example from :func:`hedgerow.local.moment_features`.
    kernel : {"gaussian", "epanechnikov", "tricube"}, default="gaussian"
    squared : array-like of shape (n, s), optional
        Also sum these features under the *squared* weights, from the same pass: the
        variance of a linear smoother, ``sum_i l_i(q)^2 v_i``, is a quadratic form in
        such sums.
    exclude : array-like of int of shape (m,), optional
        As in :func:`kernel_weights`: one training row per query to leave out, -1 for none.
    stable : bool, default=True
        Sum each query's row with one compiled loop that does not depend on the other
        queries, so that a query gets the same bits whether it is asked alone, in chunks
        or with others (predictions stay reproducible under chunking). ``False`` hands
        whole blocks to BLAS (unless fewer than 1/8 of their weights are non-zero): about
        2-3x faster with many feature columns, but BLAS may sum in another order for
        another block layout; for sums over one fixed set of queries (leave-one-out over
        the training rows).

    Returns
    -------
    ndarray of shape (m, p), or a pair of it and an ndarray of shape (m, s)
        Row ``q`` is ``sum_i W[q, i] * B[i]`` (and ``sum_i W[q, i] ** 2 * squared[i]``);
        all zero for a query with no training row inside a compact kernel's support.
    """
    return KernelRows(X_train, bandwidth, kernel).sums(Q, B, squared=squared,
                                                       exclude=exclude, stable=stable)


def warm_up() -> None:
    """Compile (or load from numba's cache) every kernel loop on a tiny problem.

    The local solver's compiled screen is warmed too, through a leave-one-out error.
    """
    from hedgerow.kernels._bandwidth import loo_cv_error

    rng = np.random.default_rng(0)
    X = rng.random((40, 2))
    B = rng.random((40, 3))
    exclude = np.arange(40)
    for kernel in KERNELS:
        rows = KernelRows(X, [0.3, 0.3], kernel)
        rows.weights(X, exclude=exclude)
        rows.weights(X[:3], normalize=False)
        for stable in (True, False):
            rows.sums(X, B, squared=B, exclude=exclude, stable=stable)
        KernelRows(X, [0.01, 0.01], kernel).sums(X, B)  # sparse rows
    loo_cv_error(X, B[:, 0], [0.5, 0.5], degree=1)
