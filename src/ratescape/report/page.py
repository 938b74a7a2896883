"""The HTML page: one self-contained file (Vega, Vega-Lite and vega-embed inlined, no network),
sections of paragraphs, escaped tables and chart specifications.

Chart specifications sit in ``<script type="application/json">`` blocks written by
:func:`ratescape.report.escaping.json_script_block`, and every table cell is HTML-escaped. The render
script parses and draws a chart only when it is needed: in the first screen at open, when scrolled
to or its closed block opened, and every chart before printing (the deferral rule in ``_RENDER``).
Never use Altair's or vl-convert's own HTML writers for output: they put data into a script
block unescaped.
"""
from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import altair as alt
import polars as pl

from ratescape.caution import CAUTION
from ratescape.report.escaping import (
    check_inline_script,
    escape_html,
    json_script_block,
)


@dataclass
class Section:
    """One part of the report.

    Parameters
    ----------
    title : str
        Heading (plain text; escaped).
    text : str or sequence of str
        Paragraphs (plain text; escaped).
    table : polars.DataFrame, optional
        Shown as an HTML table; every cell escaped.
    chart : altair chart, optional
        Embedded as an escaped JSON specification.
    unavailable : str, optional
        When set, the section shows this reason instead of a table or chart.
    chart_kind : str, optional
        The kind of its chart (a key of :data:`ratescape.report.publish.CHART_KINDS`), so a single
        chart is found by what it shows, not by its title.
    subject : str, optional
        Whom the chart is about (a project id or a group name), for single-chart export.
    """

    title: str
    text: str | Sequence[str] = ()
    table: pl.DataFrame | None = None
    chart: Any = None
    unavailable: str | None = None
    level: int = 2
    notes: list[str] = field(default_factory=list)
    chart_kind: str | None = None
    subject: str | None = None
    #: id of the section element, for links from the decision brief
    anchor: str | None = None
    #: HTML made by the report's own code (every user string in it escaped), shown after the text
    html: str | None = None
    #: one-line reading guide shown under the chart
    guide: str | None = None


@functools.lru_cache(maxsize=1)
def vega_bundle() -> str:
    """Vega, Vega-Lite and vega-embed as one script defining ``window.vegaEmbed``.

    Returns
    -------
    str
        JavaScript from ``vl_convert.javascript_bundle`` for the Vega-Lite
        version Altair writes, checked to be safe to inline.
    """
    import vl_convert as vlc

    return check_inline_script(vlc.javascript_bundle(vl_version=vega_lite_version()))


