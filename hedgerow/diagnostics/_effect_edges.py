"""Effect edges: out-of-bag R-loss of the effect by how close rows sit to the edge of the data.

The treatment-effect analogue of ``edges``. Every report carries ``EFFECT_CAUTION``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from hedgerow._format import format_number
from hedgerow.diagnostics._edges import DEPTH_BANDS, _mean_ci
from hedgerow.diagnostics._effect import _caution, _check_level, _require_effect_model, r_loss
from hedgerow.diagnostics._heldout import edge_depth
from hedgerow.diagnostics._report import ReportMixin

__all__ = ["EffectEdgeProfile", "effect_edges", "band_labels"]

_METHODS = (("corrected forest", True), ("uncorrected forest", False))


def band_labels() -> list[str]:
    """Return the labels of the edge-depth bands of ``DEPTH_BANDS`` ("0.00-0.05", ...)."""
    return [f"{DEPTH_BANDS[b]:.2f}-{min(DEPTH_BANDS[b + 1], 0.5):.2f}"
            for b in range(len(DEPTH_BANDS) - 1)]


@dataclass(frozen=True)
class EffectEdgeProfile(ReportMixin):
    """Out-of-bag R-loss and effects per edge-depth band, and the correction's paired change.

    Attributes
    ----------
    bands : DataFrame, one row per method ("corrected forest", "uncorrected forest") and
        band: n (rows scored), mean_rloss with its t interval (lower, upper), mean_effect
        (the band's mean out-of-bag effect).
    paired : DataFrame, one row per band: n, difference (mean of the row-wise R-loss of
        the corrected minus the uncorrected effect; below 0: the correction fits the
        band's rows better), lower, upper (t interval), relative (difference over the
        uncorrected mean R-loss).
    overall : dict n, difference, lower, upper, relative over every scored row.
    unscored : rows left out (no out-of-bag effect: every tree drew them).
    depth, column, side, band : per row (``edge_depth`` in ``columns``; band label).
    effects, losses : DataFrames per row with columns "corrected forest" and
        "uncorrected forest" (out-of-bag effect; its R-loss).
    columns : the columns edge depth was measured in. corrected_columns : the model's
        correction columns. level. caution : ``EFFECT_CAUTION``.
    """

    bands: pd.DataFrame
    paired: pd.DataFrame
    overall: dict
    unscored: int
    depth: np.ndarray
    column: np.ndarray
    side: np.ndarray
    band: np.ndarray
    effects: pd.DataFrame
    losses: pd.DataFrame
    columns: tuple
    corrected_columns: tuple
    level: float
    caution: str

    _title = "effect edges (out-of-bag R-loss by edge depth)"

    def to_frame(self) -> pd.DataFrame:
        return self.paired.copy()

    @property
    def reading(self) -> str:
        """The sentence: in which bands the correction lowers or raises the R-loss."""
        if not self.corrected_columns:
            return ("No correction columns were kept: the corrected and uncorrected effects "
                    "are the same, so there is no difference to read.")
        pct = f"{100 * self.level:g}%"
        lower, higher, unclear = [], [], []
        for _, r in self.paired.iterrows():
            if not (np.isfinite(r["lower"]) and np.isfinite(r["upper"])):
                continue
            (lower if r["upper"] < 0 else higher if r["lower"] > 0 else unclear).append(
                r["band"])
        parts = [f"{what} in depth band{'s' if len(which) > 1 else ''} {', '.join(which)}"
                 for what, which in (("lower", lower), ("higher", higher),
                                     ("not clearly different", unclear)) if which]
        body = "; ".join(parts) if parts else "too few rows per band to tell"
        return (f"Out-of-bag R-loss of the corrected effect against the same trees "
                f"uncorrected ({pct} intervals): {body}. These are out-of-bag effects of one fit "
                f"whose correction was chosen on every row; the effect verdict is the "
                f"held-out comparison.")

    @property
    def note(self) -> str:
        """The paired difference over every scored row, and the rows left out."""
        o = self.overall
        left = (f"; {self.unscored} rows without an out-of-bag effect left out"
                if self.unscored else "")
        return (f"all rows: difference {format_number(o['difference'], 3)} "
                f"({format_number(o['lower'], 3)} to {format_number(o['upper'], 3)}), "
                f"{o['n']} rows{left}")

    def _notes(self):
        return [self.reading, self.note, f"Caution: {self.caution}"]

    def __repr__(self):
        return (f"EffectEdgeProfile(rows={self.overall['n']})\n{self.paired.to_string()}\n"
                f"{self.reading}\nCaution: {self.caution}")


def _check_columns(model, columns):
    from hedgerow.diagnostics._slices import resolve_feature

    if columns is None:
        cols = np.asarray(model.correction_features_, dtype=np.int64)
        return cols if cols.size else np.arange(model.n_features_in_)
    if isinstance(columns, str | int | np.integer):
        columns = [columns]
    try:
        cols = [resolve_feature(model, c) for c in columns]
    except (TypeError, ValueError) as exc:
        raise ValueError(f"The 'columns' parameter must be None or column indices or names "
                         f"of the model. Got {columns!r} instead.") from exc
    if not cols or len(set(cols)) != len(cols):
        raise ValueError(f"The 'columns' parameter must name at least one column, each once. "
                         f"Got {columns!r} instead.")
    return np.asarray(cols, dtype=np.int64)


def effect_edges(model, *, level=0.95, columns=None) -> EffectEdgeProfile:
    """Return the :class:`EffectEdgeProfile` of a fitted ``TreatmentEffectForest``.

    Out-of-bag effects are not residuals: a row's true effect is never observed. The
    held-out quantity here is the R-loss (Nie & Wager 2021, Biometrika) of each row's
    out-of-bag effect, (y~ - tau(x) w~)^2, with y~, w~ the centred outcome and treatment
    the model keeps (``r_loss``). With the centring right, its expectation at x is the
    noise variance plus (tau_hat - tau)^2 E[w~^2 | x]: the noise is the same for both
    methods on the same row, so the paired difference, corrected minus uncorrected, is an
    estimate of the difference of their squared errors weighted by the treatment's
    variance at x. The levels of the R-loss carry the noise and say little alone.

    Rows go to the edge-depth bands ``DEPTH_BANDS`` (0-5%, 5-10%, 10-25%, interior) by
    ``edge_depth`` in ``columns`` (default the model's correction columns, all columns
    when none was kept). Per band and method: the mean R-loss with its t interval and the
    mean out-of-bag effect; per band: the paired difference with its t interval (below
    0: the correction helps there). Rows without an out-of-bag effect (every tree drew
    them) are left out. Unweighted means (sample weights do not enter).

    What it does not show: a held-out comparison of the fitting procedure. The effects
    are out of bag for the trees, but the correction columns and the ridge penalty were
    chosen on every row (the penalty by this same out-of-bag R-loss), so it leans towards
    the corrected forest; ``effect_verdict`` cross-fits the whole effect forest and is the
    comparison to decide on. Nor does it show bias of the effect on its own (the mean
    effect per band is where effects are large, not where they are wrong), or anything
    about confounding.

    Caution: decision support, not advice; assumes unconfoundedness (nothing here checks
    it) and overlap.
    """
    model = _require_effect_model(model)
    level = _check_level(level)
    cols = _check_columns(model, columns)
    X = model.X_train_
    depth, column, side = edge_depth(X, cols)
    labels = band_labels()
    band_idx = np.digitize(depth, DEPTH_BANDS[1:-1])
    band = np.asarray(labels, dtype=object)[band_idx]
    effects = pd.DataFrame({name: np.asarray(model.oob_effect(corrected=c), dtype=np.float64)
                            for name, c in _METHODS})
    losses = pd.DataFrame({name: r_loss(model.y_centred_, model.w_centred_, effects[name])
                           for name, _ in _METHODS})
    scored = np.isfinite(losses.to_numpy()).all(axis=1)
    rows = []
    for name, _ in _METHODS:
        loss, eff = losses[name].to_numpy(), effects[name].to_numpy()
        for b, lab in enumerate(labels):
            sel = scored & (band_idx == b)
            mean, lo, hi, n = _mean_ci(loss[sel], level)
            rows.append({"method": name, "band": lab, "n": n, "mean_rloss": mean,
                         "lower": lo, "upper": hi,
                         "mean_effect": float(eff[sel].mean()) if n else np.nan})
    bands = pd.DataFrame(rows)
    diff = (losses["corrected forest"] - losses["uncorrected forest"]).to_numpy()
    base = losses["uncorrected forest"].to_numpy()

    def paired(sel):
        mean, lo, hi, n = _mean_ci(diff[sel], level)
        ref = float(base[sel].mean()) if n else np.nan
        rel = mean / ref if n and ref > 0 else np.nan
        return {"n": int(n), "difference": float(mean), "lower": float(lo),
                "upper": float(hi), "relative": float(rel)}

    paired_rows = [{"band": lab, **paired(scored & (band_idx == b))}
                   for b, lab in enumerate(labels)]
    return EffectEdgeProfile(
        bands=bands, paired=pd.DataFrame(paired_rows), overall=paired(scored),
        unscored=int((~scored).sum()), depth=depth,
        column=column, side=side, band=band, effects=effects, losses=losses,
        columns=tuple(int(c) for c in cols),
        corrected_columns=tuple(int(c) for c in model.correction_features_), level=level,
        caution=_caution())
