"""Bias-aware intervals: a worst-case curvature bias added to the little-bags interval.

A forest prediction is linear in y: a(x) = sum_i l_i(x) y_i with l(x) the equivalent
kernel (``hedgerow.local.equivalent_kernel``: forest weights times the first row of the
inverse local Gram matrix times [1, z_i]). If the local fit reproduces affine functions
(a local linear fit without ridge penalty) and the truth f is in the Taylor class

    |f(x + z) - f(x) - grad f(x)' z| <= M / 2 * ||z||^2

(z in standardised correction columns), its bias at x is at most

    b(x) = M / 2 * sum_i |l_i(x)| * ||z_i(x)||^2

and the bound is attained by some f in the class (Armstrong & Kolesar 2018, Econometrica
86(2), Taylor classes; 2020, Quantitative Economics 11(1)). The estimate is then
N(f(x) + bias, se^2) with |bias| <= b, and the shortest interval centred on the estimate
that covers for every such bias has half-width

    cv_alpha(b / se) * se,   cv_alpha(t) = 1 - alpha quantile of |N(t, 1)|,

which is the square root of a non-central chi-square(1, t^2) quantile. With M = 0 it is
the normal interval exactly. ``se`` is the little-bags standard error of the same
prediction: the bias bound uses the equivalent kernel of the forest-level fit, the same
linear functional whose per-tree linearisation the little bags average (VARIANCE-NOTES:
the little-bags sd measured 1.11-1.16 x the true sd; the miss was bias).

The curvature constant M comes from the data by a rule of thumb (Armstrong & Kolesar
2020, Sec. 4, value from memory: the largest second derivative of a global quartic
polynomial fitted by least squares) or is set by the user.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.stats import ncx2

from hedgerow._validation import check_level
from hedgerow.inference._intervals import _normal_quantile

__all__ = [
    "bias_aware_half_width",
    "curvature_bias_bound",
    "curvature_moment",
    "curvature_rule_of_thumb",
    "folded_normal_quantile",
    "worst_case_curvature_sum",
]


def folded_normal_quantile(t, level: float = 0.95) -> np.ndarray:
    """Return cv(t), the ``level`` quantile of |N(t, 1)| (elementwise; t >= 0).

    |N(t, 1)|^2 is non-central chi-square with one degree of freedom and non-centrality
    t^2, so cv(t) = sqrt(ncx2.ppf(level, 1, t^2)); at t = 0 it is the normal quantile
    z_{(1+level)/2} exactly.
    """
    level = check_level(level)
    t = np.abs(np.asarray(t, dtype=np.float64))
    z = _normal_quantile(0.5 + level / 2.0)
    out = np.full(t.shape, z)
    pos = t > 0
    if np.any(pos):
        out[pos] = np.sqrt(ncx2.ppf(level, 1.0, t[pos] ** 2))
        # far out the quantile is t + z_level (one tail only); ncx2 loses digits there
        big = pos & (t > 30.0)
        out[big] = t[big] + _normal_quantile(level)
    out[np.isnan(t)] = np.nan
    return out


def bias_aware_half_width(std, bias_bound, level: float = 0.95) -> np.ndarray:
    """Return cv_level(b / se) * se, the half-width of the bias-aware interval.

    Where ``bias_bound`` is 0 this is z * se exactly (the normal interval); where se is 0
    and the bound positive, the half-width is the bound plus nothing (b, the limit).
    """
    std = np.asarray(std, dtype=np.float64)
    b = np.asarray(bias_bound, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(b > 0, b / std, 0.0)
        out = folded_normal_quantile(np.where(np.isfinite(t), t, 0.0), level) * std
    return np.where((std == 0) & (b > 0), b, out)


def _kernel_terms(W, X_c, Q_c, fit, scale):
    """Return (W as CSR, query of each non-zero, z_i(x) per non-zero, l_i(x) per non-zero).

    One pass over W's non-zeros: z_i(x) = (x_i - x) / scale and the equivalent-kernel
    weight l_i(x) = w_i(x) * c(x)'[1, z_i(x)] of ``fit`` (c the first row of its inverse
    Gram matrix; the leading columns of z are the fit's own columns).
    """
    W = sp.csr_matrix(W, dtype=np.float64)
    W.sum_duplicates()
    m = W.shape[0]
    rows = np.repeat(np.arange(m), np.diff(W.indptr))
    X_c = np.asarray(X_c, dtype=np.float64)
    Q_c = np.asarray(Q_c, dtype=np.float64)
    scale = np.asarray(scale, dtype=np.float64)
    Z = (X_c[W.indices] - Q_c[rows]) / scale
    g = np.nan_to_num(fit.gram_inv[:, 0, :])
    k = g.shape[1] - 1
    lev = g[rows, 0]
    if k:
        lev = lev + np.einsum("ik,ik->i", g[rows, 1:], Z[:, :k])
    return W, rows, Z, W.data * lev


def worst_case_curvature_sum(W, X_c, Q_c, fit, scale) -> np.ndarray:
    """Return sum_i |l_i(x)| * ||z_i(x)||^2 per query, one pass over W's non-zeros.

    ``l`` is the equivalent kernel of ``fit`` (as ``hedgerow.local.equivalent_kernel``)
    and z_i(x) = (x_i - x) / scale in the correction columns. For a fit with no
    correction columns (degree 0) l = W (rows normalised) and z is still needed: pass the
    columns the curvature is measured in together with a ``fit`` whose ``gram_inv`` is
    (m, 1, 1).
    """
    W, rows, Z, lw = _kernel_terms(W, X_c, Q_c, fit, scale)
    m = W.shape[0]
    term = np.abs(lw) * np.einsum("ik,ik->i", Z, Z)
    out = np.bincount(rows, weights=term, minlength=m)
    out[np.asarray(W.sum(axis=1)).ravel() == 0] = np.nan
    return out


def curvature_moment(W, X_c, Q_c, fit, scale) -> np.ndarray:
    """Return S(x) = sum_i l_i(x) z_i(x) z_i(x)^T per query, shape (m, k, k).

    ``l`` is the equivalent kernel of ``fit`` (as in :func:`worst_case_curvature_sum`).
    For a truth with Hessian H near x and a fit that reproduces affine functions, the bias
    is 1/2 tr(H S(x)) to leading order, so |bias| <= M/2 * ||S(x)||_* (nuclear norm) when
    ||H|| <= M (spectral norm).
    """
    W, rows, Z, lw = _kernel_terms(W, X_c, Q_c, fit, scale)
    m, k = W.shape[0], Z.shape[1]
    S = np.zeros((m, k, k))
    for a in range(k):
        for b in range(a, k):
            v = np.bincount(rows, weights=lw * Z[:, a] * Z[:, b], minlength=m)
            S[:, a, b] = v
            S[:, b, a] = v
    return S


def curvature_bias_bound(W, X_c, Q_c, fit, scale, curvature: float) -> np.ndarray:
    """Return b(x) = M/2 * ||S(x)||_* (see :func:`curvature_moment`), NaN for empty rows.

    For one column and a fit whose Peano kernel keeps one sign (a local linear fit with
    non-negative weights) this is the exact worst-case bias over truths with |f''| <= M;
    otherwise it bounds the leading (constant-curvature) term of the bias. The Taylor-class
    bound :func:`worst_case_curvature_sum` also covers truths that are not smooth and is
    several times wider on forest weights (their neighbourhoods have long tails).
    """
    S = curvature_moment(W, X_c, Q_c, fit, scale)
    nuc = np.abs(np.linalg.eigvalsh(S)).sum(axis=1) if S.shape[1] else np.zeros(S.shape[0])
    W = sp.csr_matrix(W)
    nuc[np.asarray(W.sum(axis=1)).ravel() == 0] = np.nan
    return 0.5 * float(curvature) * nuc


def _polynomial_basis(U: np.ndarray, pairs: bool):
    n, k = U.shape
    cols = [np.ones((n, 1)), U, U**2, U**3, U**4]
    iu, ju = np.triu_indices(k, 1)
    if pairs and iu.size:
        cols.append(U[:, iu] * U[:, ju])
    return np.hstack(cols), (iu, ju) if pairs else (iu[:0], ju[:0])


#: Largest number of columns whose pairwise products enter the rule-of-thumb quartic.
_PAIRS_UP_TO = 6


def curvature_rule_of_thumb(X_c, y, scale) -> float:
    """Return M, the largest Hessian spectral norm of a global quartic fitted to y.

    The quartic (standardised columns u = (x - mean) / scale; every column to the fourth
    power, plus pairwise products when there are at most ``_PAIRS_UP_TO`` columns) is fitted
    by least squares, and M is the largest spectral norm of its Hessian over the training
    rows, in standardised units (Armstrong & Kolesar 2020, Sec. 4, rule of thumb; value
    from memory). A global polynomial is smoother than the truth where it bends sharply,
    so M can be too small there; the user can set the bound instead.
    """
    X_c = np.asarray(X_c, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    n, k = X_c.shape
    if k == 0 or n < 5:
        return 0.0
    U = (X_c - X_c.mean(axis=0)) / scale
    pairs = k <= _PAIRS_UP_TO
    basis, (iu, ju) = _polynomial_basis(U, pairs)
    coef, *_ = np.linalg.lstsq(basis, y, rcond=None)
    c2 = coef[1 + k: 1 + 2 * k]
    c3 = coef[1 + 2 * k: 1 + 3 * k]
    c4 = coef[1 + 3 * k: 1 + 4 * k]
    cp = coef[1 + 4 * k:]
    H = np.zeros((n, k, k))
    diag = np.arange(k)
    H[:, diag, diag] = 2 * c2 + 6 * c3 * U + 12 * c4 * U**2
    if cp.size:
        H[:, iu, ju] = cp
        H[:, ju, iu] = cp
    norms = np.abs(np.linalg.eigvalsh(H)).max(axis=1)
    return float(np.max(norms))
