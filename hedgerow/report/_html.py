"""The report as one HTML page: no JavaScript, nothing fetched, every text escaped.

A Content-Security-Policy (``default-src 'none'``) forbids any fetch; styles are inline,
fonts are the system's, figures are inline SVG (``_figures``). Numbers go through
``_numbers.number``, method colours through ``hedgerow._palette``.
"""

from __future__ import annotations

import html

from hedgerow import diagnostics as D
from hedgerow._palette import colour_of
from hedgerow.report._numbers import number

__all__ = ["render"]

_CSS = """
:root{--ink:#1b1f24;--muted:#5a6370;--rule:#d9dde2;--band:#f4f6f8;--accent:#1d5fa8}
*{box-sizing:border-box}
body{margin:0;color:var(--ink);background:#fff;
 font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
main{max-width:62rem;margin:0 auto;padding:1.5rem 1.25rem 3rem}
h1{font-size:1.6rem;margin:0 0 .25rem}
h2{font-size:1.15rem;margin:2.2rem 0 .6rem;padding-bottom:.2rem;
 border-bottom:2px solid var(--rule)}
h3{font-size:1rem;margin:1.2rem 0 .4rem}
p{margin:.4rem 0}
.hr-meta{color:var(--muted);font-size:.9rem}
nav ol{display:flex;flex-wrap:wrap;gap:.2rem 1rem;list-style:none;padding:0;margin:.8rem 0 0}
nav a{color:var(--accent);text-decoration:none;font-size:.9rem}
table{border-collapse:collapse;margin:.4rem 0 .8rem;font-size:.88rem;
 font-variant-numeric:tabular-nums}
th,td{padding:.25rem .6rem;border-bottom:1px solid var(--rule);text-align:right;
 vertical-align:top}
.hr-grid{display:flex;flex-wrap:wrap;gap:0 2.2rem;align-items:flex-start}
th{background:var(--band);font-weight:600}
th:first-child,td:first-child{text-align:left}
td.hr-text{text-align:left}
.hr-wrap{overflow-x:auto}
.hr-conclusion{font-size:1.08rem;padding:.7rem .9rem;background:var(--band);
 border-left:4px solid var(--accent);margin:.6rem 0}
.hr-swatch{display:inline-block;width:.8em;height:.8em;margin-right:.4em;
 vertical-align:-.05em;border-radius:2px}
figure{margin:.6rem 0 1rem}
svg.hr-figure{display:block;width:100%;height:auto;max-width:52rem}
figcaption{color:var(--muted);font-size:.88rem;margin-top:.3rem}
.hr-cautions li{margin:.35rem 0}
.hr-note{padding:.4rem .7rem;border-left:4px solid var(--muted);background:var(--band)}
code{font-size:.88em;background:var(--band);padding:0 .2em;border-radius:3px}
@media print{nav{display:none}h2{break-after:avoid}figure,table{break-inside:avoid}}
"""

_CSP = ("default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
        "base-uri 'none'; form-action 'none'")

_HEADINGS = {
    "data": "Data", "settings": "Settings", "verdict": "Verdict",
    "probe": "At the probe", "slice": "Slice", "edges": "Edges",
    "neighbour-weights": "Neighbour weights", "out-of-bag": "Out-of-bag summary",
    "coverage": "Coverage readout", "cautions": "Cautions",
}


def _e(v) -> str:
    return html.escape(str(v), quote=True)


def _method_cell(name) -> str:
    return (f'<span class="hr-swatch" style="background:{colour_of(name)}"></span>'
            f"{_e(name)}")


