"""Effect diagnostics of a ``TreatmentEffectForest``: probe, overlap and a held-out verdict.

Every result carries ``EFFECT_CAUTION``: effect readings are decision support, not advice;
they assume unconfoundedness (no diagnostic here checks it) and overlap.

- ``effect_probe(model, x)``: the forest's neighbour weights at x, the local effect line
  along one column, and every method's effect at x: the corrected forest, the same trees
  without the correction, and the difference in means within the forest neighbourhood;
  plus how much of the neighbourhood has a propensity near 0 or 1.
- ``effect_probe_sketch(model, x)``: the cheap part of ``effect_probe`` (weights and the
  local effect line, no intervals), drawn while the probe is dragged.
- ``overlap_profile(model)``: the propensity's histogram by arm and the weak-overlap rows.
- ``effect_verdict(X, y, treatment)``: cross-fitted held-out R-loss (Nie & Wager 2021,
  Biometrika), paired row by row, of the corrected effect against the uncorrected one
  and against a constant effect, with a stated decision.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from hedgerow.diagnostics._heldout import edge_depth, fold_assignment
from hedgerow.diagnostics._report import ReportMixin, check_probe_point, kish_ess
from hedgerow.diagnostics._verdict import EDGE_BAND, paired_relative_gain

__all__ = ["EffectProbe", "EffectSketch", "OverlapProfile", "EffectVerdict", "effect_probe",
           "effect_probe_sketch", "overlap_profile", "effect_verdict",
           "neighbourhood_difference", "r_loss", "interval_method",
           "EFFECT_METHODS", "EFFECT_FOLD_TREES", "EFFECT_DECISIONS"]

#: The methods of the effect probe, in the order shown.
EFFECT_METHODS = ("corrected forest", "uncorrected forest", "neighbourhood difference")
#: At most this many trees grow in each fold's effect forest (``fold_trees=``): the
#: verdict compares held-out losses, not intervals, and a finite forest adds the same
#: order of tree variance to both sides of the pairing.
EFFECT_FOLD_TREES = 200
#: What the verdict's sentence can say.
EFFECT_DECISIONS = ("correction helps", "no evidence either way", "correction hurts")


def _caution():
    from hedgerow.estimators._effect_forest import EFFECT_CAUTION

    return EFFECT_CAUTION


def _margin():
    from hedgerow.estimators._effect_forest import OVERLAP_MARGIN

    return OVERLAP_MARGIN


def _require_effect_model(model):
    from sklearn.utils.validation import check_is_fitted

    from hedgerow.estimators import TreatmentEffectForest

    if not isinstance(model, TreatmentEffectForest):
        raise TypeError(f"The 'model' parameter must be a fitted TreatmentEffectForest. Got "
                        f"{type(model).__name__} instead.")
    check_is_fitted(model)
    return model


def _column_names(model):
    from hedgerow._validation import column_names

    return column_names(model)


def _check_level(level):
    from hedgerow._validation import check_level

    return check_level(level)


# -- small statistics -----------------------------------------------------------------------
def neighbourhood_difference(a, treatment, y, *, binary=True, w_centred=None,
                             y_centred=None):
    """Return ``(estimate, std_error, n_effective)`` of the effect within weights ``a``.

    Binary treatment: the difference of the a-weighted means of y in the treated and the
    untreated rows, each mean's variance sum a_i^2 (y_i - mean)^2 / (sum a_i)^2 scaled by
    n_e / (n_e - 1) with n_e Kish's effective n of that arm. With equal weights this is the
    two-sample difference in means and its usual (unpooled) standard error
    sqrt(s1^2 / n1 + s0^2 / n0) (common practice). Continuous treatment: the a-weighted
    residual-on-residual slope sum a w~ y~ / sum a w~^2 with its sandwich standard error.
    ``n_effective`` is Kish's n of ``a``. NaN when an arm holds no weight.
    """
    a = np.asarray(a, dtype=np.float64)
    ess = kish_ess(a)
    if binary:
        t = np.asarray(treatment) == 1
        parts = []
        for arm in (t, ~t):
            wa, ya = a[arm], np.asarray(y, dtype=np.float64)[arm]
            s = wa.sum()
            ne = kish_ess(wa)
            if s <= 0 or ne <= 1:
                return float("nan"), float("nan"), ess
            mu = np.sum(wa * ya) / s
            var = np.sum(wa ** 2 * (ya - mu) ** 2) / s ** 2 * ne / (ne - 1)
            parts.append((mu, var))
        (m1, v1), (m0, v0) = parts
        return float(m1 - m0), float(np.sqrt(v1 + v0)), ess
    wt = np.asarray(w_centred, dtype=np.float64)
    yt = np.asarray(y_centred, dtype=np.float64)
    sxx = np.sum(a * wt * wt)
    if sxx <= 0:
        return float("nan"), float("nan"), ess
    beta = np.sum(a * wt * yt) / sxx
    se = np.sqrt(np.sum((a * wt * (yt - beta * wt)) ** 2)) / sxx
    return float(beta), float(se), ess


def r_loss(y_centred, w_centred, tau) -> np.ndarray:
    """Return per-row R-loss ((y - m(x)) - tau(x) (w - e(x)))^2 (Nie & Wager 2021)."""
    return (np.asarray(y_centred, float) - np.asarray(tau, float)
            * np.asarray(w_centred, float)) ** 2


# -- the effect probe -----------------------------------------------------------------------
@dataclass(frozen=True)
class EffectProbe(ReportMixin):
    """The effect at one point: methods, neighbourhood, local line and overlap there.

    Attributes
    ----------
    x : (d,) the probe. columns : column names. feature : index of the line's column.
    level : interval level. methods : DataFrame indexed by method (``EFFECT_METHODS``)
    with effect, std, lower, upper and interval (the method of each row's interval).
    weights : (n,) forest weights of the training rows
    (sum 1). ess : Kish's effective n of the weights. top_share : weight of the heaviest
    ten rows. slopes : (d,) local slopes of the effect. line_x, line_effect : the local
    effect line along ``feature`` across the neighbourhood's span in that column.
    weak_share : share of the weight on rows with propensity within ``margin`` of 0 or 1.
    propensity_range : (min, max) propensity of rows with weight. margin : that margin.
    caution : ``EFFECT_CAUTION``.
    """

    x: np.ndarray
    columns: tuple
    feature: int
    level: float
    methods: pd.DataFrame
    weights: np.ndarray
    ess: float
    top_share: float
    slopes: np.ndarray
    line_x: np.ndarray
    line_effect: np.ndarray
    weak_share: float
    propensity_range: tuple
    margin: float
    caution: str

    _title = "effect at the probe"

    @property
    def weak_overlap(self) -> bool:
        """True when any of the neighbourhood's weight sits on weak-overlap rows."""
        return self.weak_share > 0

    def overlap_note(self) -> str:
        lo, hi = self.propensity_range
        if self.weak_overlap:
            return (f"Weak overlap here: {100 * self.weak_share:.1f}% of the neighbourhood's "
                    f"weight is on rows whose propensity is within {self.margin:g} of 0 or 1 "
                    f"(range {lo:.3f} to {hi:.3f}); the effect here leans on few comparable "
                    f"units of one arm.")
        return (f"Overlap holds in the neighbourhood: propensities {lo:.3f} to {hi:.3f}, none "
                f"within {self.margin:g} of 0 or 1.")

    def to_frame(self) -> pd.DataFrame:
        return self.methods.copy()

    def _notes(self):
        return [f"effective sample size {self.ess:.1f}; top 10 rows hold "
                f"{100 * self.top_share:.1f}% of the weight", self.overlap_note(),
                f"Caution: {self.caution}"]

    def __repr__(self):
        return (f"EffectProbe(x={np.round(self.x, 4).tolist()}, ess={self.ess:.1f})\n"
                f"{self.methods.to_string()}\n{self.overlap_note()}\nCaution: {self.caution}")


def interval_method(method, corrected) -> str:
    """Return the effect-interval method a row of an effect readout uses.

    ``method`` None is the estimator's default. The robust bias-corrected interval is
    one interval of the effect whatever the correction (it is centred on its own local
    quadratic), so the uncorrected forest's row shows its own "clt" interval instead:
    two identical intervals would read as agreement where there is none.
    """
    from hedgerow.estimators._effect_forest import DEFAULT_EFFECT_INTERVAL

    how = DEFAULT_EFFECT_INTERVAL if method is None else method
    return "clt" if (how == "bias_corrected" and not corrected) else how


def effect_probe(model, x, *, feature=0, level=0.95, margin=None, method=None) -> EffectProbe:
    """Return the :class:`EffectProbe` of a fitted ``TreatmentEffectForest`` at ``x``.

    ``method``: the interval method (default the estimator's; see ``interval_method`` for
    the uncorrected row). The difference in means has the normal interval.

    ``feature``: column (index or name) of the local effect line. ``margin``: a propensity
    within this of 0 or 1 counts as weak overlap (default the estimator's 0.05).
    Caution: decision support, not advice; assumes unconfoundedness and overlap.
    """
    from hedgerow.diagnostics._slices import resolve_feature

    model = _require_effect_model(model)
    level = _check_level(level)
    margin = _margin() if margin is None else float(margin)
    if not 0 <= margin < 0.5:
        raise ValueError(f"The 'margin' parameter must lie in [0, 0.5). Got {margin!r}.")
    j = resolve_feature(model, feature)
    q = check_probe_point(model, x)
    a = np.asarray(model.neighbour_weights(q).toarray()).ravel()
    rows = []
    for name, corrected in (("corrected forest", True), ("uncorrected forest", False)):
        how = interval_method(method, corrected)
        tau, std = model.predict_effect(q, return_std=True, corrected=corrected)
        lo, hi = model.effect_interval(q, level, how, corrected=corrected)
        rows.append((name, float(tau[0]), float(std[0]), float(lo[0]), float(hi[0]), how))
    est, se, _ = neighbourhood_difference(
        a, model.treatment_, model.y_train_, binary=model.binary_treatment_,
        w_centred=model.w_centred_, y_centred=model.y_centred_)
    z = norm.ppf(0.5 + level / 2)
    rows.append(("neighbourhood difference", est, se, est - z * se, est + z * se, "normal"))
    methods = pd.DataFrame(rows, columns=["method", "effect", "std", "lower", "upper",
                                          "interval"])
    methods = methods.set_index("method")
    slopes = np.asarray(model.local_slopes(q)[0], dtype=np.float64)
    has = a > 0
    line_x, line = _effect_line(model, a, q, j, methods.loc["corrected forest", "effect"],
                                slopes)
    e = model.propensity_
    weak = (e < margin) | (e > 1 - margin) if model.binary_treatment_ else np.zeros_like(has)
    top = np.sort(a)[::-1][:10].sum()
    return EffectProbe(
        x=np.asarray(q, dtype=np.float64)[0].copy(), columns=tuple(_column_names(model)),
        feature=j, level=level, methods=methods, weights=a, ess=kish_ess(a),
        top_share=float(top), slopes=slopes, line_x=line_x, line_effect=line,
        weak_share=float(a[weak].sum()),
        propensity_range=(float(e[has].min()), float(e[has].max())), margin=margin,
        caution=_caution())


def _effect_line(model, a, q, j, effect, slopes):
    """The local effect line along column j: through (x_j, effect) with the local slope,
    over the span of the rows with weight in that column (and x_j)."""
    Xn = model.X_train_[a > 0, j]
    xj = float(np.asarray(q)[0, j])
    line_x = np.linspace(min(Xn.min(), xj), max(Xn.max(), xj), 25)
    return line_x, effect + slopes[j] * (line_x - xj)


@dataclass(frozen=True)
class EffectSketch(ReportMixin):
    """The cheap part of an :class:`EffectProbe`: weights, the corrected effect, the line.

    Attributes
    ----------
    x : (d,) the probe. columns : column names. feature : index of the line's column.
    weights : (n,) forest weights of the training rows (sum 1). ess : Kish's effective n.
    effect : the corrected forest's effect at x (no standard error or interval).
    slopes : (d,) local slopes of the effect. line_x, line_effect : the local effect line
    along ``feature``, as in ``EffectProbe``. caution : ``EFFECT_CAUTION``.
    """

    x: np.ndarray
    columns: tuple
    feature: int
    weights: np.ndarray
    ess: float
    effect: float
    slopes: np.ndarray
    line_x: np.ndarray
    line_effect: np.ndarray
    caution: str

    _title = "effect at the probe (sketch: no intervals)"

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"effect": [self.effect], "ess": [self.ess]},
                            index=pd.Index(["corrected forest"], name="method"))

    def _notes(self):
        return [f"Caution: {self.caution}"]

    def __repr__(self):
        return (f"EffectSketch(x={np.round(self.x, 4).tolist()}, effect={self.effect:.4g}, "
                f"ess={self.ess:.1f})\nCaution: {self.caution}")


