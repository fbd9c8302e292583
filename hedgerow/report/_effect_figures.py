"""The effect report's figures, drawn with the regression report's helpers (``_figures``).

Each builder takes the numbers the report already holds (``OverlapProfile``,
``EffectSlice``, the out-of-bag effects, ``EffectVerdict``) and draws them; none computes
a statistic. Key artists carry a gid (``bins-<arm>``, ``band``, ``corrected``,
``uncorrected``, ``rows``, ``gain-<k>``), so a test can read back what was drawn and the
SVG names the groups it holds.
"""

from __future__ import annotations

import numpy as np

from hedgerow._palette import ARM_COLOURS, EFFECT_COLOURS, ROW_COLOUR, UNKNOWN_COLOUR
from hedgerow.report._figures import _INK, _mpl, _shown, _svg, drawing
from hedgerow.report._numbers import number

__all__ = ["effect_figures", "overlap_figure", "effect_slice_figure", "verdict_gain_figure",
           "VERDICT_PARTS", "slice_figure_key"]

#: The verdict's parts, as (column suffix in ``EffectVerdict.comparisons``, label).
VERDICT_PARTS = (("all", "all rows"), ("edge", "edge band"), ("interior", "interior"))
_ZONE = "#c0392b"
_ALTERNATIVE_COLOURS = {"uncorrected forest (same trees)": EFFECT_COLOURS["uncorrected forest"],
                        "constant effect": ROW_COLOUR}


def slice_figure_key(i: int) -> str:
    """Return the ``EffectReport.figures`` key of the i-th effect-along-a-column figure."""
    return f"effect along {i}"


def effect_figures(overlap, slices, oob_effects, X_train, target, verdict) -> dict:
    """Return the effect page's figures as name -> inline SVG markup.

    ``"overlap"``; ``slice_figure_key(i)`` for the i-th of ``slices`` (column ->
    ``EffectSlice``); ``"verdict"`` when ``verdict`` is not None.
    """
    from matplotlib.figure import Figure

    out = {}
    with drawing():
        out["overlap"] = _svg(overlap_figure(Figure, overlap), "fig-overlap",
                              "propensity by arm")
        for i, (name, sl) in enumerate(slices.items()):
            out[slice_figure_key(i)] = _svg(
                effect_slice_figure(Figure, sl, name, X_train, oob_effects, target),
                f"fig-effect-{i}", f"effect along {name}")
        if verdict is not None:
            out["verdict"] = _svg(verdict_gain_figure(Figure, verdict), "fig-verdict",
                                  "held-out R-loss gains of the correction")
    return out


def _legend_below(ax):
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.2), ncols=2, fontsize=8)


def overlap_figure(Figure, ov):
    """Return the propensity histogram by arm on the profile's shared bins."""
    fig = Figure(figsize=(7.2, 3.4), layout="constrained")
    ax = fig.add_subplot()
    if ov.binary:
        for lo, hi in ((0.0, ov.margin), (1.0 - ov.margin, 1.0)):
            ax.axvspan(lo, hi, color=_ZONE, alpha=0.10, linewidth=0,
                       gid="zone-low" if lo == 0.0 else "zone-high",
                       label=(f"within {number(ov.margin, 2)} of 0 or 1 (weak overlap)"
                              if lo == 0.0 else None))
    for arm, counts in ov.counts.items():
        c = ARM_COLOURS.get(arm, UNKNOWN_COLOUR)
        n = int(np.sum(counts))
        ax.stairs(counts, ov.edges, fill=True, color=c, alpha=0.25, gid=f"fill-{arm}")
        ax.stairs(counts, ov.edges, color=c, lw=1.6, gid=f"bins-{arm}",
                  label=_mpl(f"{arm} ({number(n)} rows)"))
    ax.set_xlim(float(ov.edges[0]), float(ov.edges[-1]))
    ax.set_ylabel("rows")
    if ov.binary:
        k = int(ov.flagged.sum())
        ax.set_xlabel("estimated propensity e(x) (out-of-bag centring forest)")
        ax.set_title(_mpl(f"propensity by arm, shared bins; {number(k)} rows in the shaded "
                          f"zones"), loc="left", fontsize=10)
    else:
        ax.set_xlabel("fitted mean of the treatment e(x) (out-of-bag centring forest)")
        ax.set_title("fitted treatment mean, all rows", loc="left", fontsize=10)
    _legend_below(ax)
    return fig