def _table(header, rows, cls=None) -> str:
    """Return an HTML table; cells are pre-rendered HTML, header cells plain text."""
    head = "".join(f"<th scope='col'>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    attr = f' class="{cls}"' if cls else ""
    return (f'<div class="hr-wrap"><table{attr}><thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table></div>")


def _kv_table(pairs) -> str:
    rows = "".join(f"<tr><th scope='row'>{_e(k)}</th><td class='hr-text'>{v}</td></tr>"
                   for k, v in pairs)
    return f'<div class="hr-wrap"><table><tbody>{rows}</tbody></table></div>'


def section(sid, heading, body) -> str:
    """Return one section of a report page: its id, its heading (escaped) and ``body``.

    ``body`` is HTML already; ``sid`` is the anchor the page's nav links to (ids are
    fixed names such as ``"effect-along"``, escaped all the same).
    """
    return f'<section id="{_e(sid)}"><h2>{_e(heading)}</h2>{body}</section>'


def sections(r, headings, bodies):
    """Return ``(nav, body)`` for the sections ``r.sections`` of a report ``r``, in order.

    ``headings`` maps a section id to its heading, ``bodies`` to ``body(r)`` (its HTML);
    ``nav`` is the ``(id, heading)`` pairs :func:`page` links to. Both report pages
    build their sections here.
    """
    nav = [(sid, headings[sid]) for sid in r.sections]
    return nav, "".join(section(sid, heading, bodies[sid](r)) for sid, heading in nav)


def _figure(svg, caption) -> str:
    return f"<figure>{svg}<figcaption>{_e(caption)}</figcaption></figure>"


def _data_html(r) -> str:
    d = r.data
    return _kv_table([
        ("rows", number(d.n_rows)), ("columns", number(d.n_columns)),
        ("target", _e(d.target)),
        ("column names", ", ".join(f"<code>{_e(c)}</code>" for c in d.columns)),
        ("data fingerprint", f"<code>{_e(d.fingerprint)}</code>"),
    ]) + ("<p class='hr-meta'>The fingerprint is a hash of the shape and every value (the "
          "first 16 digits of the SHA-256 a snapshot of the same data stores): a report "
          "built on the same table shows the same fingerprint.</p>")


def _block(heading, table) -> str:
    return f"<div><h3>{_e(heading)}</h3>{table}</div>"


def _settings_html(r) -> str:
    s = r.settings
    blocks = [
        _block("Model", _kv_table([
            ("estimator", f"<code>{_e(s.estimator)}</code>"),
            ("seed", _e(s.seed)),
            ("sliced column", f"<code>{_e(s.feature)}</code>"),
            ("hedgerow version", _e(s.version)),
        ])),
        _block("Estimator parameters", _table(
            ["parameter", "value"], [[_e(k), _e(v)] for k, v in sorted(s.parameters.items())])),
        _block("Chosen when fitting", _table(
            ["quantity", "value"], [[_e(k), number(v) if not isinstance(v, str) else _e(v)]
                                    for k, v in s.fitted.items()])),
        _block("Probe point", _table(
            ["column", "value"], [[_e(c), number(v)] for c, v in s.probe.items()])),
    ]
    out = f'<div class="hr-grid">{"".join(blocks)}</div>'
    if s.smoothers:
        cols = list(s.probe)
        out += _block("Kernel smoothers: bandwidths (column units, by cross-validation)",
                      _table(["method", *cols],
                             [[_method_cell(m), *(number(bw.get(c)) for c in cols)]
                              for m, bw in s.smoothers.items()]))
    return out


def _sklearn_note(v) -> str:
    s = (v.settings or {}).get("random forest (scikit-learn)")
    return f" The scikit-learn forest: {_e(s)}." if s else ""


def _verdict_html(r) -> str:
    v = r.verdict
    lvl = f"{number(100 * v.level, 3)}%"
    rows = []
    for name, row in v.comparisons.iterrows():
        cells = [_method_cell(name)]
        for part in ("all", "edge", "interior"):
            gain, lo, hi = (number(row[f"{key}_{part}"], percent=True)
                            for key in ("gain", "lower", "upper"))
            cells.append(f"{gain}<br><small>{lo} to {hi}</small>")
        rows.append(cells)
    smoothers = (f'<p id="verdict-smoothers">{_e(v.smoother_note)}</p>'
                 if getattr(v, "smoother_note", "") else "")
    return (f'<p class="hr-conclusion" id="verdict-conclusion">{_e(v.conclusion)}</p>'
            f"{smoothers}<p>Share of each method's held-out squared error the local linear forest "
            f"removes (negative: worse), paired row by row on the same rows, with {lvl} "
            f"intervals; scored by {_e(v.scoring)}. The diagnostic row is the local average "
            f"on the local linear forest's own trees (split for the correction, so a "
            f"handicapped plain forest). Edge band: rows with edge depth below "
            f"{number(D.EDGE_BAND, 2)}.{_sklearn_note(v)}</p>"
            + _table(["against", "all rows", "edge band", "interior"], rows, "hr-verdict"))


def _probe_html(r) -> str:
    p, t = r.probe, r.probe_table
    lvl = f"{number(100 * p.level, 3)}%"
    rows = [[_method_cell(name), number(row["prediction"]), number(row["lower"]),
             number(row["upper"]), number(row["half_width"]), number(row["ess"], 3)]
            for name, row in t.iterrows()]
    out = [f"<p>Each method's prediction at the probe with its {lvl} interval. Effective "
           f"n: Kish's effective number of rows behind the prediction. The forest's top "
           f"{D.TOP_ROWS} rows hold {number(100 * p.top_share, 3)}% of its weight.</p>",
           _table(["method", "prediction", "lower", "upper", "half-width", "effective n"],
                  rows, "hr-probe")]
    nb = p.neighbourhood_frame()
    out.append("<h3>The forest's neighbourhood of the probe</h3><p>Offset: weighted mean of "
               "(row - probe) per column in training standard deviations. Near 0 the "
               "neighbours sit on both sides; far from 0 they are lopsided, as at an edge.</p>")
    out.append(_table(["column", "probe", "offset (s.d.)", "spread (s.d.)"],
                      [[_e(c), number(row["probe"]), number(row["neighbour_offset_sd"], 3),
                        number(row["neighbour_spread_sd"], 3)] for c, row in nb.iterrows()]))
    return "".join(out)


def _slice_html(r) -> str:
    s = r.slices
    lvl = f"{number(100 * s.level, 3)}%"
    return _figure(r.figures["slice"], (
        f"Predictions along {s.feature} with every other column held at the probe: the local "
        f"linear forest with its {lvl} band, the honest forest's steps on the same trees"
        + (", and the kernel smoothers" if r.smoothers else "")
        + ". The black segment is the local line at the probe (dotted vertical line)."))


def _edges_html(r) -> str:
    ep = r.edges
    rows = [[_method_cell(row["method"]), _e(row["band"]), number(row["n"]),
             number(row["mean_residual"]), f"{number(row['lower'])} to {number(row['upper'])}",
             number(row["rmse"])] for _, row in ep.bands.iterrows()]
    out = ["<p>Held-out residuals (target minus held-out prediction) by edge depth band. "
           "Edge depth of a row: the share of the data beyond it in the nearer direction, "
           "over the correction columns (0 = at the edge, 0.5 = the middle).</p>",
           _table(["method", "edge depth band", "rows", "mean residual", "95% interval",
                   "RMSE"], rows, "hr-edges")]
    if len(ep.bend):
        out.append(f"<h3>Inward-bend score (outer {100 * D.EDGE_BAND:.0f}%)</h3><p>Mean of "
                   "residual x side x sign(local slope) over the edge band: positive means "
                   "the predictions bend toward the interior at the edges, a forest's edge "
                   "bias.</p>")
        out.append(_table(["method", "score", "95% interval", "rows"],
                          [[_method_cell(row["method"]), number(row["bend"]),
                            f"{number(row['lower'])} to {number(row['upper'])}", number(row["n"])]
                           for _, row in ep.bend.iterrows()], "hr-bend"))
    out.append(_figure(r.figures["edges"], "Held-out residuals against edge depth, one panel "
                       "per method; black bars: band mean and its 95% interval."))
    return "".join(out)


def _weights_html(r) -> str:
    kernel = [D.method_label(s) for s in r.smoothers]
    cap = ("The training rows the probe's prediction draws on: the forest's weights"
           + (f" against the kernel weights of {', '.join(kernel)}" if kernel else "")
           + ". Left: each row's weight against its distance from the probe; right: the "
           "share of the weight held by the heaviest rows.")
    return _figure(r.figures["neighbour_weights"], cap)


def _oob_html(r) -> str:
    o = r.oob
    return ("<p>The local linear forest on its own out-of-bag rows (trees that did not draw "
            "a row predict it).</p>" + _kv_table([
                ("ridge penalty", number(o["ridge_penalty"])),
                ("out-of-bag RMSE", number(o["oob_rmse"])),
                (f"mean {number(100 * o['level'], 3)}% interval width "
                 f"({o.get('interval', 'clt').replace('_', ' ')})", number(o["mean_width"])),
                ("rows with an out-of-bag prediction", number(o["n_rows"])),
            ]))


def _coverage_html(r) -> str:
    c = r.coverage
    rows = [[_method_cell(row["method"]), _e(str(row.get("interval", ""))), _e(row["part"]),
             number(row["covered"]), number(row["n"]), number(row["coverage"]),
             f"{number(row['lower'])} to {number(row['upper'])}", number(row["mean_width"]),
             _e(str(row.get("flag", "")))]
            for _, row in c.frame.iterrows()]
    note = (f"{c.mode}; {c.reps_done} of {c.reps} replications; nominal "
            f"{number(100 * c.level, 3)}%.")
    return (f"<p>Share of simulated intervals that cover the mean ({_e(note)}) with a "
            f"Clopper-Pearson 95% interval of that share.</p>"
            + _table(["method", "interval", "part", "covered", "intervals", "coverage",
                      "95% interval", "mean width", "flag"], rows, "hr-coverage"))


def _cautions_html(r) -> str:
    return ('<ul class="hr-cautions">' + "".join(f"<li>{_e(c)}</li>" for c in r.cautions)
            + "</ul>")


_BODIES = {
    "data": _data_html, "settings": _settings_html, "verdict": _verdict_html,
    "probe": _probe_html, "slice": _slice_html, "edges": _edges_html,
    "neighbour-weights": _weights_html, "out-of-bag": _oob_html,
    "coverage": _coverage_html, "cautions": _cautions_html,
}


def page(title, version, meta, notes_html, nav, body) -> str:
    """Return the HTML document shell both report pages share (head, header, nav, body).

    ``meta``: the header's meta line (HTML); ``notes_html``: HTML after it; ``nav``:
    ``(section id, heading)`` pairs; ``body``: the sections' HTML.
    """
    links = "".join(f'<li><a href="#{sid}">{_e(h)}</a></li>' for sid, h in nav)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f'<meta name="generator" content="hedgerow {_e(version)}">'
        f"<title>{_e(title)}</title><style>{_CSS}</style></head>\n<body><main>"
        f"<header><h1>{_e(title)}</h1><p class='hr-meta'>{meta}</p>{notes_html}"
        f"<nav aria-label='sections'><ol>{links}</ol></nav></header>"
        f"{body}</main></body></html>\n"
    )


def render(r) -> str:
    """Return the :class:`Report` ``r`` as one self-contained HTML document."""
    nav, body = sections(r, _HEADINGS, _BODIES)
    meta = (f"{_e(r.data.n_rows)} rows, {_e(r.data.n_columns)} columns, target "
            f"<code>{_e(r.data.target)}</code>; data fingerprint "
            f"<code>{_e(r.data.fingerprint)}</code>; made {_e(r.settings.created)} by "
            f"hedgerow {_e(r.settings.version)}. A static page: it opens offline and "
            f"computes nothing.")
    notes = "".join(f"<p class='hr-note'>{_e(n)}</p>" for n in r.notes)
    return page(r.title, r.settings.version, meta, notes, nav, body)