def effect_probe_sketch(model, x, *, feature=0) -> EffectSketch:
    """Return the :class:`EffectSketch` of a fitted ``TreatmentEffectForest`` at ``x``.

    The neighbour weights, the corrected effect and its local slopes, and the local effect
    line along ``feature`` (index or name): the same numbers as ``effect_probe``, without
    the standard errors, intervals, uncorrected forest, neighbourhood difference and
    overlap (about a fifth of its time). What the effect probe view draws while its probe
    is dragged; ``effect_probe`` gives the rest on release.
    Caution: decision support, not advice; assumes unconfoundedness and overlap.
    """
    from hedgerow.diagnostics._slices import resolve_feature

    model = _require_effect_model(model)
    j = resolve_feature(model, feature)
    q = check_probe_point(model, x)
    a = np.asarray(model.neighbour_weights(q).toarray()).ravel()
    effect = float(model.predict_effect(q)[0])
    slopes = np.asarray(model.local_slopes(q)[0], dtype=np.float64)
    line_x, line = _effect_line(model, a, q, j, effect, slopes)
    return EffectSketch(x=np.asarray(q, dtype=np.float64)[0].copy(),
                        columns=tuple(_column_names(model)), feature=j, weights=a,
                        ess=kish_ess(a), effect=effect, slopes=slopes, line_x=line_x,
                        line_effect=line, caution=_caution())