def effect_slice_figure(Figure, sl, name, X_train, oob_effects, target):
    """Return the effect along column ``name``: rows' out-of-bag effects, both lines, band.

    ``name`` is the report's name of the column (the model may have been fitted unnamed).
    """
    fig = Figure(figsize=(7.2, 4.4), layout="constrained")
    ax = fig.add_subplot()
    j = sl.feature_index
    ok = np.flatnonzero(np.isfinite(oob_effects))
    ok = ok[_shown(ok.size)]
    ax.scatter(X_train[ok, j], oob_effects[ok], s=6, color=ROW_COLOUR, alpha=0.18,
               linewidths=0, gid="rows",
               label="rows' out-of-bag effects (other columns at their own values)")
    f = sl.frame
    corr = EFFECT_COLOURS["corrected forest"]
    ax.fill_between(f["value"], f["lower"], f["upper"], color=corr, alpha=0.18, linewidth=0,
                    gid="band", label=_mpl(f"{number(100 * sl.level, 3)}% interval "
                                           f"({sl.interval.replace('_', ' ')})"))
    ax.plot(f["value"], f["uncorrected"], color=EFFECT_COLOURS["uncorrected forest"], lw=1.5,
            drawstyle="steps-mid", gid="uncorrected", label="uncorrected forest (same trees)")
    ax.plot(f["value"], f["corrected"], color=corr, lw=2.0, gid="corrected",
            label="corrected forest")
    ax.axhline(0.0, color="#8a929c", lw=0.8)
    ax.axvline(sl.x[j], color=_INK, lw=0.8, ls=":", gid="probe",
               label=_mpl(f"probe ({name} = {number(sl.x[j])})"))
    ax.set_xlabel(_mpl(name))
    ax.set_ylabel(_mpl(f"effect on {target}"))
    ax.set_title(_mpl(f"effect along {name}, other columns at the probe"), loc="left",
                 fontsize=10)
    _legend_below(ax)
    return fig


def verdict_gain_figure(Figure, v):
    """Return the verdict's paired gains (percent) with intervals, per part and alternative.

    One row per (alternative, part); a part without a finite gain is named, not drawn.
    """
    comps = v.comparisons
    fig = Figure(figsize=(7.2, 1.8 + 0.3 * len(comps) * len(VERDICT_PARTS)),
                 layout="constrained")
    ax = fig.add_subplot()
    ticks, labels = [], []
    y = 0.0
    for k, (alt, row) in enumerate(comps.iterrows()):
        c = _ALTERNATIVE_COLOURS.get(alt, UNKNOWN_COLOUR)
        ys, gains, los, his = [], [], [], []
        for part, label in VERDICT_PARTS:
            g, lo, hi = (float(row[f"{key}_{part}"]) for key in ("gain", "lower", "upper"))
            ticks.append(y)
            labels.append(label)
            if np.isfinite(g) and np.isfinite(lo) and np.isfinite(hi):
                ys.append(y)
                gains.append(100 * g)
                los.append(100 * lo)
                his.append(100 * hi)
            else:
                ax.text(0.0, y, "  too few rows to compare", va="center", fontsize=8,
                        color="#5a6370")
            y -= 1.0
        ax.hlines(ys, los, his, color=c, lw=1.6, gid=f"interval-{k}")
        ax.plot(gains, ys, "o", color=c, ms=5, gid=f"gain-{k}", label=_mpl(f"against {alt}"))
        y -= 0.6
    ax.axvline(0.0, color=_INK, lw=0.8)
    ax.set_yticks(ticks, labels)
    ax.set_ylim(y + 0.6 - 0.5, 0.5)
    ax.set_xlabel(_mpl(f"held-out R-loss removed (%), {number(100 * v.level, 3)}% "
                       f"intervals; right of 0: the correction does better"))
    ax.set_title("held-out R-loss gains of the corrected forest", loc="left", fontsize=10)
    _legend_below(ax)
    return fig
