"""The effect report as one HTML page (same style and policy as ``_html``): no script,
nothing fetched, every text escaped, the caution first and last."""

from __future__ import annotations

from hedgerow import diagnostics as D
from hedgerow.report._effect_figures import slice_figure_key
from hedgerow.report._html import _e, _figure, _kv_table, _table, page, sections
from hedgerow.report._numbers import number

__all__ = ["render_effect"]

_HEADINGS = {
    "verdict": "Is the correction worth it? (held-out R-loss)",
    "average": "Average effect", "overlap": "Overlap of the arms", "probe": "At the probe",
    "effect-along": "The effect along columns through the probe",
    "data": "Data", "settings": "Settings", "cautions": "Cautions",
}


def _pct(level) -> str:
    return f"{number(100 * level, 3)}%"


def _average_html(r) -> str:
    rows = []
    for part, a in r.averages.items():
        lo, hi = a.interval(r.level)
        rows.append([_e(part), number(a.n), number(a.estimate), number(a.std_error),
                     f"{number(lo)} to {number(hi)}"])
    method = r.averages["all"].method
    return (f"<p>The average effect of the treatment on <code>{_e(r.data.target)}</code> "
            f"({_e(method)}), with its standard error and {_pct(r.level)} normal interval; "
            f"overall, in the edge band (rows with edge depth below "
            f"{number(D.EDGE_BAND, 2)} in some column) and in the interior.</p>"
            + _table(["rows", "n", "average effect", "standard error",
                      f"{_pct(r.level)} interval"], rows, "hr-average"))


def _overlap_html(r) -> str:
    o = r.overlap
    rows = [[_e(arm), number(row["n"]), number(row["min"]), number(row["q1"]),
             number(row["median"]), number(row["q3"]), number(row["max"])]
            for arm, row in o.summary().iterrows()]
    bins = [[f"{number(lo)} to {number(hi)}", *(number(int(o.counts[a][i])) for a in o.counts)]
            for i, (lo, hi) in enumerate(zip(o.edges[:-1], o.edges[1:], strict=True))
            if any(o.counts[a][i] for a in o.counts)]
    return ("<p>The estimated propensity e(x) (out-of-bag centring forest) by arm. Where "
            "the arms' ranges do not meet, units of one arm have no comparable units in the "
            f"other.</p><p class='hr-note'>{_e(o.reading)}</p>"
            + _table(["arm", "rows", "min", "lower quartile", "median", "upper quartile",
                      "max"], rows, "hr-overlap")
            + _figure(r.figures["overlap"], _overlap_caption(o))
            + "<h3>Rows per propensity bin</h3>"
            + _table(["propensity", *o.counts], bins, "hr-overlap-bins"))


def _overlap_caption(o) -> str:
    if not o.binary:
        return ("Histogram of the fitted treatment mean e(x) over every row (continuous "
                "treatment: there are no arms and no zone of weak overlap to mark).")
    return (f"Histogram of the estimated propensity e(x) by arm on the same "
            f"{len(o.edges) - 1} bins over [0, 1] (outline and light fill per arm; where the "
            f"fills overlap both arms have rows). Shaded at both ends: propensity within "
            f"{number(o.margin, 2)} of 0 or 1, where one arm has few comparable units; "
            f"{number(int(o.flagged.sum()))} of {number(o.flagged.size)} rows fall there.")


def _verdict_caption(v) -> str:
    return (f"Each dot is the share of an alternative's held-out R-loss the corrected forest "
            f"removes, for all rows, the edge band and the interior, with its "
            f"{_pct(v.level)} interval as a bar (the numbers of the table above). Right of "
            f"the vertical line at 0 the correction does better; a bar crossing it is no "
            f"evidence either way.")


def _verdict_html(r) -> str:
    v = r.verdict
    lvl = _pct(v.level)
    rows = []
    for name, row in v.comparisons.iterrows():
        cells = [_e(name)]
        for part in ("all", "edge", "interior"):
            gain, lo, hi = (number(row[f"{key}_{part}"], percent=True)
                            for key in ("gain", "lower", "upper"))
            cells.append(f"{gain}<br><small>{lo} to {hi}</small>")
        rows.append(cells)
    return (f'<p class="hr-conclusion" id="effect-verdict-conclusion">{_e(v.conclusion)}</p>'
            f"<p>Share of each alternative's held-out R-loss ((y - m(x)) - tau(x)(w - "
            f"e(x)))^2 the corrected forest removes, paired row by row over {v.folds} "
            f"cross-fitted folds (fold forests of at most {v.fold_trees} trees, centring "
            f"values out-of-bag), with {lvl} intervals. Edge band: rows with edge depth "
            f"below {number(D.EDGE_BAND, 2)}.</p>"
            + _table(["against", "all rows", "edge band", "interior"], rows,
                     "hr-effect-verdict")
            + _figure(r.figures["verdict"], _verdict_caption(v)))