# -- overlap --------------------------------------------------------------------------------
@dataclass(frozen=True)
class OverlapProfile(ReportMixin):
    """The propensity by arm: shared-bin histogram counts and the weak-overlap rows.

    ``edges`` (bins + 1,) on [0, 1]; ``counts`` arm label -> (bins,) counts; ``flagged``
    (n,) bool; ``margin``; ``binary``; ``caution``.
    """

    edges: np.ndarray
    counts: dict
    flagged: np.ndarray
    margin: float
    binary: bool
    caution: str
    by_arm: dict = None

    _title = "overlap of the arms"

    def summary(self) -> pd.DataFrame:
        """Return per arm: rows, min, quartiles and max of the propensity."""
        rows = {}
        for arm, e in (self.by_arm or {}).items():
            q = np.quantile(e, [0.0, 0.25, 0.5, 0.75, 1.0]) if e.size else np.full(5, np.nan)
            rows[arm] = {"n": int(e.size), "min": q[0], "q1": q[1], "median": q[2],
                         "q3": q[3], "max": q[4]}
        return pd.DataFrame.from_dict(rows, orient="index")

    @property
    def reading(self) -> str:
        k, n = int(self.flagged.sum()), self.flagged.size
        if not self.binary:
            return ("Continuous treatment: the histogram shows the treatment's fitted mean "
                    "e(x); no rows are flagged.")
        if k == 0:
            return (f"Overlap holds on every row: no propensity within {self.margin:g} of 0 "
                    f"or 1.")
        return (f"Weak overlap on {k} of {n} rows ({100 * k / n:.1f}%): their propensity is "
                f"within {self.margin:g} of 0 or 1, so the other arm has few comparable "
                f"units there and effects rest on extrapolation.")

    def to_frame(self) -> pd.DataFrame:
        frame = pd.DataFrame({"from": self.edges[:-1], "to": self.edges[1:]})
        for arm, c in self.counts.items():
            frame[arm] = c
        return frame

    def _notes(self):
        return [self.reading, f"Caution: {self.caution}"]

    def __repr__(self):
        return f"OverlapProfile({self.reading})\nCaution: {self.caution}"


