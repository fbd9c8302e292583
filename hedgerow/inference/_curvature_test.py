"""Which columns bend: the data-driven choice of the bias correction's quadratic terms.

Robust bias correction (Calonico, Cattaneo & Farrell 2018, JASA 113(522)) removes the
curvature bias of a local linear fit with a local quadratic, and pays for it with the
quadratic terms' own variance. Where the truth is linear in a column that payment buys
nothing: on linear truths, squares of every screened column widened the intervals
1.23-1.32x. So a column's square (and its products with other bending columns) enters the
correction only when the data show that the column bends:

- For each column j of the local line, a partial F test of a cubic B-spline in x_j
  (``sklearn.preprocessing.SplineTransformer``, ``_KNOTS`` knots) beyond the linear term,
  in an additive least-squares model holding every column's linear and spline terms
  (nested linear models; common practice, e.g. Hastie, Tibshirani & Friedman 2009,
  Sec. 5.2 for the spline basis).
- The k p-values are tested together by Holm's step-down rule at ``level`` (Holm 1979,
  Scandinavian Journal of Statistics 6(2)), so that on a linear truth no square enters
  with probability at least 1 - level, whatever k.

Why a global test may decide a local correction: the test uses all n rows, a local fit
only its effective sample size, which is far smaller. Curvature the test cannot see at
n rows gives a local bias well below the local standard error. (Curvature that averages
out over the range, as a full period of a sine, is still seen: the spline is local.)
"""

from __future__ import annotations

import numpy as np
from scipy.stats import f as f_dist

__all__ = ["CURVATURE_TEST_LEVEL", "curved_columns"]

#: Familywise level of the test that decides which columns bend (Holm over columns).
CURVATURE_TEST_LEVEL = 0.05

#: Knots of each column's cubic B-spline in the test (4 interior intervals: enough for
#: one or two bends over the range, few enough parameters for n of a few hundred).
_KNOTS = 5


def _rss_rank(B, y):
    coef, _, rank, _ = np.linalg.lstsq(B, y, rcond=None)
    r = y - B @ coef
    return float(r @ r), int(rank)


def curved_columns(X_c, y, level: float = CURVATURE_TEST_LEVEL):
    """Return ``(columns that bend, p-values)``: indices ordered by p-value, smallest first.

    ``X_c``: the local line's columns (n x k), ``y`` the response. A column bends when
    Holm's step-down rule over the k partial F tests (module docstring) rejects its
    linearity at familywise ``level``. Constant columns never bend (p-value 1). With too
    few rows for the full additive model (n <= its rank) nothing is tested and nothing
    bends.
    """
    from sklearn.preprocessing import SplineTransformer

    X_c = np.asarray(X_c, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    n, k = X_c.shape
    p = np.ones(k)
    sd = X_c.std(axis=0)
    live = np.flatnonzero(sd > 0)
    if live.size == 0:
        return np.zeros(0, dtype=np.int64), p
    Xs = (X_c[:, live] - X_c[:, live].mean(axis=0)) / sd[live]
    base = np.hstack([np.ones((n, 1)), Xs])
    splines = [SplineTransformer(n_knots=_KNOTS, degree=3, include_bias=False)
               .fit_transform(Xs[:, [j]]) for j in range(live.size)]
    rss_full, rank_full = _rss_rank(np.hstack([base, *splines]), y)
    resid_df = n - rank_full
    if resid_df < 1 or rss_full <= 0:
        return np.zeros(0, dtype=np.int64), p
    for j in range(live.size):
        others = [s for i, s in enumerate(splines) if i != j]
        rss_red, rank_red = _rss_rank(np.hstack([base, *others]), y)
        extra = rank_full - rank_red
        if extra < 1:
            continue
        F = ((rss_red - rss_full) / extra) / (rss_full / resid_df)
        p[live[j]] = float(f_dist.sf(max(F, 0.0), extra, resid_df))
    order = np.argsort(p, kind="stable")
    keep = []
    for rank, j in enumerate(order):  # Holm: the r-th smallest p against level / (k - r)
        if p[j] > level / (k - rank):
            break
        keep.append(int(j))
    return np.array(keep, dtype=np.int64), p
