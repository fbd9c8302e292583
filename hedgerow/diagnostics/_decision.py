"""Decision panel: is the local linear correction warranted here? One report, each item read."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from hedgerow._format import format_number
from hedgerow.diagnostics._report import ReportMixin

__all__ = ["CAUTIONS", "CAUTIONS_LINK", "DecisionPanel", "decision_panel"]

#: The cautions in one line; the README's "Cautions" section says them in full.
CAUTIONS = ("Predictive decision support, not advice: reading a slope as an effect needs "
            "unconfoundedness and overlap, which nothing here checks; coverage readouts "
            "are simulations, not guarantees.")
#: Where the full cautions are (the README section).
CAUTIONS_LINK = "README.md#cautions"

_LLF, _HONEST = "local linear forest", "honest forest (same trees)"
_COLUMNS = ["item", "method", "value", "lower", "upper", "reading"]


@dataclass(frozen=True)
class DecisionPanel(ReportMixin):
    """Everything that answers "is the correction warranted here?", each with a reading.

    ``frame`` columns: item ("verdict gain", "inward-bend score", "coverage",
    "difference at the probe"), method, value, lower, upper (the item's interval; NaN when
    it has none) and reading (one plain sentence). ``decision``: the verdict's decision, or
    "pending" while it is computed. ``sentence``: the verdict's conclusion or a pending
    line. ``outside_note``: the probe's "outside the data" line ('' inside the data).
    ``coverage_settings``: what the coverage rows were computed for ('' when none ran).
    ``cautions`` / ``cautions_link``: one line and the README section it abbreviates.
    """

    frame: pd.DataFrame
    decision: str
    sentence: str
    outside_note: str
    coverage_settings: str
    cautions: str = CAUTIONS
    cautions_link: str = CAUTIONS_LINK
    _title = "decision panel"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def item(self, item: str, method: str | None = None) -> pd.Series:
        """Return the row of ``item`` (and ``method`` when several share the item)."""
        f = self.frame[self.frame["item"] == item]
        if method is not None:
            f = f[f["method"] == method]
        if f.empty:
            known = sorted(set(zip(self.frame["item"], self.frame["method"], strict=True)))
            raise KeyError(f"No item {item!r} for method {method!r} in the panel. "
                           f"Known: {known}.")
        return f.iloc[0]

    def _notes(self):
        notes = [self.sentence]
        if self.outside_note:
            notes.append(self.outside_note)
        return notes + [f"{self.cautions} (see {self.cautions_link})"]


def _pc(v):
    return f"{format_number(100 * v, 3)}%"


def _interval_word(lo, hi):
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return "no interval"
    if lo > 0:
        return "above 0"
    if hi < 0:
        return "below 0"
    return "includes 0"


def _verdict_rows(verdict):
    if verdict is None:
        return [], "pending", "verdict: cross-fitting the forests in the background."
    best = verdict.best_alternative
    rows = []
    if best is not None and best in verdict.comparisons.index:
        r = verdict.comparisons.loc[best]
        g, lo, hi = (float(r[k]) for k in ("gain_all", "lower_all", "upper_all"))
        where = _interval_word(lo, hi)
        reading = {"above 0": "the correction removes held-out error: its interval lies "
                              "above 0",
                   "below 0": "the correction adds held-out error: its interval lies below 0",
                   }.get(where, "no clear gain: the interval includes 0")
        rows.append({"item": "verdict gain", "method": best, "value": g, "lower": lo,
                     "upper": hi, "reading": f"{_pc(g)} of the held-out error of the {best}; "
                                             f"{reading}"})
    return rows, verdict.decision, verdict.conclusion


def _bend_rows(edge_profile):
    rows = []
    if edge_profile is None:
        return rows
    for _, r in edge_profile.bend.iterrows():
        name = r["method"]
        if name not in (_LLF, _HONEST) and "forest" not in name:
            continue
        b, lo, hi = float(r["bend"]), float(r["lower"]), float(r["upper"])
        where = _interval_word(lo, hi)
        reading = {"above 0": "bends toward the interior at the edges (edge bias)",
                   "below 0": "bends outward at the edges"}.get(
            where, "no clear bend at the edges")
        rows.append({"item": "inward-bend score", "method": name, "value": b, "lower": lo,
                     "upper": hi, "reading": reading})
    return rows


def _coverage_rows(coverage):
    from hedgerow.estimators._forest import DEFAULT_INTERVAL

    rows = []
    if coverage is None:
        return rows
    f = coverage.frame
    f = f[(f["part"] == "all") & (f["interval"] == DEFAULT_INTERVAL)]
    for _, r in f.iterrows():
        flag = str(r.get("flag", "") or "")
        split = ""
        if np.isfinite(float(r.get("rms_bias", np.nan))):
            split = (f"; rms bias {format_number(r['rms_bias'], 3)}, estimated sd "
                     f"{format_number(r['mean_sd'], 3)} against "
                     f"{format_number(r['sd_across'], 3)} across replications")
        reading = (flag if flag else f"covers near the nominal {_pc(coverage.level)}") + split
        rows.append({"item": "coverage", "method": r["method"], "value": float(r["coverage"]),
                     "lower": float(r["lower"]), "upper": float(r["upper"]),
                     "reading": reading})
    return rows


def _probe_rows(probe_report):
    llf, hon = probe_report.method(_LLF), probe_report.method(_HONEST)
    d = llf.prediction - hon.prediction
    # the two share their trees (positively correlated): adding the half-widths in
    # quadrature, as if independent, gives an interval at least as wide as the truth's
    halves = [(m.upper - m.lower) / 2 for m in (llf, hon)]
    half = float(np.hypot(*halves)) if all(np.isfinite(halves)) else np.nan
    lo, hi = d - half, d + half
    where = _interval_word(lo, hi)
    reading = ("the correction changes the prediction here" if where in ("above 0", "below 0")
               else "the correction makes no clear difference here")
    return [{"item": "difference at the probe", "method": f"{_LLF} minus {_HONEST}",
             "value": float(d), "lower": lo, "upper": hi,
             "reading": reading + " (interval conservative: it ignores that the forests "
                                  "share their trees)"}]


def decision_panel(probe_report, edge_profile=None, verdict=None, coverage=None, *,
                   coverage_settings="") -> DecisionPanel:
    """Return the ``DecisionPanel`` from reports already computed (nothing is refitted).

    Parameters
    ----------
    probe_report : ``ProbeReport`` of the local linear forest (with its honest forest).
    edge_profile : ``EdgeProfile`` (``edges``) of the forests, or None.
    verdict : ``Verdict``, or None while it is computed ("pending").
    coverage : ``CoverageReport``, or None when no coverage readout has run.
    coverage_settings : what the coverage readout was computed for (shown with it).
    """
    from hedgerow.diagnostics._probe import ProbeReport

    if not isinstance(probe_report, ProbeReport):
        raise TypeError(f"The 'probe_report' parameter must be a ProbeReport (from probe()). "
                        f"Got {type(probe_report).__name__} instead.")
    v_rows, decision, sentence = _verdict_rows(verdict)
    rows = v_rows + _bend_rows(edge_profile) + _coverage_rows(coverage) + \
        _probe_rows(probe_report)
    return DecisionPanel(frame=pd.DataFrame(rows, columns=_COLUMNS), decision=decision,
                         sentence=sentence, outside_note=probe_report.outside_note(),
                         coverage_settings=str(coverage_settings) if coverage else "")
