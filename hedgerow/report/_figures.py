"""The report's figures: drawn once with matplotlib, inlined as SVG markup.

matplotlib is imported when a report is built, not when ``hedgerow.report`` is imported;
figures are ``Figure`` objects without pyplot state, text stays text (searchable, and
escaped here like any other markup), and a fixed hash salt makes equal inputs give equal
SVG. Colours and dash patterns come from ``hedgerow._palette``; numbers in labels from
``_numbers.number``.
"""

from __future__ import annotations

import html
import io
import re

import numpy as np

from hedgerow import diagnostics as D
from hedgerow._palette import ROW_COLOUR, colour_of, dash_of
from hedgerow.report._content import LLF
from hedgerow.report._numbers import number

__all__ = ["figures", "line_style", "drawing", "RC"]

#: matplotlib line styles for the palette's named dash patterns
LINE_STYLES = {"solid": "-", "dashed": "--", "dash_dotted": "-.", "dotted": ":"}
_INK = "#1b1f24"
#: At most this many points per scatter (a fixed subsample) and vertices per cumulative
#: curve: a large table would otherwise make a page of tens of megabytes.
FIGURE_POINTS = 4000


def _shown(n: int) -> np.ndarray:
    """Return the indices a scatter of ``n`` points draws: all, or a fixed subsample."""
    if n <= FIGURE_POINTS:
        return np.arange(n)
    return np.sort(np.random.default_rng(20240).choice(n, size=FIGURE_POINTS, replace=False))


def line_style(name: str) -> str:
    """Return the matplotlib line style of a method's palette dash pattern."""
    return LINE_STYLES[dash_of(name)]


def _mpl(text) -> str:
    """Return ``text`` safe for a matplotlib label ('$' would start mathtext)."""
    return str(text).replace("$", r"\$")


_ID = re.compile(r'\bid="([^"]+)"')
_REF = re.compile(r'(\bid="|url\(#|href="#)([^")]+)(?=[")])')


def _svg(fig, prefix: str, title: str) -> str:
    """Return the figure as inline SVG markup: no prolog, no metadata, ids prefixed.

    Several figures share one page, so every id (and every reference to it) gets the
    figure's prefix; namespace declarations and the DTD line are not needed inline.
    """
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None,
                                             "Format": None, "Type": None})
    s = buf.getvalue()
    s = s[s.index("<svg"):]
    s = re.sub(r"<metadata>.*?</metadata>\s*", "", s, flags=re.S)
    s = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", s)
    ids = set(_ID.findall(s))
    s = _REF.sub(lambda m: f"{m[1]}{prefix}-{m[2]}" if m[2] in ids else m[0], s)
    # the page's CSS sizes the figure; the viewBox keeps its aspect ratio
    s = re.sub(r'^<svg([^>]*?)\swidth="[^"]*"\s+height="[^"]*"', r"<svg\1", s, count=1)
    head = s.index(">") + 1
    label = html.escape(title, quote=True)
    return (f'<svg class="hr-figure" role="img" aria-labelledby="{prefix}-title"'
            f"{s[4:head]}<title id=\"{prefix}-title\">{label}</title>{s[head:]}")


#: matplotlib settings of every report figure (both pages): text kept as text, a fixed
#: hash salt (equal inputs give equal SVG), quiet axes.
RC = {"svg.fonttype": "none", "svg.hashsalt": "hedgerow-report", "font.size": 9,
      "font.family": ["sans-serif"], "axes.edgecolor": "#8a929c",
      "axes.labelcolor": _INK, "xtick.color": "#4a525c", "ytick.color": "#4a525c",
      "axes.spines.top": False, "axes.spines.right": False, "legend.frameon": False,
      "path.simplify": True}


def drawing():
    """Return a context manager with the report's matplotlib settings (``RC``)."""
    import matplotlib

    return matplotlib.rc_context(RC)


def figures(model, columns, target, j, slice_report, probe_report, edge_profile, weights):
    """Return ``{"slice", "edges", "neighbour_weights"}`` -> inline SVG markup."""
    from matplotlib.figure import Figure

    with drawing():
        return {
            "slice": _svg(_slice_figure(Figure, model, columns, target, j, slice_report,
                                        probe_report), "fig-slice",
                          f"predictions along {columns[j]}"),
            "edges": _svg(_edges_figure(Figure, target, edge_profile), "fig-edges",
                          "held-out residuals against edge depth"),
            "neighbour_weights": _svg(_weights_figure(Figure, probe_report, weights),
                                      "fig-weights", "neighbour weights at the probe"),
        }