def overlap_profile(model, *, bins=20, margin=None) -> OverlapProfile:
    """Return the :class:`OverlapProfile` of a fitted ``TreatmentEffectForest``."""
    model = _require_effect_model(model)
    if isinstance(bins, bool) or not isinstance(bins, int | np.integer) or bins < 2:
        raise ValueError(f"The 'bins' parameter must be an integer >= 2. Got {bins!r}.")
    margin = _margin() if margin is None else float(margin)
    ov = model.overlap(margin)
    e = ov["propensity"]
    if model.binary_treatment_:
        edges = np.linspace(0.0, 1.0, int(bins) + 1)
        by_arm = {"untreated": ov["by_arm"][0], "treated": ov["by_arm"][1]}
    else:
        edges = np.linspace(e.min(), e.max(), int(bins) + 1)
        by_arm = {"all rows": e}
    counts = {arm: np.histogram(v, edges)[0] for arm, v in by_arm.items()}
    return OverlapProfile(edges=edges, counts=counts, flagged=np.asarray(ov["flagged"]),
                          margin=margin, binary=bool(model.binary_treatment_),
                          caution=_caution(), by_arm=by_arm)


# -- the held-out verdict -------------------------------------------------------------------
@dataclass(frozen=True)
class EffectVerdict(ReportMixin):
    """Cross-fitted held-out R-loss of effect estimates, paired row by row.

    ``losses``: DataFrame of per-row R-loss (columns ``corrected``, ``uncorrected``,
    ``constant``; index the rows) plus ``edge`` (bool, edge band). ``comparisons``:
    DataFrame indexed by the alternative with gain, lower, upper for all rows, the edge band
    and the interior (share of the alternative's R-loss the corrected forest removes).
    ``decision`` in ``EFFECT_DECISIONS``; ``conclusion`` the sentence; ``folds``;
    ``fold_trees``; ``level``; ``complete`` (False when cancelled); ``caution``.
    ``effects``: DataFrame of each scored row's held-out effects (columns ``corrected``,
    ``uncorrected``, ``constant``) and its ``fold``, the same index as ``losses``: what a
    check against a known effect compares (benchmarks/bench_effect_verdict_family.py).
    """

    losses: pd.DataFrame
    comparisons: pd.DataFrame
    decision: str
    conclusion: str
    folds: int
    fold_trees: int
    level: float
    complete: bool
    caution: str
    effects: pd.DataFrame = None

    _title = "effect verdict (held-out R-loss)"

    def to_frame(self) -> pd.DataFrame:
        return self.comparisons.copy()

    def _notes(self):
        return [self.conclusion, f"Caution: {self.caution}"]

    def __repr__(self):
        return (f"EffectVerdict({self.decision!r})\n{self.conclusion}\n"
                f"{self.comparisons.to_string()}\nCaution: {self.caution}")


