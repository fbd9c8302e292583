"""Compiled growth of one regression tree on presorted, order-kept row lists.

A tree sees a subsample of the training rows. Each subsample row carries two roles:
*grow* rows choose the splits (they enter the squared-error criterion), *fill* rows
populate the leaves. An honest tree has disjoint roles; a classical tree gives every row
both. A split is taken only if each child keeps at least ``min_samples_leaf`` rows of each
role.

Rows are kept, for every feature, in one array sorted by that feature. A node is a
contiguous segment ``[start, end)`` of every feature's array (the same rows, ordered by
each feature); a split partitions each segment stably into left then right, so no node
ever sorts. The whole forest sorts once (``presort``).

The split criterion is pluggable through ``rule``: before searching a node, the grow rows'
working response is computed by ``_node_response``; ``RULE_MEAN`` uses the response
itself (CART), ``RULE_RIDGE_RESIDUAL`` uses the residuals of a ridge regression of the
response on the correction columns fitted on the node's grow rows, and
``RULE_EFFECT_GRADIENT`` (treatment effects) reads the response as a centred outcome and
the first correction column as a centred treatment, and uses the gradient pseudo-outcome
of the node's effect (see ``_node_response``). Adding a rule means adding a branch there.
"""

from __future__ import annotations

import numpy as np
from numba import njit

RULE_MEAN = 0
RULE_RIDGE_RESIDUAL = 1
RULE_EFFECT_GRADIENT = 2

# Two feature values closer than this fraction of their column's training range are
# treated as tied. scikit-learn's FEATURE_THRESHOLD is the same number as an absolute
# distance; taken relative to the column's own spread it keeps DecisionTreeRegressor's
# splits on columns spread over about one unit and makes the split search depend on the
# order of the values only, whatever their units (X -> a X + b gives the same tree).
_FEATURE_THRESHOLD = 1e-7
_EPS = np.finfo(np.float64).eps


@njit(cache=True, nogil=True, error_model="numpy")
def tie_tolerances(XT, global_order):
    """Return, per column, the distance below which two values count as tied.

    ``_FEATURE_THRESHOLD`` times the column's range over the training rows (read from
    the presorted order, so O(d)); halves are subtracted so that a range near the largest
    float does not overflow. A constant column gets 0 (only equal values tie).
    """
    d, n = global_order.shape
    tol = np.zeros(d)
    if n == 0:
        return tol
    for j in range(d):
        lo = XT[j, global_order[j, 0]]
        hi = XT[j, global_order[j, n - 1]]
        tol[j] = _FEATURE_THRESHOLD * 2.0 * (hi * 0.5 - lo * 0.5)
    return tol


@njit(cache=True, nogil=True, error_model="numpy")
def _node_response(rule, rows, yl, zl, ridge_penalty, resp):
    """Write the working response of the node's grow rows ``rows`` into ``resp``."""
    if rule == RULE_MEAN:
        for r in rows:
            resp[r] = yl[r]
        return
    if rule == RULE_EFFECT_GRADIENT:
        # Gradient-based splitting (Athey, Tibshirani & Wager 2019, Annals of Statistics):
        # with y and w = zl[:, 0] already centred by out-of-bag nuisance forests, the
        # node's effect is tau_P = sum (w - wbar)(y - ybar) / sum (w - wbar)^2 and each
        # row's pseudo-outcome rho_i = (w_i - wbar)((y_i - ybar) - tau_P (w_i - wbar)),
        # which the variance-reduction search below splits on. Centring within the node
        # keeps rho unchanged when y is shifted (the engine centres y globally).
        cnt = rows.shape[0]
        ybar = 0.0
        wbar = 0.0
        for r in rows:
            ybar += yl[r]
            wbar += zl[r, 0]
        ybar /= cnt
        wbar /= cnt
        sxy = 0.0
        sxx = 0.0
        for r in rows:
            dw = zl[r, 0] - wbar
            sxy += dw * (yl[r] - ybar)
            sxx += dw * dw
        tau = sxy / sxx if sxx > 0.0 else 0.0
        for r in rows:
            dw = zl[r, 0] - wbar
            resp[r] = dw * ((yl[r] - ybar) - tau * dw)
        return
    # RULE_RIDGE_RESIDUAL: minimise mean (y - a - z'b)^2 + lam |b|^2 over the node's grow
    # rows (z standardised columns, intercept unpenalised) and keep the residuals.
    k = zl.shape[1]
    G = np.zeros((k + 1, k + 1))
    rhs = np.zeros(k + 1)
    cnt = rows.shape[0]
    for r in rows:
        G[0, 0] += 1.0
        rhs[0] += yl[r]
        for a in range(k):
            za = zl[r, a]
            G[0, a + 1] += za
            rhs[a + 1] += za * yl[r]
            for b in range(a, k):
                G[a + 1, b + 1] += za * zl[r, b]
    for a in range(k + 1):
        for b in range(a):
            G[a, b] = G[b, a]
    for a in range(k + 1):
        for b in range(k + 1):
            G[a, b] /= cnt
        rhs[a] /= cnt
    for a in range(1, k + 1):
        G[a, a] += ridge_penalty
    # A tiny diagonal keeps the system solvable in nodes where a column is constant.
    for a in range(k + 1):
        G[a, a] += 1e-12
    coef = np.linalg.solve(G, rhs)
    for r in rows:
        fit = coef[0]
        for a in range(k):
            fit += coef[a + 1] * zl[r, a]
        resp[r] = yl[r] - fit


