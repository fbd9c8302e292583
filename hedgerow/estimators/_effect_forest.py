"""The treatment-effect forest: a causal forest with the local linear correction.

Method, each step with its published source:

- Centring: the outcome y and the treatment w are centred by out-of-bag honest regression
  forests, m(x) = E[y | x] and e(x) = E[w | x] (Robinson 1988, Econometrica; Nie & Wager
  2021, Biometrika). Fitted values of the user's own models may be passed instead.
- Splits: gradient-based splitting on the node's pseudo-outcome (Athey, Tibshirani &
  Wager 2019, Annals of Statistics), ``RULE_EFFECT_GRADIENT`` of the engine; honest trees,
  the forest's subsampling and little bags.
- Effect at x: the forest-weighted moment condition sum_i alpha_i(x) z_i (y~_i - z_i'theta)
  = 0 with z_i = (1, w~_i, w~_i (x_i - x)) and a ridge penalty on the last block (local
  linear correction, Friedberg, Tibshirani, Athey & Wager 2021, JCGS); tau(x) is the
  coefficient of w~. Without the last block it is the uncorrected causal-forest effect.
- Standard errors: little bags of the per-tree influence terms of that solve.

Treatment-effect output is decision support, not advice: it needs unconfoundedness (no
diagnostic here checks it) and overlap; defer to the study design and domain review.
"""

from __future__ import annotations

import copy
import warnings
from numbers import Integral, Real

import numpy as np
from sklearn.base import BaseEstimator
from sklearn.linear_model import Lasso, LassoCV
from sklearn.utils._param_validation import Interval, StrOptions
from sklearn.utils.validation import check_is_fitted

from hedgerow._validation import (
    check_fit_data,
    check_level,
    check_predict_data,
    checked_rows,
    preserve_fitted_state,
    validate_params,
)
from hedgerow.estimators._effect_solve import effect_penalty_path, solve_effects
from hedgerow.estimators._forest import (
    _MAX_SQUARED,
    BIAS_CORRECTION_PENALTY,
    HonestForestRegressor,
    IntervalParts,
    _ForestBase,
    check_curvature_bound,
)
from hedgerow.forest import RULE_EFFECT_GRADIENT
from hedgerow.inference import (
    forest_monte_carlo_variance,
    little_bags_variance,
    normal_interval,
    satterthwaite_df,
)

__all__ = ["DEFAULT_EFFECT_INTERVAL", "EFFECT_CAUTION", "EFFECT_INTERVAL_METHODS",
           "AverageEffect",
           "TreatmentEffectForest"]

#: The caution every effect reading carries.
EFFECT_CAUTION = (
    "Decision support, not advice: an effect reading assumes unconfoundedness (no "
    "measured-or-not confounder left out; no diagnostic here checks it) and overlap "
    "(every unit could have received either treatment). Defer to the study design and to "
    "domain review."
)

#: Interval methods available for effects (the regression forest's names and meanings).
EFFECT_INTERVAL_METHODS = ("bias_corrected", "bias_bound", "clt")

#: The default effect interval (see DEVELOPERS.md, "The treatment-effect forest").
DEFAULT_EFFECT_INTERVAL = "bias_corrected"

#: Penalties ``ridge_penalty="auto"`` chooses from, by out-of-bag R-loss.
EFFECT_RIDGE_GRID = (0.01, 0.1, 1.0, 10.0)

#: Out-of-bag rows (a seeded subsample) on which ``ridge_penalty="auto"`` compares the
#: R-loss of the grid: a speed bound (the choice is among four values).
RLOSS_ROWS = 500

#: A propensity below this or above 1 minus this is flagged as weak overlap.
OVERLAP_MARGIN = 0.05