def _slice_figure(Figure, model, columns, target, j, sl, pr):
    fig = Figure(figsize=(7.2, 4.0), layout="constrained")
    ax = fig.add_subplot()
    rows = _shown(model.X_train_.shape[0])
    ax.scatter(model.X_train_[rows, j], model.y_train_[rows], s=6, color=ROW_COLOUR,
               alpha=0.18, linewidths=0, label="rows (other columns at their own values)")
    for name in sl.frame["method"].unique():
        part = sl.method(name)
        c = colour_of(name)
        if name == LLF:
            ax.fill_between(part["value"], part["lower"], part["upper"], color=c,
                            alpha=0.18, linewidth=0,
                            label=f"{name}: {number(100 * sl.level, 3)}% band")
            ax.plot(part["value"], part["prediction"], color=c, lw=2.0, label=name)
        elif name.startswith("honest forest"):
            ax.plot(part["value"], part["prediction"], color=c, lw=1.5,
                    drawstyle="steps-mid", label=f"{name}: steps")
        else:
            ax.plot(part["value"], part["prediction"], color=c, lw=1.5, ls=line_style(name),
                    label=name)
    xs, ys = D.local_line(pr, j, span=0.08 * float(np.ptp(sl.frame["value"]) or 1.0))
    ax.plot(xs, ys, color=_INK, lw=2.5, solid_capstyle="round", label="local line at probe")
    ax.axvline(sl.x[j], color=_INK, lw=0.8, ls=":")
    ax.plot([sl.x[j]], [pr.method(LLF).prediction], "o", color=_INK, ms=4)
    ax.set_xlabel(_mpl(columns[j]))
    ax.set_ylabel(_mpl(target))
    ax.set_title(_mpl(f"prediction along {columns[j]}, other columns at the probe"),
                 loc="left", fontsize=10)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8)
    return fig


def _edges_figure(Figure, target, ep):
    names = list(ep.residuals.columns)
    fig = Figure(figsize=(7.2, 1.2 + 1.45 * len(names)), layout="constrained")
    axes = fig.subplots(len(names), 1, sharex=True, sharey=True, squeeze=False)[:, 0]
    edges = D.DEPTH_BANDS
    for ax, name in zip(axes, names, strict=True):
        c = colour_of(name)
        r = ep.residuals[name].to_numpy()
        ok = np.flatnonzero(np.isfinite(r))
        ok = ok[_shown(ok.size)]
        ax.scatter(ep.depth[ok], r[ok], s=5, color=c, alpha=0.35, linewidths=0)
        ax.axhline(0.0, color="#8a929c", lw=0.8)
        for b in edges[1:-1]:
            ax.axvline(b, color="#c3c8ce", lw=0.8, ls=":")
        bands = ep.bands[ep.bands["method"] == name].reset_index(drop=True)
        for b, row in bands.iterrows():
            lo, hi = edges[b], min(edges[b + 1], 0.5)
            if np.isfinite(row["mean_residual"]):
                ax.plot([lo, hi], [row["mean_residual"]] * 2, color=_INK, lw=2.0)
            if np.isfinite(row["lower"]) and np.isfinite(row["upper"]):
                mid = (lo + hi) / 2
                ax.plot([mid, mid], [row["lower"], row["upper"]], color=_INK, lw=1.0)
        bend = ep.bend[ep.bend["method"] == name]
        note = (f"  (inward-bend score {number(bend['bend'].iloc[0], 3)})"
                if len(bend) and np.isfinite(bend["bend"].iloc[0]) else "")
        ax.set_title(_mpl(name + note), loc="left", fontsize=9, color=c)
        ax.set_ylabel("residual")
    axes[-1].set_xlabel("edge depth (share of the data beyond the row; 0 = at the edge)")
    axes[-1].set_xlim(0.0, 0.5)
    fig.suptitle(_mpl(f"held-out residuals of {target} against edge depth; bars: band mean "
                      f"and 95% interval"), x=0.01, ha="left", fontsize=10)
    return fig


def _weights_figure(Figure, pr, weights):
    fig = Figure(figsize=(7.2, 3.2), layout="constrained")
    a, b = fig.subplots(1, 2)
    for name, prof in weights.items():
        c = colour_of(name)
        label = name if name != LLF else "forest weights"
        ess = pr.method(name).ess
        dots = prof.iloc[_shown(len(prof))]
        a.scatter(dots["distance"], dots["weight"], s=8, color=c, alpha=0.6, linewidths=0,
                  label=_mpl(f"{label} (effective n {number(ess, 3)})"))
        # ranks spaced evenly on the log axis; the curve's last point is kept
        steps = prof if len(prof) <= FIGURE_POINTS else prof.iloc[np.unique(np.geomspace(
            1, len(prof), FIGURE_POINTS).astype(np.int64)) - 1]
        b.plot(steps["rank"], steps["cumulative"], color=c, lw=1.6, ls=line_style(name),
               drawstyle="steps-post", label=_mpl(label))
    cols = next((p.attrs.get("distance_columns") for p in weights.values()), None) or []
    shown = ", ".join(cols[:3]) + (f" +{len(cols) - 3}" if len(cols) > 3 else "")
    a.set_xlabel(_mpl(f"distance from the probe in {shown} (training s.d.)") if cols
                 else "distance from the probe (training s.d.)")
    a.set_ylabel("weight")
    a.set_title("who the probe listens to", loc="left", fontsize=10)
    a.legend(fontsize=7.5, loc="best")
    b.set_xscale("log")
    b.set_ylim(0.0, 1.02)
    b.set_xlabel("rows, heaviest first")
    b.set_ylabel("share of the weight")
    b.set_title("how concentrated the weights are", loc="left", fontsize=10)
    return fig