@njit(cache=True, nogil=True, error_model="numpy")
def presort(X):
    """Return, per column, the row indices of ``X`` sorted by that column (stable)."""
    n, d = X.shape
    out = np.empty((d, n), dtype=np.int32)
    for j in range(d):
        out[j, :] = np.argsort(X[:, j], kind="mergesort").astype(np.int32)
    return out



@njit(cache=True, nogil=True, error_model="numpy")
def bag_order(global_order, pool):
    """Return, per column, the positions in ``pool`` of its rows sorted by that column.

    ``pool`` (P,) int32 holds distinct training rows (a little bag's half-sample). The
    result is ``global_order`` with the rows outside the pool left out, each row given as
    its position in ``pool``: the same relative order, so lists built from it equal those
    built from ``global_order``. Computed once per bag; each tree of the bag then sweeps
    P instead of n entries per column.
    """
    d, n = global_order.shape
    P = pool.shape[0]
    pos = np.full(n, -1, dtype=np.int32)
    for i in range(P):
        pos[pool[i]] = i
    out = np.empty((d, P), dtype=np.int32)
    for j in range(d):
        c = 0
        for t in range(n):
            p = pos[global_order[j, t]]
            if p >= 0:
                out[j, c] = p
                c += 1
    return out


@njit(cache=True, nogil=True, error_model="numpy")
def _local_lists(pool_order, pool, tree_pos, honest, XT):
    """Per-feature sorted local ids and values of the grow rows and of the fill rows.

    ``tree_pos`` are the tree's rows as positions in ``pool`` (global rows
    ``pool[tree_pos]``), in draw order; an honest tree's first ``s // 2`` grow, the rest
    fill, a classical tree's rows do both. One sweep of the pool's presorted order
    (``bag_order``) per feature fills both roles' lists; ``XT`` is the (d, n) transposed
    training matrix.
    """
    d, P = pool_order.shape
    s = tree_pos.shape[0]
    n_g = s // 2 if honest else s
    n_f = s - n_g if honest else s
    g_local = np.full(P, -1, dtype=np.int64)
    f_local = np.full(P, -1, dtype=np.int64)
    g_rows = np.empty(n_g, dtype=np.int64)
    f_rows = np.empty(n_f, dtype=np.int64)
    cg = 0
    cf = 0
    for i in range(s):
        pp = tree_pos[i]
        r = pool[pp]
        if not honest or i < n_g:
            g_local[pp] = cg
            g_rows[cg] = r
            cg += 1
        if not honest or i >= n_g:
            f_local[pp] = cf
            f_rows[cf] = r
            cf += 1
    g_order = np.empty((d, n_g), dtype=np.int32)
    g_vals = np.empty((d, n_g))
    f_order = np.empty((d, n_f), dtype=np.int32)
    f_vals = np.empty((d, n_f))
    for j in range(d):
        xj = XT[j]
        a = 0
        b = 0
        for t in range(P):
            pp = pool_order[j, t]
            lg = g_local[pp]
            lf = f_local[pp]
            if lg >= 0:
                g_order[j, a] = lg
                g_vals[j, a] = xj[pool[pp]]
                a += 1
            if lf >= 0:
                f_order[j, b] = lf
                f_vals[j, b] = xj[pool[pp]]
                b += 1
    return g_rows, g_order, g_vals, f_rows, f_order, f_vals


@njit(cache=True, nogil=True, error_model="numpy")
def _partition(order, vals, start, end, goes_left, buf, vbuf):
    """Stably move the rows with ``goes_left`` to the front of every feature's segment."""
    d = order.shape[0]
    for j in range(d):
        ordj = order[j]
        valj = vals[j]
        a = start
        b = 0
        # branch-free: write each row to both places, advance one cursor
        for p in range(start, end):
            r = ordj[p]
            v = valj[p]
            g = goes_left[r]
            ordj[a] = r
            valj[a] = v
            buf[b] = r
            vbuf[b] = v
            a += g
            b += 1 - g
        for t in range(b):
            ordj[a + t] = buf[t]
            valj[a + t] = vbuf[t]