class AverageEffect:
    """An average treatment effect with its standard error (see ``EFFECT_CAUTION``)."""

    def __init__(self, estimate, std_error, n, method):
        self.estimate = float(estimate)
        self.std_error = float(std_error)
        self.n = int(n)
        self.method = method

    def interval(self, level=0.95):
        """Return the normal ``(lower, upper)`` interval at ``level``."""
        level = check_level(level)
        lo, hi = normal_interval(np.array([self.estimate]), np.array([self.std_error]),
                                 level)
        return float(lo[0]), float(hi[0])

    def __repr__(self):
        return (f"AverageEffect(estimate={self.estimate:.4g}, std_error="
                f"{self.std_error:.4g}, n={self.n}, method={self.method!r})\n"
                f"Caution: {EFFECT_CAUTION}")


def _check_treatment(treatment, n):
    try:
        w = np.asarray(treatment, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise ValueError(
            f"The 'treatment' parameter must be numeric (0/1 for a binary treatment, or a "
            f"continuous dose). Got {type(treatment).__name__} values instead."
        ) from err
    if w.ndim != 1 or w.shape[0] != n:
        raise ValueError(
            f"The 'treatment' parameter must have one value per row of X ({n} rows). Got "
            f"shape {w.shape} instead."
        )
    if not np.all(np.isfinite(w)):
        raise ValueError(
            f"The 'treatment' parameter must be finite. Got {int((~np.isfinite(w)).sum())} "
            f"NaN or infinite values instead."
        )
    values = np.unique(w)
    if values.size < 2:
        raise ValueError(
            f"The 'treatment' parameter must vary: every row has treatment {values[0]!r} "
            f"(a single arm), so no effect can be estimated."
        )
    binary = bool(np.all(np.isin(values, (0.0, 1.0))))
    return np.ascontiguousarray(w), binary


def _check_nuisance(name, value, n):
    v = np.asarray(value, dtype=np.float64)
    if v.ndim != 1 or v.shape[0] != n:
        raise ValueError(
            f"The '{name}' parameter must hold one fitted value per row of X ({n} rows). "
            f"Got shape {v.shape} instead."
        )
    if not np.all(np.isfinite(v)):
        raise ValueError(f"The '{name}' parameter must be finite (no NaN or inf).")
    return np.ascontiguousarray(v)


class TreatmentEffectForest(BaseEstimator):
    """Heterogeneous treatment effects by a causal forest with the local linear correction.

    The method is the published causal forest (Athey, Tibshirani & Wager 2019) on
    Robinson-centred outcome and treatment (Robinson 1988; Nie & Wager 2021), with the
    local linear correction of Friedberg et al. (2021). Caution: effect readings are
    decision support, not advice; they assume unconfoundedness (no diagnostic here checks
    it) and overlap; defer to the study design and to domain review.

    Parameters
    ----------
    n_estimators, subsample_rate, trees_per_bag, honest, min_samples_leaf, max_features,
    max_depth, random_state, n_jobs : as for ``HonestForestRegressor``.
    ridge_penalty : "auto" or float >= 0
        Penalty on the correction slopes, relative to each slope column's local second
        moment (0.1 shrinks a lone slope by about a tenth); changeable without refit
        (``with_ridge_penalty``). "auto" (default): the value of ``EFFECT_RIDGE_GRID``
        with the lowest out-of-bag R-loss sum (y~ - tau(x) w~)^2 (Nie & Wager 2021) on
        up to ``RLOSS_ROWS`` training rows; the choice is ``ridge_penalty_``.
    correction_features : "auto", None or list of column indices
        Columns of the local correction. "auto" (default): those a lasso of the centred
        outcome on w~, w~ x and w~ x^2 (the R-learner with linear and squared terms,
        Nie & Wager 2021) keeps at the one-standard-error penalty, a column being kept
        when its linear or its squared term survives; none kept means no correction.
        None: every column.
        The columns used are ``correction_features_``.
    nuisance_estimators : int or None
        Trees of each centring forest (default: a quarter of ``n_estimators``, at least
        40; single-tree bags on half-samples, so each row is out-of-bag for about half).
    """

    _parameter_constraints: dict = {
        **_ForestBase._parameter_constraints,
        "ridge_penalty": [StrOptions({"auto"}), Interval(Real, 0.0, None, closed="left")],
        "correction_features": [None, StrOptions({"auto"}), "array-like"],
        "nuisance_estimators": [None, Interval(Integral, 2, None, closed="left")],
    }

    def __init__(
        self,
        n_estimators=500,
        *,
        subsample_rate=0.5,
        trees_per_bag="auto",
        honest=True,
        min_samples_leaf=5,
        max_features=None,
        max_depth=None,
        ridge_penalty="auto",
        correction_features="auto",
        nuisance_estimators=None,
        random_state=None,
        n_jobs=None,
    ):
        self.n_estimators = n_estimators
        self.subsample_rate = subsample_rate
        self.trees_per_bag = trees_per_bag
        self.honest = honest
        self.min_samples_leaf = min_samples_leaf
        self.max_features = max_features
        self.max_depth = max_depth
        self.ridge_penalty = ridge_penalty
        self.correction_features = correction_features
        self.nuisance_estimators = nuisance_estimators
        self.random_state = random_state
        self.n_jobs = n_jobs

    # borrowed plumbing of the regression forests (same validation, growth and threads)
    _check_forest_params = _ForestBase._check_forest_params
    _grow = _ForestBase._grow
    _n_threads = _ForestBase._n_threads
    _require_bags = _ForestBase._require_bags

    def __repr__(self, N_CHAR_MAX=700):
        return super().__repr__(N_CHAR_MAX) + f"\nCaution: {EFFECT_CAUTION}"

    # -- fitting -------------------------------------------------------------------------
    def _nuisance(self, X, v, seed):
        trees = self.nuisance_estimators or max(40, self.n_estimators // 4)
        f = HonestForestRegressor(
            n_estimators=trees, subsample_rate=min(self.subsample_rate, 0.5), trees_per_bag=1,
            min_samples_leaf=self.min_samples_leaf, random_state=seed, n_jobs=self.n_jobs,
        ).fit(X, v)
        return f.oob_predict()

    def fit(self, X, y, treatment, sample_weight=None, *, outcome_model=None,
            propensity_model=None):
        """Fit the centring forests (unless given) and the effect forest; return ``self``.

        Parameters
        ----------
        X : (n, d); y : (n,) outcome; treatment : (n,) 0/1 or a continuous dose.
        sample_weight : (n,) non-negative, optional
            Weights of the local moment solve and the average effect (the forests'
            splits are unweighted).
        outcome_model, propensity_model : (n,), optional
            Out-of-sample fitted values m(x_i) = E[y | x_i] and e(x_i) = E[w | x_i] from
            the user's own models; by default out-of-bag honest forests.
        """
        with preserve_fitted_state(self):
            validate_params(self)
            X, y = check_fit_data(self, X, y)
            n = X.shape[0]
            w, binary = _check_treatment(treatment, n)
            if sample_weight is None:
                sw = np.ones(n)
            else:
                sw = _check_nuisance("sample_weight", sample_weight, n)
                if np.any(sw < 0) or sw.sum() <= 0:
                    raise ValueError("The 'sample_weight' parameter must be non-negative "
                                     "with a positive sum.")
            rng = np.random.default_rng(
                None if self.random_state is None else
                (self.random_state if isinstance(self.random_state, Integral) else None))
            seeds = rng.integers(0, 2**31 - 1, size=3)
            m = (self._nuisance(X, y, int(seeds[0])) if outcome_model is None
                 else _check_nuisance("outcome_model", outcome_model, n))
            e = (self._nuisance(X, w, int(seeds[1])) if propensity_model is None
                 else _check_nuisance("propensity_model", propensity_model, n))
            if not (np.all(np.isfinite(m)) and np.all(np.isfinite(e))):
                raise ValueError(
                    "Some rows have no out-of-bag centring value (every nuisance tree drew "
                    "them); set nuisance_estimators higher or pass outcome_model and "
                    "propensity_model."
                )
            if binary:
                bad = (e <= 0.0) | (e >= 1.0)
                if np.any(bad):
                    raise ValueError(
                        f"The 'propensity_model' values must lie strictly between 0 and 1 "
                        f"for a binary treatment (overlap); {int(bad.sum())} rows have a "
                        f"propensity of exactly 0 or 1 (or outside [0, 1])."
                    )
            yt = y - m
            wt = w - e
            Z = wt[:, None]
            cols = self._choose_columns(X, yt, wt, n)
            forest, l, mtry, s = self._grow(X, yt, rule=RULE_EFFECT_GRADIENT, Z=Z)
            scale = X.std(axis=0)
            x_scale = np.where(scale > 0, scale, 1.0)
            lam, path = self._choose_penalty(forest, X, yt, wt, sw, x_scale, cols, int(seeds[2]))
        self.forest_ = forest
        self.X_train_ = X
        self.y_train_ = y
        self.treatment_ = w
        self.binary_treatment_ = binary
        self.sample_weight_ = sw
        self.outcome_fit_ = m
        self.propensity_ = e
        # what a refit from the settings alone cannot reproduce (snapshots refuse these)
        self.supplied_inputs_ = tuple(
            name for name, v in (("outcome_model", outcome_model),
                                 ("propensity_model", propensity_model),
                                 ("sample_weight", sample_weight)) if v is not None)
        self.y_centred_ = yt
        self.w_centred_ = wt
        self.trees_per_bag_ = l
        self.max_features_ = mtry
        self.subsample_size_ = s
        self.x_centre_ = X.mean(axis=0)
        self.x_scale_ = x_scale
        self.correction_features_ = cols
        self.ridge_penalty_ = lam
        self.rloss_path_ = path  # penalty -> out-of-bag R-loss ("auto" only)
        return self

    def _choose_columns(self, X, yt, wt, n):
        """Return the correction columns (``correction_features``; see the class doc)."""
        d = X.shape[1]
        cf = self.correction_features
        if cf is None:
            return np.arange(d)
        if not (isinstance(cf, str) and cf == "auto"):
            cols = np.asarray(cf).ravel()
            if cols.dtype.kind not in "iu" or np.any((cols < 0) | (cols >= d)) or (
                    np.unique(cols).size != cols.size):
                raise ValueError(
                    f"The 'correction_features' parameter must be 'auto', None or distinct "
                    f"column indices in [0, {d}). Got {cf!r} instead.")
            return np.sort(cols.astype(np.int64))
        Xs = (X - X.mean(axis=0)) / np.where(X.std(axis=0) > 0, X.std(axis=0), 1.0)
        # squares too: a valley- or hill-shaped effect has no linear interaction on a
        # symmetric design, yet a local line corrects its sloped flanks and edges
        Q = Xs ** 2
        Q = (Q - Q.mean(axis=0)) / np.where(Q.std(axis=0) > 0, Q.std(axis=0), 1.0)
        A = np.column_stack([wt, wt[:, None] * Xs, wt[:, None] * Q])
        sd = float(np.std(yt))
        target = (yt - yt.mean()) / (sd if sd > 0 else 1.0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            # 40 penalties on the path (the default 100 doubled the screen's time)
            cv = LassoCV(cv=min(5, n), alphas=40, random_state=0).fit(A, target)
            mse = cv.mse_path_.mean(axis=1)
            se = cv.mse_path_.std(axis=1, ddof=1) / np.sqrt(cv.mse_path_.shape[1])
            best = int(np.argmin(mse))
            # one-standard-error rule (Hastie, Tibshirani & Friedman 2009, Sec. 7.10):
            # the largest penalty within one s.e. of the minimum (alphas_ descend)
            alpha = cv.alphas_[int(np.flatnonzero(mse <= mse[best] + se[best])[0])]
            coef = Lasso(alpha=alpha).fit(A, target).coef_[1:]
        kept = (np.abs(coef[:d]) > 1e-10) | (np.abs(coef[d:]) > 1e-10)
        return np.flatnonzero(kept).astype(np.int64)

    def _choose_penalty(self, forest, X, yt, wt, sw, x_scale, cols, seed):
        """Return (penalty, {penalty: out-of-bag R-loss}): the given float, or the choice."""
        lam = self.ridge_penalty
        if not (isinstance(lam, str) and lam == "auto"):
            return float(lam), {}
        if cols.size == 0:
            return float(EFFECT_RIDGE_GRID[1]), {}  # nothing to penalise
        n = X.shape[0]
        rows = np.arange(n)
        if n > RLOSS_ROWS:
            rows = np.sort(np.random.default_rng(seed).choice(n, RLOSS_ROWS, replace=False))
        leaves = forest.apply(X[rows], n_jobs=self._n_threads())
        usable = ~forest.inbag(rows)
        tau = effect_penalty_path(forest, leaves, usable, X, X[rows], wt, yt, sw, x_scale,
                                  cols, (), np.asarray(EFFECT_RIDGE_GRID)[:, None],
                                  n_jobs=self._n_threads())
        ok = np.all(np.isfinite(tau), axis=1)
        r = yt[rows][ok, None] - tau[ok] * wt[rows][ok, None]
        loss = np.sum(sw[rows][ok, None] * r ** 2, axis=0)
        path = dict(zip(EFFECT_RIDGE_GRID, loss.tolist(), strict=True))
        return float(EFFECT_RIDGE_GRID[int(np.argmin(loss))]), path

    # -- the local solve -----------------------------------------------------------------
    def _solve(self, X, lam, corrected, oob=False, cols=None):
        """Return (tau (m,), slopes of tau in X units (m, d), per-tree influence psi (m, B)).

        One compiled pass per query over its leaves' fill rows
        (``hedgerow.estimators._effect_solve.solve_effects``; ``solve_effects_loop`` is
        the numpy reference the tests compare it with).
        """
        check_is_fitted(self)
        if oob:
            X = self.X_train_
            usable = ~self.forest_.inbag(np.arange(X.shape[0]))
        else:
            usable = None
        leaves = self.forest_.apply(X, n_jobs=self._n_threads())
        d = X.shape[1]
        if not corrected:
            cols = np.arange(0)
        elif cols is None:
            cols = self._correction_columns()
        theta, psi = solve_effects(
            self.forest_, leaves, usable, self.X_train_, X, self.w_centred_,
            self.y_centred_, self.sample_weight_, self.x_scale_, cols, (), lam,
            n_jobs=self._n_threads(),
        )
        tau = theta[:, 1]
        # the local line is held flat along columns outside the correction
        slopes = np.full((X.shape[0], d), 0.0 if corrected else np.nan)
        if corrected:
            slopes[:, cols] = theta[:, 2:2 + cols.size] / self.x_scale_[cols]
        return tau, slopes, psi

    def _correction_columns(self):
        return self.correction_features_

    def _penalty(self, ridge_penalty):
        lam = ridge_penalty
        if lam is None:
            check_is_fitted(self)
            lam = self.ridge_penalty
            if isinstance(lam, str) and lam == "auto":
                lam = self.ridge_penalty_
        if isinstance(lam, bool) or not isinstance(lam, Real) or not (
                np.isfinite(lam) and lam >= 0):
            raise ValueError(f"The 'ridge_penalty' parameter must be a finite float >= 0. "
                             f"Got {lam!r} instead.")
        return float(lam)

    def _std(self, psi):
        self._require_bags()
        return little_bags_variance(psi, self.trees_per_bag_).std

    # -- public queries ------------------------------------------------------------------
    def predict_effect(self, X, return_std=False, *, corrected=True, ridge_penalty=None):
        """Return tau(x) (and its little-bags standard error) at the rows of X.

        ``corrected=False`` gives the uncorrected causal-forest effect on the same trees.
        Caution: decision support, not advice; assumes unconfoundedness (not checked
        here) and overlap; defer to the study design and to domain review.
        """
        lam = self._penalty(ridge_penalty)
        X = check_predict_data(self, X)
        tau, _, psi = self._solve(X, lam, corrected)
        return (tau, self._std(psi)) if return_std else tau

    def oob_effect(self, return_std=False, *, corrected=True, ridge_penalty=None):
        """Return out-of-bag effects of the training rows (trees that did not draw them)."""
        lam = self._penalty(ridge_penalty)
        tau, _, psi = self._solve(None, lam, corrected, oob=True)
        return (tau, self._std(psi)) if return_std else tau

    def effect_interval(self, X, level=0.95, method=DEFAULT_EFFECT_INTERVAL, *,
                        corrected=True, ridge_penalty=None, curvature_bound=None):
        """Return ``(lower, upper)`` of tau(x) at ``level``.

        Methods (as the regression forests' ``predict_interval``; see
        ``effect_interval_parts`` for what each is made of):

        - "bias_corrected" (default): robust bias correction (Calonico, Cattaneo & Farrell
          2018): centred on a local quadratic of the effect (the correction columns and
          the squares of their differences from x, penalty
          ``BIAS_CORRECTION_PENALTY``) under the same forest weights, studentised by
          that estimator's own little-bags variance plus the finite forest's Monte
          Carlo variance, Student-t quantile at the Satterthwaite degrees of freedom.
          ``corrected`` and ``ridge_penalty`` do not enter it.
        - "clt": the normal interval from little bags centred on the estimate (ignores
          its bias).
        - "bias_bound": centred on the corrected effect, half-width ``cv(b / se) * se``
          (Armstrong & Kolesar 2018, 2020) with se the little-bags sd and
          b = M/2 * ||sum_i l_i w~_i u_i u_i'||_* from the effect's equivalent kernel l;
          M (``curvature_bound``, standardised units of the correction columns) by
          default the largest Hessian norm of a global quartic effect fitted by least
          squares to the centred outcome (``rule_of_thumb_effect_curvature``).
          ``curvature_bound=0`` gives the "clt" interval exactly.

        Caution: decision support, not advice; assumes unconfoundedness (not checked
        here) and overlap; defer to the study design and to domain review.
        """
        level = check_level(level)
        return self.effect_interval_parts(X, method, corrected=corrected,
                                          ridge_penalty=ridge_penalty,
                                          curvature_bound=curvature_bound).interval(level)

    def effect_interval_parts(self, X, method=DEFAULT_EFFECT_INTERVAL, *, corrected=True,
                              ridge_penalty=None, curvature_bound=None) -> IntervalParts:
        """Return the ``IntervalParts`` (centre, std, bias bound, df) of an effect interval."""
        if not isinstance(method, str) or method not in EFFECT_INTERVAL_METHODS:
            raise ValueError(
                f"The 'method' parameter must be one of {list(EFFECT_INTERVAL_METHODS)} for "
                f"effects. Got {method!r} instead."
            )
        M = check_curvature_bound(curvature_bound)
        if M is not None and method != "bias_bound":
            raise ValueError(
                f"The 'curvature_bound' parameter applies to method='bias_bound' only. "
                f"Got curvature_bound={curvature_bound!r} with method={method!r} instead.")
        lam = self._penalty(ridge_penalty)
        X = check_predict_data(self, X)
        self._require_bags()
        if method == "bias_bound":
            cols = self.correction_features_ if corrected else np.arange(0)
            leaves = self.forest_.apply(X, n_jobs=self._n_threads())
            theta, psi, S = solve_effects(
                self.forest_, leaves, None, self.X_train_, X, self.w_centred_,
                self.y_centred_, self.sample_weight_, self.x_scale_, cols, (), lam,
                n_jobs=self._n_threads(), bias_moment=True,
            )
            if M is None:
                M = self.rule_of_thumb_effect_curvature()
            tau = theta[:, 1]
            nuc = (np.abs(np.linalg.eigvalsh(S)).sum(axis=1) if cols.size
                   else np.zeros(tau.shape[0]))
            bound = np.where(np.isfinite(tau), 0.5 * M * nuc, np.nan)
            return IntervalParts(method, tau, self._std(psi), bound, float(M))
        if method == "clt":
            tau, _, psi = self._solve(X, lam, corrected)
            std = self._std(psi)
            return IntervalParts(method, tau, std, np.zeros_like(tau), 0.0)
        cols = self.correction_features_
        if cols.size == 0:
            cols = np.arange(X.shape[1])
        cols = cols[:_MAX_SQUARED]
        leaves = self.forest_.apply(X, n_jobs=self._n_threads())
        theta, psi = solve_effects(
            self.forest_, leaves, None, self.X_train_, X, self.w_centred_, self.y_centred_,
            self.sample_weight_, self.x_scale_, cols, cols,
            BIAS_CORRECTION_PENALTY, n_jobs=self._n_threads(),
        )
        lb = little_bags_variance(psi, self.trees_per_bag_)
        var = lb.variance + forest_monte_carlo_variance(psi, self.trees_per_bag_)
        df = satterthwaite_df(var, lb.tau, lb.n_bags)
        centre = theta[:, 1]
        return IntervalParts(method, centre, np.sqrt(var), np.zeros_like(centre), 0.0,
                             df=df)

    def rule_of_thumb_effect_curvature(self) -> float:
        """Return M of ``method="bias_bound"``: a global quartic effect's largest curvature.

        tau(x) = poly(u) with u the standardised correction columns (each to the fourth
        power, pairwise products for at most six columns), fitted with a quartic baseline
        by least squares to y~ = poly_b(u) + w~ poly(u); M is the largest Hessian spectral
        norm of poly over the training rows (Armstrong & Kolesar 2020, Sec. 4, rule of
        thumb, value from memory; applied here to the effect). 0 without correction
        columns.
        """
        check_is_fitted(self)
        cols = self.correction_features_
        if cols.size == 0:
            return 0.0
        U = (self.X_train_[:, cols] - self.x_centre_[cols]) / self.x_scale_[cols]
        n, k = U.shape
        iu, ju = np.triu_indices(k, 1)
        if k > 6:
            iu, ju = iu[:0], ju[:0]
        basis = np.hstack([np.ones((n, 1)), U, U ** 2, U ** 3, U ** 4, U[:, iu] * U[:, ju]])
        design = np.hstack([basis, self.w_centred_[:, None] * basis])
        coef, *_ = np.linalg.lstsq(design, self.y_centred_, rcond=None)
        c = coef[basis.shape[1]:]
        c2, c3, c4 = c[1 + k:1 + 2 * k], c[1 + 2 * k:1 + 3 * k], c[1 + 3 * k:1 + 4 * k]
        H = np.zeros((n, k, k))
        diag = np.arange(k)
        H[:, diag, diag] = 2 * c2 + 6 * c3 * U + 12 * c4 * U ** 2
        if iu.size:
            H[:, iu, ju] = c[1 + 4 * k:]
            H[:, ju, iu] = c[1 + 4 * k:]
        return float(np.max(np.abs(np.linalg.eigvalsh(H)).max(axis=1)))

    def local_slopes(self, X, *, ridge_penalty=None):
        """Return the (m, d) slopes of tau in the units of X from the local correction."""
        lam = self._penalty(ridge_penalty)
        X = check_predict_data(self, X)
        return self._solve(X, lam, True)[1]

    def neighbour_weights(self, X):
        """Return the forest weights alpha_i(x) as CSR (m × n_train); rows sum to 1."""
        X = check_predict_data(self, X)
        W, _ = self.forest_.weights(self.forest_.apply(X, n_jobs=self._n_threads()),
                                    n_jobs=self._n_threads())
        return W

    def with_ridge_penalty(self, ridge_penalty):
        """Return a shallow copy using ``ridge_penalty``, without refitting."""
        lam = self._penalty(ridge_penalty)
        other = copy.copy(self)
        other.ridge_penalty = lam
        return other

    def average_effect(self, mask=None):
        """Return the average effect over the training rows (or the rows in ``mask``).

        Binary treatment: the doubly robust augmented inverse-propensity-weighted mean of
        Gamma_i = tau(x_i) + (w_i - e_i) / (e_i (1 - e_i)) (y_i - m_i - (w_i - e_i)
        tau(x_i)), tau out-of-bag, standard error sd / sqrt(n) (Robins, Rotnitzky & Zhao
        1994, JASA). Continuous treatment: the Robinson residual-on-residual slope
        sum w~ y~ / sum w~^2 with its sandwich (heteroscedasticity-robust) standard error.

        Caution: decision support, not advice. The reading assumes unconfoundedness (no
        diagnostic here checks it) and overlap (see ``overlap``); defer to the study design
        and to domain review.
        """
        check_is_fitted(self)
        n = self.X_train_.shape[0]
        if mask is None:
            sel = np.ones(n, dtype=bool)
        else:
            sel = np.asarray(mask)
            if sel.dtype != bool or sel.shape != (n,):
                raise ValueError(f"The 'mask' parameter must be a boolean array with one "
                                 f"entry per training row ({n}). Got dtype {sel.dtype}, "
                                 f"shape {sel.shape} instead.")
            if sel.sum() < 2:
                raise ValueError("The 'mask' parameter must select at least two rows.")
        sw = self.sample_weight_[sel]
        wt, yt = self.w_centred_[sel], self.y_centred_[sel]
        if self.binary_treatment_:
            tau = self.oob_effect()
            lost = ~np.isfinite(tau)
            if np.any(lost):  # rows every tree drew: the all-tree effect stands in
                # the training rows, already checked: no feature-name warning
                tau[lost] = self.predict_effect(checked_rows(self.X_train_[lost], self))
            tau = tau[sel]
            e = self.propensity_[sel]
            gamma = tau + wt / (e * (1 - e)) * (yt - wt * tau)
            est = np.sum(sw * gamma) / sw.sum()
            neff = sw.sum() ** 2 / np.sum(sw ** 2)
            var = np.sum(sw * (gamma - est) ** 2) / sw.sum() / (neff - 1)
            return AverageEffect(est, np.sqrt(var), sel.sum(), "augmented IPW")
        sxx = np.sum(sw * wt * wt)
        est = np.sum(sw * wt * yt) / sxx
        r = yt - est * wt
        se = np.sqrt(np.sum((sw * wt * r) ** 2)) / sxx
        return AverageEffect(est, se, sel.sum(), "Robinson residual-on-residual")

    def overlap(self, margin=OVERLAP_MARGIN):
        """Return the overlap readout: propensities by arm and the rows flagged weak.

        A dict with ``propensity`` (n,), ``by_arm`` {0: e of untreated, 1: e of treated}
        (binary treatment only), and ``flagged`` (n,) bool: e(x) within ``margin`` of 0 or 1.
        """
        check_is_fitted(self)
        e = self.propensity_
        out = {"propensity": e}
        if self.binary_treatment_:
            out["by_arm"] = {0: e[self.treatment_ == 0], 1: e[self.treatment_ == 1]}
            out["flagged"] = (e < margin) | (e > 1 - margin)
        else:
            out["flagged"] = np.zeros(e.shape[0], dtype=bool)
        return out