_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Arial,sans-serif;margin:0 auto;
max-width:1100px;padding:1.5em;color:#1a1a1a;line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em}h2{margin-top:2em;border-bottom:1px solid #ccc;padding-bottom:.2em}
.caution{border:3px solid #D55E00;background:#fff4ec;padding:.8em 1em;font-weight:600;margin:1em 0}
table{border-collapse:collapse;margin:.6em 0;font-size:.9em}
th,td{border:1px solid #ccc;padding:.25em .6em;text-align:left;vertical-align:top}
th{background:#f2f2f2}td.num{text-align:right;font-variant-numeric:tabular-nums}
.unavailable{color:#555;font-style:italic}.chart{margin:1em 0;overflow-x:auto}
.meta{color:#555;font-size:.9em}#render-status{display:none}
.noscript{border:1px solid #999;padding:.5em}
.guide{color:#333;font-size:.9em;margin-top:-.4em}.brief li{margin:.3em 0}
.controls label{margin-right:1.2em}.controls select{font-size:1em}
.warn{background:#fff4ec;border:1px solid #D55E00;padding:0 .4em}
.scroll{max-height:28em;overflow-y:auto}#search-results button{font-size:.95em;margin:.1em 0}
details.raw{margin:1em 0}
"""


# Registered before the bundle so that errors while loading it are recorded too.
_ERROR_HOOK = """
window.__ratescapeErrors = [];
window.addEventListener('error', function (e) {
  var what = e && e.message ? e.message : (e && e.target && e.target.tagName ? 'failed to load ' + e.target.tagName : 'unknown error');
  window.__ratescapeErrors.push(String(what));
}, true);
window.addEventListener('unhandledrejection', function (e) {
  window.__ratescapeErrors.push('unhandled rejection: ' + String(e && e.reason));
});
(function () {
  var original = console.error;
  console.error = function () {
    window.__ratescapeErrors.push('console.error: ' + Array.prototype.map.call(arguments, String).join(' '));
    return original.apply(console, arguments);
  };
})();
"""


_RENDER = r"""
(function () {
  'use strict';
  // Deferral rule: a chart is drawn when its box comes within MARGIN of the window (at open: the
  // first screen), when a closed block holding it is opened (the observer sees it appear), or when
  // the page is printed (beforeprint draws every chart). Until then its specification stays an
  // unparsed application/json block.
  var MARGIN = '200px';
  var errors = window.__ratescapeErrors;
  var status = document.getElementById('render-status');
  var blocks = document.querySelectorAll('script[type="application/json"][data-chart]');
  var charts = [];               // {block, target, job}
  var opened = null;             // charts drawn by the first observation, once known
  var api = {drawn: 0};
  function record(extra) {
    var rendered = document.querySelectorAll('.vega-embed svg.marks, .vega-embed canvas.marks').length;
    var state = {charts: charts.length, drawn: api.drawn, rendered: rendered,
                 deferred: charts.filter(function (c) { return !c.job; }).length,
                 errors: errors, pwned: typeof window.__pwned};
    if (extra) Object.keys(extra).forEach(function (k) { state[k] = extra[k]; });
    status.textContent = JSON.stringify(state);
  }
  function draw(c) {
    if (c.job) return c.job;
    c.target.setAttribute('data-rendered', 'pending');
    var spec;
    try {
      spec = JSON.parse(c.block.textContent);
    } catch (e) {
      errors.push('bad chart specification ' + c.block.id + ': ' + e);
      c.target.setAttribute('data-rendered', 'failed');
      c.job = Promise.resolve();
      return c.job;
    }
    c.job = window.vegaEmbed(c.target, spec, {actions: false, renderer: 'svg', mode: 'vega-lite'})
      .then(function () {
        api.drawn += 1;
        c.target.style.minHeight = '';
        c.target.setAttribute('data-rendered', '1');
      })
      .catch(function (e) {
        errors.push('chart ' + c.target.id + ' failed: ' + e);
        c.target.setAttribute('data-rendered', 'failed');
      });
    return c.job;
  }
  api.drawAll = function () { return Promise.all(charts.map(draw)).then(function () { record(); }); };
  api.draw = function (id) {
    var c = charts.filter(function (x) { return x.target.id === id; })[0];
    return c ? draw(c).then(function () { record(); }) : Promise.resolve();
  };
  window.__ratescapeCharts = api;
  if (typeof window.vegaEmbed !== 'function') {
    errors.push('vegaEmbed is not defined');
    record();
    status.setAttribute('data-state', 'done');
    return;
  }
  Array.prototype.forEach.call(blocks, function (block) {
    var target = document.getElementById(block.getAttribute('data-chart'));
    if (!target) { errors.push('no element for chart ' + block.id); return; }
    var h = parseInt(block.getAttribute('data-height'), 10);
    if (h > 0) target.style.minHeight = h + 'px';   // space kept, so drawing does not shift the page
    target.setAttribute('data-rendered', '0');
    charts.push({block: block, target: target, job: null});
  });
  // printing or saving as PDF: every chart (drawn in the microtasks that follow the event, before
  // the page is laid out for print)
  window.addEventListener('beforeprint', api.drawAll);
  if (window.matchMedia) {
    var mq = window.matchMedia('print');
    var onPrint = function (m) { if (m.matches) api.drawAll(); };
    if (mq.addEventListener) mq.addEventListener('change', onPrint); else if (mq.addListener) mq.addListener(onPrint);
  }
  function firstScreenDone() {
    performance.mark('ratescape-first-charts');
    record({first_screen: opened.length});
    status.setAttribute('data-state', 'done');
  }
  if (!('IntersectionObserver' in window)) {     // no observer: draw everything now
    opened = charts;
    api.drawAll().then(function () { setTimeout(firstScreenDone, 0); });
    return;
  }
  var byTarget = new Map(charts.map(function (c) { return [c.target, c]; }));
  var observer = new IntersectionObserver(function (entries) {
    var now = [];
    entries.forEach(function (e) {
      if (!e.isIntersecting) return;
      observer.unobserve(e.target);
      now.push(byTarget.get(e.target));
    });
    var jobs = now.map(draw);
    if (opened === null) {       // the first observation: the charts of the first screen
      opened = now;
      Promise.all(jobs).then(function () { setTimeout(firstScreenDone, 0); });
    } else {
      Promise.all(jobs).then(function () { record(); });
    }
  }, {rootMargin: MARGIN + ' 0px'});
  if (!charts.length) {
    opened = [];
    setTimeout(firstScreenDone, 0);
    return;
  }
  charts.forEach(function (c) { observer.observe(c.target); });
})();
"""


_RATE_COLS = {"discount_rate", "real_rate", "inflation", "irr_nominal", "irr_real", "marr",
              "inflation_low_max", "inflation_high_min", "lowest_failing_inflation"}


_SHARE_COLS = {"accept_share", "share_low", "share_high", "drop", "selected_share", "gap",
               "accept_share_at_or_below", "accept_share_above", "accept_share_before", "accept_share_after"}


_MONEY_COLS = {"pw_base", "pw_min", "pw_max", "pw_mean", "present_worth", "objective",
               "lp_bound", "greedy_objective", "margin"}


_HEADERS = {
    "project_id": "Project id", "name": "Name", "pw_base": "Present worth, base scenario",
    "pw_min": "Lowest present worth", "pw_max": "Highest present worth",
    "pw_mean": "Mean present worth", "accept_share": "Share of scenarios accepted",
    "rank_base": "Rank, base scenario", "rank_min": "Best rank", "rank_median": "Median rank",
    "rank_max": "Worst rank", "rank_spread": "Rank spread (worst - best)",
    "share_low": "Accepted share, low inflation", "share_high": "Accepted share, high inflation",
    "drop": "Drop", "selected_share": "Share of scenarios selected", "item": "Item", "value": "Value",
    "statistic": "Statistic", "objective": "Portfolio present worth (optimum)",
    "lp_bound": "Upper bound (LP relaxation)", "greedy_objective": "Profitability-index greedy",
    "gap": "Greedy shortfall",
    "accept_share_at_or_below": "Share accepted, inflation at or below the threshold",
    "accept_share_above": "Share accepted, inflation above the threshold",
    "lowest_failing_inflation": "Lowest inflation at which it fails",
    "accept_share_before": "Share accepted, before", "accept_share_after": "Share accepted, now",
    "rank_median_before": "Median rank, before", "rank_median_after": "Median rank, now",
    "core_before": "In the core portfolio, before", "core_after": "In the core portfolio, now",
    "group_preferred_before": "Group's preferred alternative, before",
    "group_preferred_after": "Group's preferred alternative, now", "why": "Why (from the stored inputs)",
}


def format_cell(column: str, value: Any) -> tuple[str, bool]:
    """Cell text and whether it is numeric."""
    if value is None:
        return "—", False
    if isinstance(value, bool):
        return ("yes" if value else "no"), False
    if isinstance(value, float):
        if not math.isfinite(value):
            return "—", True
        if column in _SHARE_COLS:
            return f"{value:.1%}", True
        if column in _RATE_COLS:
            return f"{value:.2%}", True
        if column in _MONEY_COLS:
            return f"{value:,.0f}", True
        return f"{value:,.4g}", True
    if isinstance(value, int) and column not in ("project_id",):
        return f"{value:,}", True
    return str(value), False


def table_html(frame: pl.DataFrame) -> str:
    head = "".join(f"<th>{escape_html(_HEADERS.get(c, c))}</th>" for c in frame.columns)
    rows = []
    for row in frame.iter_rows():
        cells = []
        for col, val in zip(frame.columns, row):
            text, numeric = format_cell(col, val)
            cls = ' class="num"' if numeric else ""
            cells.append(f"<td{cls}>{escape_html(text)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


def paragraphs(text: str | Sequence[str]) -> str:
    items = [text] if isinstance(text, str) else list(text)
    return "".join(f"<p>{escape_html(t)}</p>" for t in items if t)


def build_report_html(
    sections: Iterable[Section],
    *,
    title: str = "ratescape screening report",
    metadata: Mapping[str, Any] | Sequence[tuple[str, Any]] | None = None,
    caution: str = CAUTION,
    subtitle: str | None = None,
    data_blocks: Sequence[str] = (),
    scripts: Sequence[str] = (),
) -> str:
    """Assemble the self-contained offline HTML report.

    Parameters
    ----------
    sections : iterable of Section
        In order of appearance.
    title : str
        Page title and heading (escaped).
    metadata : mapping or sequence of (label, value), optional
        Run metadata and assumptions, shown as a two-column table.
    caution : str
        The screening caution shown prominently under the title.
    subtitle : str, optional
    data_blocks : sequence of str
        ``<script type="application/json">`` elements from :func:`json_script_block`.
    scripts : sequence of str
        Page scripts run after the charts' render script (checked by :func:`check_inline_script`).

    Returns
    -------
    str
        The HTML document. Its only scripts are inline: the error hook,
        the Vega bundle, the escaped chart specifications and the render
        script; no element loads anything from the network.

    Examples
    --------
    >>> page = build_report_html([Section("Notes", "a <b> c")], title="T")
    >>> "a &lt;b&gt; c" in page and "<script src" not in page
    True
    """
    parts: list[str] = []
    specs: list[str] = []
    chart_no = 0
    for sec in sections:
        h = max(2, min(int(sec.level), 4))
        anchor = f' id="{escape_html(sec.anchor)}"' if sec.anchor else ""
        parts.append(f"<section{anchor}><h{h}>{escape_html(sec.title)}</h{h}>")
        parts.append(paragraphs(sec.text))
        if sec.html:
            parts.append(sec.html)
        if sec.unavailable:
            parts.append(f'<p class="unavailable">{escape_html(sec.unavailable)}</p>')
        else:
            if sec.table is not None:
                if sec.table.height == 0:
                    parts.append('<p class="unavailable">No projects.</p>')
                else:
                    parts.append(table_html(sec.table))
            if sec.chart is not None:
                chart_no += 1
                cid = f"chart-{chart_no}"
                spec = sec.chart.to_dict() if hasattr(sec.chart, "to_dict") else dict(sec.chart)
                parts.append(f'<div class="chart" id="{cid}"></div>')
                if sec.guide:
                    parts.append(f'<p class="guide">{escape_html(sec.guide)}</p>')
                specs.append(json_script_block(spec, f"spec-{chart_no}", chart=cid,
                                               height=str(reserved_height(spec))))
        parts.append(paragraphs(sec.notes))
        parts.append("</section>")
    meta_html = ""
    if metadata:
        items = list(metadata.items()) if isinstance(metadata, Mapping) else list(metadata)
        rows = "".join(
            f"<tr><th>{escape_html(k)}</th><td>{escape_html(format_cell('', v)[0] if not isinstance(v, str) else v)}</td></tr>"
            for k, v in items
        )
        meta_html = (f"<details class=\"raw\"><summary>Raw settings of the run</summary>"
                     f"<table>{rows}</table></details>")
    sub = f'<p class="meta">{escape_html(subtitle)}</p>' if subtitle else ""
    return "".join([
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">",
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{escape_html(title)}</title>",
        f"<style>{_CSS}</style>",
        f"<script>{check_inline_script(_ERROR_HOOK)}</script>",
        f"<script>{vega_bundle()}</script>",
        "</head><body>",
        f"<h1>{escape_html(title)}</h1>{sub}",
        f'<p class="caution" role="note">{escape_html(caution)}</p>',
        '<noscript><p class="noscript">The charts need JavaScript; the tables below do not.</p></noscript>',
        *parts,
        meta_html,
        *specs,
        *data_blocks,
        '<pre id="render-status" data-state="pending"></pre>',
        f"<script>{check_inline_script(_RENDER)}</script>",
        *(f"<script>{check_inline_script(js)}</script>" for js in scripts),
        "</body></html>\n",
    ])

def reserved_height(spec: Mapping[str, Any]) -> int:
    """Pixels kept for a chart before it is drawn (its plot height plus title and axis), so that
    drawing a deferred chart does not move the page.

    A fixed ``height`` counts as it is; a ``{"step": s}`` height counts ``s`` per distinct value of
    the y field in the chart's data set (or per row when the field is not found); anything else
    gets 400. An estimate: the page drops the reserve once the chart is drawn.

    Examples
    --------
    >>> reserved_height({"height": 300})
    365
    >>> reserved_height({"height": {"step": 16}, "data": {"name": "d"}, "encoding": {"y": {"field": "n"}},
    ...                  "datasets": {"d": [{"n": "a"}, {"n": "b"}, {"n": "a"}]}})
    97
    """
    height = spec.get("height")
    if isinstance(height, (int, float)) and not isinstance(height, bool):
        return int(height) + _CHART_FRAME
    if isinstance(height, Mapping) and isinstance(height.get("step"), (int, float)):
        datasets = spec.get("datasets") or {}
        name = (spec.get("data") or {}).get("name") if isinstance(spec.get("data"), Mapping) else None
        rows = datasets.get(name) if name in datasets else next(iter(datasets.values()), [])
        encoding = spec.get("encoding") or next((layer.get("encoding") for layer in spec.get("layer", [])
                                                 if isinstance(layer, Mapping) and layer.get("encoding")), {})
        field_name = (encoding.get("y") or {}).get("field")
        if field_name and rows and all(isinstance(r, Mapping) and field_name in r for r in rows):
            count = len({str(r[field_name]) for r in rows})
        else:
            count = len(rows) if isinstance(rows, list) else 0
        if count:
            return int(height["step"] * count) + _CHART_FRAME
    return 400


#: title, axis and padding around a chart's plot, in pixels (Altair's defaults, as measured in Chromium)
_CHART_FRAME = 65


def vega_lite_version() -> str | None:
    """vl-convert's name for the Vega-Lite version Altair writes (e.g. '6.4'), if it has it."""
    import vl_convert as vlc

    major_minor = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    return major_minor if major_minor in vlc.get_vegalite_versions() else None