@njit(cache=True, nogil=True, error_model="numpy")
def grow_tree(
    XT,
    y,
    Z,
    tol,
    pool_order,
    pool,
    tree_pos,
    honest,
    leaf_rows,
    min_samples_leaf,
    max_features,
    max_depth,
    rule,
    ridge_penalty,
    seed,
):
    """Return the flat node arrays of one tree grown on the rows ``pool[tree_pos]``.

    Parameters
    ----------
    XT : (d, n) float64 training features, transposed; y : (n,) response; Z : (n, k)
        standardised
        correction columns (used by the ridge-residual rule; the effect-gradient rule
        reads the centred treatment from column 0).
    tol : (d,) tie distances, ``tie_tolerances(XT, presort(X))``.
    pool_order : (d, P) int32 from ``bag_order(presort(X), pool)`` (or ``presort(X)``
        itself with ``pool = arange(n)``).
    pool : (P,) int32 training rows the tree draws from (its bag's half-sample).
    tree_pos : (s,) int32 the tree's rows as positions in ``pool``, in draw order.
    honest : the first ``s // 2`` rows place splits and the rest fill leaves; otherwise
        every row does both.
    leaf_rows : (n_fill,) int32, written: the global fill-row ids of each leaf, CSR by
        leaf id (every fill row lands in exactly one leaf).
    min_samples_leaf, max_features, max_depth (-1 for none), rule, ridge_penalty.
    seed : seeds this thread's generator, so the tree depends on the seed alone.

    Returns
    -------
    feature (int32, -1 at leaves), threshold (float64), left, right (int32, child node
    ids; at a leaf ``left`` holds the leaf id), leaf_ptr (int64, into ``leaf_rows``).

    Grow rows and fill rows are kept in separate per-feature sorted lists, so a node's
    role counts are segment lengths and the scans have no role branches.
    """
    np.random.seed(seed)  # noqa: NPY002 (numba: per-thread legacy generator)
    d = XT.shape[0]
    g_rows, g_order, g_vals, f_rows, f_order, f_vals = _local_lists(
        pool_order, pool, tree_pos, honest, XT
    )
    n_grow = g_rows.shape[0]
    n_fill = f_rows.shape[0]
    yl = np.empty(n_grow)
    kz = Z.shape[1]
    zl = np.empty((n_grow, kz))
    for i in range(n_grow):
        yl[i] = y[g_rows[i]]
        for a in range(kz):
            zl[i, a] = Z[g_rows[i], a]

    # at most one leaf per min_samples_leaf rows of the scarcer role
    max_leaves = max(1, min(n_grow, n_fill) // max(1, min_samples_leaf))
    max_nodes = 2 * max_leaves + 1
    feature = np.full(max_nodes, -1, dtype=np.int32)
    threshold = np.zeros(max_nodes)
    left = np.full(max_nodes, -1, dtype=np.int32)
    right = np.full(max_nodes, -1, dtype=np.int32)
    leaf_ptr = np.zeros(max_leaves + 1, dtype=np.int64)

    resp = np.zeros(n_grow)
    g_left = np.zeros(n_grow, dtype=np.int64)
    f_left = np.zeros(n_fill, dtype=np.int64)
    g_buf = np.empty(n_grow, dtype=np.int32)
    g_vbuf = np.empty(n_grow)
    f_buf = np.empty(n_fill, dtype=np.int32)
    f_vbuf = np.empty(n_fill)
    feats = np.arange(d)

    # explicit stack of (node id, grow segment, fill segment, depth)
    st = np.empty((max_nodes, 6), dtype=np.int64)
    st[0, 0] = 0
    st[0, 1] = 0
    st[0, 2] = n_grow
    st[0, 3] = 0
    st[0, 4] = n_fill
    st[0, 5] = 0
    top = 1
    n_nodes = 1
    n_leaves = 0
    n_leaf_rows = 0
    msl = min_samples_leaf

    while top > 0:
        top -= 1
        node = st[top, 0]
        gs = st[top, 1]
        ge = st[top, 2]
        fs = st[top, 3]
        fe = st[top, 4]
        depth = st[top, 5]
        g_cnt = ge - gs
        f_cnt = fe - fs

        best_feat = -1
        best_thr = 0.0
        best_gl = 0
        best_fl = 0
        splittable = (
            g_cnt >= 2 * msl and f_cnt >= 2 * msl and g_cnt >= 2
            and (max_depth < 0 or depth < max_depth)
        )
        if splittable:
            _node_response(rule, g_order[0, gs:ge], yl, zl, ridge_penalty, resp)
            tot = 0.0
            tot2 = 0.0
            ysq = 0.0
            for p in range(gs, ge):
                r = g_order[0, p]
                v = resp[r]
                tot += v
                tot2 += v * v
                ysq += yl[r] * yl[r]
            impurity = tot2 / g_cnt - (tot / g_cnt) ** 2
            # A node is constant when its variance is below the rounding error of the sums
            # that compute it: n * eps * mean(y^2) (the worst-case error bound of an n-term
            # recursive sum, Higham 2002, Accuracy and Stability of Numerical Algorithms,
            # section 4.2; from memory). Relative to the node's own magnitude, so y -> c y
            # keeps the tree (an absolute eps made every node of y * 1e-8 a leaf).
            if impurity <= _EPS * ysq:
                splittable = False
        if splittable:
            best_proxy = -np.inf
            # draw features without replacement until max_features non-constant ones
            # have been searched (constant features do not count)
            n_drawn = 0
            n_visited = 0
            while n_drawn < d and n_visited < max_features:
                jpos = n_drawn + np.random.randint(d - n_drawn)  # noqa: NPY002
                tmp = feats[n_drawn]
                feats[n_drawn] = feats[jpos]
                feats[jpos] = tmp
                f = feats[n_drawn]
                n_drawn += 1
                go = g_order[f]
                gv = g_vals[f]
                fv = f_vals[f]
                # the segment is sorted by this feature: constant iff its ends tie
                tol_f = tol[f]
                if gv[ge - 1] <= gv[gs] + tol_f:
                    continue
                n_visited += 1
                # The fill-role constraint is a window of thresholds: at least msl fill
                # rows <= thr needs thr >= fv[fs + msl - 1]; at least msl above needs
                # thr < fv[fe - msl]. Thresholds rise with p, so two comparisons replace
                # a running count; the winner's fill count is found after the scan.
                lo_f = fv[fs + msl - 1]
                hi_f = fv[fe - msl]
                # candidate between grow positions p-1 and p: left = [gs, p); both
                # sides keep at least msl grow rows
                sum_l = 0.0
                for p in range(gs, gs + msl - 1):
                    sum_l += resp[go[p]]
                for p in range(gs + msl, ge - msl + 1):
                    sum_l += resp[go[p - 1]]
                    u = gv[p - 1]
                    v = gv[p]
                    if v <= u + tol_f:
                        continue
                    thr = u / 2.0 + v / 2.0
                    if thr == v or thr == np.inf or thr == -np.inf:
                        thr = u
                    if thr < lo_f:
                        continue
                    if thr >= hi_f:
                        break
                    gl = p - gs
                    gr = g_cnt - gl
                    sum_r = tot - sum_l
                    proxy = sum_l * sum_l / gl + sum_r * sum_r / gr
                    if proxy > best_proxy:
                        best_proxy = proxy
                        best_feat = f
                        best_thr = thr
                        best_gl = gl
        if best_feat >= 0:
            fv = f_vals[best_feat]
            q = fs
            while q < fe and fv[q] <= best_thr:
                q += 1
            best_fl = q - fs
        if best_feat < 0:
            leaf_id = n_leaves
            n_leaves += 1
            left[node] = leaf_id
            for p in range(fs, fe):
                leaf_rows[n_leaf_rows] = f_rows[f_order[0, p]]
                n_leaf_rows += 1
            leaf_ptr[leaf_id + 1] = n_leaf_rows
            continue
        # mark sides from the best feature's sorted lists, then partition every feature
        go = g_order[best_feat]
        for p in range(gs, ge):
            g_left[go[p]] = 1 if p < gs + best_gl else 0
        fo = f_order[best_feat]
        for p in range(fs, fe):
            f_left[fo[p]] = 1 if p < fs + best_fl else 0
        _partition(g_order, g_vals, gs, ge, g_left, g_buf, g_vbuf)
        _partition(f_order, f_vals, fs, fe, f_left, f_buf, f_vbuf)
        feature[node] = best_feat
        threshold[node] = best_thr
        lnode = n_nodes
        rnode = n_nodes + 1
        n_nodes += 2
        left[node] = lnode
        right[node] = rnode
        # push right first so the left subtree is numbered first (depth-first order)
        st[top, 0] = rnode
        st[top, 1] = gs + best_gl
        st[top, 2] = ge
        st[top, 3] = fs + best_fl
        st[top, 4] = fe
        st[top, 5] = depth + 1
        top += 1
        st[top, 0] = lnode
        st[top, 1] = gs
        st[top, 2] = gs + best_gl
        st[top, 3] = fs
        st[top, 4] = fs + best_fl
        st[top, 5] = depth + 1
        top += 1

    return (
        feature[:n_nodes].copy(),
        threshold[:n_nodes].copy(),
        left[:n_nodes].copy(),
        right[:n_nodes].copy(),
        leaf_ptr[: n_leaves + 1].copy(),
    )