def _decide(gain, lo, hi, level, n_rows, complete):
    pct = f"{100 * level:g}%"
    if not complete:
        return "no evidence either way", (
            f"Incomplete: the verdict was stopped with {n_rows} held-out rows scored; no "
            f"decision.")
    if not np.isfinite(gain):
        return "no evidence either way", "Too few held-out rows to compare."
    span = f"{100 * gain:+.1f}% ({pct} interval {100 * lo:+.1f}% to {100 * hi:+.1f}%)"
    if lo > 0:
        return "correction helps", (f"The local linear correction lowers the held-out "
                                    f"R-loss of the effect by {span} against the same "
                                    f"trees without it.")
    if hi < 0:
        return "correction hurts", (f"The local linear correction raises the held-out "
                                    f"R-loss of the effect: {span} against the same trees "
                                    f"without it.")
    return "no evidence either way", (f"No evidence either way: the correction changes the "
                                      f"held-out R-loss by {span} against the same trees "
                                      f"without it.")


def effect_verdict(X, y, treatment, *, model=None, folds=5, fold_trees=EFFECT_FOLD_TREES,
                   level=0.95, random_state=0, progress=None) -> EffectVerdict:
    """Return the :class:`EffectVerdict`: is the local linear correction of the effect worth it?

    The centring values m(x), e(x) are the out-of-bag ones of ``model`` (fitted on
    ``(X, y, treatment)``; None fits one with ``random_state``), so every row's centring
    is out of sample. Rows go to ``folds`` seeded folds; on each fold's training rows a
    clone of ``model`` with at most ``fold_trees`` trees is fitted (given the same centring
    values), and the held-out rows get its effect with and without the correction (the same
    trees) and the training rows' average effect (a constant effect). The per-row R-loss
    ((y - m) - tau (w - e))^2 (Nie & Wager 2021, Biometrika) of the three is paired row by
    row: the gain is the share of the alternative's mean R-loss the corrected forest removes,
    with the delta-method interval of ``paired_relative_gain``; overall, in the edge band
    (edge depth below ``EDGE_BAND``) and the interior. ``progress``: a progress bar or
    ``RunControl`` (cancelling returns the folds finished, marked incomplete).
    Caution: decision support, not advice; assumes unconfoundedness and overlap.
    """
    from sklearn.base import clone

    from hedgerow._progress import RunCancelled, progress_bar
    from hedgerow.estimators import FewBagsWarning, TreatmentEffectForest

    level = _check_level(level)
    if isinstance(folds, bool) or not isinstance(folds, int | np.integer) or folds < 2:
        raise ValueError(f"The 'folds' parameter must be an integer >= 2. Got {folds!r}.")
    if fold_trees is not None and (isinstance(fold_trees, bool) or not isinstance(
            fold_trees, int | np.integer) or fold_trees < 2):
        raise ValueError(f"The 'fold_trees' parameter must be None or an integer >= 2. Got "
                         f"{fold_trees!r}.")
    if model is None:
        model = TreatmentEffectForest(random_state=random_state).fit(X, y, treatment)
    else:
        model = _require_effect_model(model)
        from hedgerow._validation import check_predict_data

        Xc = np.asarray(check_predict_data(model, X), dtype=np.float64)
        yv = np.asarray(y, dtype=np.float64).ravel()
        wv = np.asarray(treatment, dtype=np.float64).ravel()
        if (Xc.shape != model.X_train_.shape or not np.array_equal(Xc, model.X_train_)
                or not np.array_equal(yv, model.y_train_)
                or not np.array_equal(wv, model.treatment_)):
            raise ValueError("The 'model' parameter must be fitted on these X, y and "
                             "treatment (its centring values are reused).")
    Xa, yt, wt = model.X_train_, model.y_centred_, model.w_centred_
    n = Xa.shape[0]
    if n < 2 * folds:
        raise ValueError(f"The 'folds' parameter ({folds}) needs at least {2 * folds} rows; "
                         f"got {n}.")
    fold = fold_assignment(n, int(folds), random_state)
    trees = model.n_estimators if fold_trees is None else min(model.n_estimators,
                                                              int(fold_trees))
    template = clone(model).set_params(n_estimators=trees)
    tau = {k: np.full(n, np.nan) for k in ("corrected", "uncorrected", "constant")}
    bar = progress_bar(int(folds), "effect verdict", enabled=True if progress is None
                       else progress)
    complete = True
    try:
        for k in range(int(folds)):
            test = fold == k
            tr = ~test
            with warnings.catch_warnings():  # the verdict uses no interval
                warnings.simplefilter("ignore", FewBagsWarning)
                f = clone(template).fit(Xa[tr], model.y_train_[tr], model.treatment_[tr],
                                        model.sample_weight_[tr],
                                        outcome_model=model.outcome_fit_[tr],
                                        propensity_model=model.propensity_[tr])
            tau["corrected"][test] = f.predict_effect(Xa[test])
            tau["uncorrected"][test] = f.predict_effect(Xa[test], corrected=False)
            tau["constant"][test] = f.average_effect().estimate
            bar.update(1)
    except RunCancelled:
        complete = False
    finally:
        bar.close()
    scored = np.isfinite(tau["corrected"])
    losses = pd.DataFrame({name: r_loss(yt, wt, t) for name, t in tau.items()})
    losses["edge"] = edge_depth(Xa)[0] < EDGE_BAND
    losses = losses[scored]
    effects = pd.DataFrame(tau)
    effects["fold"] = fold
    effects = effects[scored]
    rows = {}
    for alt in ("uncorrected", "constant"):
        cells = {}
        for part, sel in (("all", slice(None)), ("edge", losses["edge"].to_numpy()),
                          ("interior", ~losses["edge"].to_numpy())):
            g, lo, hi = paired_relative_gain(losses[alt].to_numpy()[sel],
                                             losses["corrected"].to_numpy()[sel], level)
            cells.update({f"gain_{part}": g, f"lower_{part}": lo, f"upper_{part}": hi})
        rows[{"uncorrected": "uncorrected forest (same trees)",
              "constant": "constant effect"}[alt]] = cells
    comparisons = pd.DataFrame.from_dict(rows, orient="index")
    first = comparisons.iloc[0]
    decision, sentence = _decide(first["gain_all"], first["lower_all"], first["upper_all"],
                                 level, int(scored.sum()), complete)
    const = comparisons.iloc[1]
    if complete and np.isfinite(const["lower_all"]):
        sentence += (" Against a constant effect the corrected forest's held-out R-loss is "
                     + ("lower: the effect varies with the columns."
                        if const["lower_all"] > 0 else
                        "not clearly lower: the data do not show the effect varying."))
    return EffectVerdict(losses=losses, comparisons=comparisons, decision=decision,
                         conclusion=sentence, folds=int(folds), fold_trees=int(trees),
                         level=level, complete=complete, caution=_caution(),
                         effects=effects)
