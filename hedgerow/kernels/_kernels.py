"""Product kernels and sparse kernel weight matrices.

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
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.sparse as sp

__all__ = ["GAUSSIAN_TRUNCATION", "KERNELS", "kernel_profile", "kernel_weights"]

#: Names of the supported kernels.
KERNELS = ("gaussian", "epanechnikov", "tricube")

#: Gaussian weights below this fraction of their row's largest weight are dropped.
GAUSSIAN_TRUNCATION = 1e-16

_CODES = {name: code for code, name in enumerate(KERNELS)}

# Queries are processed in blocks of about this many (query, row) pairs, so that the
# output of one block stays within a few hundred megabytes even for wide bandwidths.
_BLOCK_ENTRIES = 16_000_000


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


# Compiled single-threaded: on the 2-core machines this is developed on, threads gave at
# most 1.5x and, with another process busy, parallel regions stalled for tens of ms.
def _compile(fn):
    return numba.njit(cache=True)(fn)


_count = _compile(_count_py)
_fill = _compile(_fill_py)
_normalize_rows = _compile(_normalize_rows_py)


def _prepare(X_train, Q, bandwidth, kernel, exclude):
    code = _check_kernel(kernel)
    X_train = np.asarray(X_train, dtype=np.float64)
    Q = np.asarray(Q, dtype=np.float64)
    h = np.asarray(bandwidth, dtype=np.float64).ravel()
    d = X_train.shape[1]
    if h.shape != (d,) or not np.all(np.isfinite(h)) or np.any(h <= 0):
        raise ValueError(
            f"The 'bandwidth' parameter must hold {d} positive finite values (one per "
            f"column). Got {bandwidth!r} instead."
        )
    if Q.ndim != 2 or Q.shape[1] != d:
        raise ValueError(
            f"The 'Q' parameter must be a 2-d array with {d} columns. "
            f"Got shape {Q.shape} instead."
        )
    # Centre before scaling so that squared distances are formed from small numbers.
    centre = X_train.mean(axis=0) if X_train.shape[0] else np.zeros(d)
    XT = np.ascontiguousarray(((X_train - centre) / h).T)
    Qs = np.ascontiguousarray((Q - centre) / h)
    m = Qs.shape[0]
    skip = np.full(m, -1, dtype=np.int64) if exclude is None else np.asarray(exclude, np.int64)
    if skip.shape != (m,):
        raise ValueError(
            f"The 'exclude' parameter must hold {m} indices (one per query). "
            f"Got shape {skip.shape} instead."
        )
    return code, XT, Qs, skip


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
    code, XT, Qs, skip = _prepare(X_train, Q, bandwidth, kernel, exclude)
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
            np.exp(data, out=data)
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