def _probe_html(r) -> str:
    rows = [[_e(name), number(v["effect"]), number(v["std"]), number(v["lower"]),
             number(v["upper"]), _e(v["interval"].replace("_", " "))]
            for name, v in r.at_probe.items()]
    out = [f"<p>The effect at the probe with its {_pct(r.level)} interval: the local linear "
           "corrected forest and the same trees without the correction. The default "
           "interval (bias corrected) is centred on its own local quadratic of the effect "
           "whatever the correction, so the uncorrected row shows its clt interval.</p>",
           _table(["method", "effect", "standard error", "lower", "upper", "interval"],
                  rows, "hr-probe"),
           "<h3>Local slopes of the effect at the probe</h3><p>Change of the effect per unit "
           "of each column, from the local linear correction.</p>",
           _table(["column", "probe", "slope of the effect"],
                  [[_e(c), number(r.probe[c]), number(s)] for c, s in r.slopes.items()])]
    return "".join(out)


def _along_caption(r, name, sl) -> str:
    lvl = _pct(sl.level)
    flat = ("" if sl.corrected_column else
            f" The correction does not use {name} (it kept "
            + (", ".join(r.data.columns[int(c)] for c in r.model.correction_features_)
               or "no column") + "), so the corrected effect changes along it only through "
            "the forest weights, as the uncorrected one does.")
    return (f"The effect along {name} with every other column held at the probe "
            f"(dotted vertical line): the local linear corrected forest (dark line) with its "
            f"{lvl} interval ({sl.interval.replace('_', ' ')}; this interval is centred on "
            f"its own local quadratic of the effect, not on the line, so the band need not "
            f"be symmetric about it), and the same trees without the correction (stepped "
            f"line). Faint points: the training rows' out-of-bag corrected effects at their "
            f"own values of every column, so they scatter around the lines rather than on "
            f"them.{flat} {r.cautions[0]}")


def _along_html(r) -> str:
    out = ["<p>Where the corrected and uncorrected lines part, the local linear correction "
           "changes the reading; near the ends of a column the uncorrected forest's effect "
           "can bend toward the interior, the bias the correction targets. The numbers "
           "drawn are in the report object (<code>EffectReport.slices</code>).</p>"]
    for i, (name, sl) in enumerate(r.slices.items()):
        out.append(f"<h3>Along <code>{_e(name)}</code></h3>")
        out.append(_figure(r.figures[slice_figure_key(i)], _along_caption(r, name, sl)))
    return "".join(out)


def _data_html(r) -> str:
    d = r.data
    return _kv_table([
        ("rows", number(d.n_rows)), ("columns", number(d.n_columns)),
        ("outcome", _e(d.target)), ("treatment", _e(r.treatment)),
        ("column names", ", ".join(f"<code>{_e(c)}</code>" for c in d.columns)),
        ("data fingerprint", f"<code>{_e(d.fingerprint)}</code>"),
    ])


def _settings_html(r) -> str:
    return _table(["parameter", "value"],
                  [[_e(k), _e(v)] for k, v in sorted(r.settings.items())])


def _cautions_html(r) -> str:
    return ('<ul class="hr-cautions">' + "".join(f"<li>{_e(c)}</li>" for c in r.cautions)
            + "</ul>")


_BODIES = {"verdict": _verdict_html, "average": _average_html, "overlap": _overlap_html,
           "probe": _probe_html, "effect-along": _along_html, "data": _data_html,
           "settings": _settings_html, "cautions": _cautions_html}


def render_effect(r) -> str:
    """Return the :class:`EffectReport` ``r`` as one self-contained HTML document."""
    nav, body = sections(r, _HEADINGS, _BODIES)
    meta = (f"{_e(r.data.n_rows)} rows, {_e(r.data.n_columns)} columns, outcome "
            f"<code>{_e(r.data.target)}</code>, {_e(r.treatment)} treatment; data "
            f"fingerprint <code>{_e(r.data.fingerprint)}</code>; made {_e(r.created)} by "
            f"hedgerow {_e(r.version)}. A static page: it opens offline and computes "
            f"nothing.")
    caution = f'<p class="hr-conclusion" id="effect-caution">{_e(r.cautions[0])}</p>'
    if r.verdict is None:
        caution += ('<p class="hr-note" id="effect-no-verdict">No held-out verdict was run '
                    "for this report (verdict=False), so it has no verdict section or "
                    "figure: whether the local linear correction of the effect is worth it "
                    "was not checked on held-out rows.</p>")
    return page(r.title, r.version, meta, caution, nav, body)
