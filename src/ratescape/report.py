"""The published report: one self-contained HTML file that works with no network.

Two layers:

* :func:`build_report_html` turns :class:`Section` objects (text, Polars
  tables, Altair charts) into one HTML page. Vega, Vega-Lite and vega-embed
  are inlined from vl-convert's bundle; there is no CDN link and no
  "open in editor" action. Chart specifications sit in
  ``<script type="application/json">`` blocks written by
  :func:`ratescape.html_safety.json_for_script` (``<``, ``>``, ``&``,
  U+2028, U+2029 escaped), and every table cell is HTML-escaped, so
  project names from users' files stay inert text.
* :func:`write_report` opens the results database read-only, picks a run,
  aggregates in DuckDB (top-N tables, portfolio summaries, drill-down
  grids for a handful of projects; never the whole results cube) and
  writes the page.

The page records its own rendering outcome in ``<pre id="render-status">``
(JSON: number of chart specs, number of rendered Vega views, script
errors), which the browser test reads.
"""

from __future__ import annotations

import datetime as _dt
import functools
import json
import math
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import polars as pl

from ratescape import charts
from ratescape.errors import RatescapeError
from ratescape.html_safety import check_inline_script, escape_html, json_script_block

__all__ = [
    "CAUTION",
    "ReportError",
    "Section",
    "build_report_html",
    "report_sections",
    "standalone_chart_html",
    "vega_bundle",
    "write_report",
]

CAUTION = (
    "Screening aid only: results depend on the assumptions shown; tax and depreciation "
    "rules vary by jurisdiction and year; this is not professional advice, and decisions "
    "rest with qualified professionals under local rules."
)

#: Statuses of ``runs.status`` that count as a finished run.
FINISHED_STATUSES = ("finished", "complete", "completed", "done")
#: Most drill-down projects a report carries (each adds one surface chart).
MAX_DRILL_PROJECTS = 8
#: Most grid points of one drill-down surface; larger grids are thinned evenly.
MAX_SURFACE_POINTS = 10_000
#: Most lines (levels of the second axis) in a worth curve.
MAX_CURVE_LINES = 11
#: Most mutually exclusive groups drawn as decision maps.
MAX_GROUPS = 4


NO_BUDGET = "Not available: this run has no budget-limited portfolios."
NO_GROUPS = "Not available: this run has no groups of mutually exclusive alternatives."
NO_SENSITIVITY = "Not available: this run has no one-at-a-time sensitivity results."


class ReportError(RatescapeError, ValueError):
    """The report cannot be built from this database or with these arguments."""


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
    """

    title: str
    text: str | Sequence[str] = ()
    table: pl.DataFrame | None = None
    chart: Any = None
    unavailable: str | None = None
    level: int = 2
    notes: list[str] = field(default_factory=list)


# ---------------------------------------------------------------------------
# page assembly
# ---------------------------------------------------------------------------

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

    return check_inline_script(vlc.javascript_bundle(vl_version=charts._vl_version()))


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

_RENDER = """
(function () {
  'use strict';
  var errors = window.__ratescapeErrors;
  var status = document.getElementById('render-status');
  var blocks = document.querySelectorAll('script[type="application/json"][data-chart]');
  function finish() {
    var rendered = document.querySelectorAll('.vega-embed svg.marks, .vega-embed canvas.marks').length;
    status.textContent = JSON.stringify({
      charts: blocks.length, rendered: rendered, errors: errors,
      pwned: typeof window.__pwned
    });
    status.setAttribute('data-state', 'done');
  }
  if (typeof window.vegaEmbed !== 'function') {
    errors.push('vegaEmbed is not defined');
    finish();
    return;
  }
  var jobs = [];
  Array.prototype.forEach.call(blocks, function (block) {
    var target = document.getElementById(block.getAttribute('data-chart'));
    var spec;
    try {
      spec = JSON.parse(block.textContent);
    } catch (e) {
      errors.push('bad chart specification ' + block.id + ': ' + e);
      return;
    }
    jobs.push(window.vegaEmbed(target, spec, {actions: false, renderer: 'svg', mode: 'vega-lite'})
      .catch(function (e) { errors.push('chart ' + target.id + ' failed: ' + e); }));
  });
  Promise.all(jobs).then(function () { setTimeout(finish, 50); });
})();
"""

_RATE_COLS = {"discount_rate", "real_rate", "inflation", "irr_nominal", "irr_real", "marr",
              "inflation_low_max", "inflation_high_min"}
_SHARE_COLS = {"accept_share", "share_low", "share_high", "drop", "selected_share", "gap"}
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
}


def _format_cell(column: str, value: Any) -> tuple[str, bool]:
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


def _table_html(frame: pl.DataFrame) -> str:
    head = "".join(f"<th>{escape_html(_HEADERS.get(c, c))}</th>" for c in frame.columns)
    rows = []
    for row in frame.iter_rows():
        cells = []
        for col, val in zip(frame.columns, row):
            text, numeric = _format_cell(col, val)
            cls = ' class="num"' if numeric else ""
            cells.append(f"<td{cls}>{escape_html(text)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


def _paragraphs(text: str | Sequence[str]) -> str:
    items = [text] if isinstance(text, str) else list(text)
    return "".join(f"<p>{escape_html(t)}</p>" for t in items if t)


def build_report_html(
    sections: Iterable[Section],
    *,
    title: str = "ratescape screening report",
    metadata: Mapping[str, Any] | Sequence[tuple[str, Any]] | None = None,
    caution: str = CAUTION,
    subtitle: str | None = None,
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
        parts.append(f"<section><h{h}>{escape_html(sec.title)}</h{h}>")
        parts.append(_paragraphs(sec.text))
        if sec.unavailable:
            parts.append(f'<p class="unavailable">{escape_html(sec.unavailable)}</p>')
        else:
            if sec.table is not None:
                if sec.table.height == 0:
                    parts.append('<p class="unavailable">No projects.</p>')
                else:
                    parts.append(_table_html(sec.table))
            if sec.chart is not None:
                chart_no += 1
                cid = f"chart-{chart_no}"
                spec = sec.chart.to_dict() if hasattr(sec.chart, "to_dict") else dict(sec.chart)
                parts.append(f'<div class="chart" id="{cid}"></div>')
                specs.append(json_script_block(spec, f"spec-{chart_no}", chart=cid))
        parts.append(_paragraphs(sec.notes))
        parts.append("</section>")
    meta_html = ""
    if metadata:
        items = list(metadata.items()) if isinstance(metadata, Mapping) else list(metadata)
        rows = "".join(
            f"<tr><th>{escape_html(k)}</th><td>{escape_html(_format_cell('', v)[0] if not isinstance(v, str) else v)}</td></tr>"
            for k, v in items
        )
        meta_html = f"<h2>Run and assumptions</h2><table>{rows}</table>"
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
        meta_html,
        *parts,
        *specs,
        '<pre id="render-status" data-state="pending"></pre>',
        f"<script>{check_inline_script(_RENDER)}</script>",
        "</body></html>\n",
    ])


def standalone_chart_html(chart: Any, *, title: str = "ratescape chart") -> str:
    """One chart as an offline HTML page (scripts inlined, specification escaped).

    Parameters
    ----------
    chart : altair chart
    title : str

    Returns
    -------
    str
    """
    return build_report_html([Section(title, chart=chart)], title=title)


# ---------------------------------------------------------------------------
# data access (DuckDB, read-only)
# ---------------------------------------------------------------------------

def _tables(con: duckdb.DuckDBPyConnection) -> set[str]:
    return {r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables").fetchall()}


def _columns(con: duckdb.DuckDBPyConnection, table: str) -> list[str]:
    return [r[0] for r in con.execute(
        "SELECT column_name FROM information_schema.columns WHERE table_name = ? "
        "ORDER BY ordinal_position", [table]).fetchall()]


def _q(con: duckdb.DuckDBPyConnection, sql: str, params: Sequence[Any] = ()) -> pl.DataFrame:
    # every execute() in this module is fetched to the end (fetchall), as DuckDB requires
    # before the next relation query on the same connection
    return con.sql(sql, params=list(params) or None).pl()


def _ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _pick_run(con: duckdb.DuckDBPyConnection, run_id: str | None) -> dict[str, Any]:
    if run_id is None:
        statuses = ", ".join(f"'{s}'" for s in FINISHED_STATUSES)
        row = con.execute(
            f"SELECT run_id FROM runs WHERE lower(status) IN ({statuses}) "
            "ORDER BY finished_at DESC NULLS LAST, started_at DESC NULLS LAST LIMIT 1").fetchall()
        if not row:
            seen = con.execute("SELECT run_id, status FROM runs ORDER BY started_at").fetchall()
            raise ReportError(
                "no finished run in the database (runs: "
                + (", ".join(f"{r} [{s}]" for r, s in seen) or "none")
                + "); finish one with `ratescape screen` (or `--resume RUN_ID`) or pass --run")
        run_id = row[0][0]
    frame = _q(con, "SELECT * FROM runs WHERE run_id = ?", [run_id])
    if frame.height == 0:
        known = [r[0] for r in con.execute("SELECT run_id FROM runs ORDER BY started_at").fetchall()]
        raise ReportError(f"no run {run_id!r} in the database; known runs: {known or 'none'}")
    return frame.row(0, named=True)


def _thin(levels: list[float], keep: int) -> list[float]:
    """At most ``keep`` levels, evenly spaced by index, first and last kept."""
    if len(levels) <= keep:
        return levels
    idx = sorted({round(i * (len(levels) - 1) / (keep - 1)) for i in range(keep)})
    return [levels[i] for i in idx]


class _Run:
    """Shared context of one report: connection, run row, scenario axes."""

    def __init__(self, con: duckdb.DuckDBPyConnection, run: dict[str, Any]):
        self.con = con
        self.run = run
        self.run_id = run["run_id"]
        self.tables = _tables(con)
        basis = str(run.get("discount_basis") or "nominal").lower()
        self.x = "real_rate" if basis == "real" else "discount_rate"
        self.y = "inflation"
        self.scenario_count = con.execute(
            "SELECT count(*) FROM scenarios WHERE run_id = ?", [self.run_id]).fetchall()[0][0]
        self.project_count = con.execute(
            "SELECT count(*) FROM project_summary WHERE run_id = ?", [self.run_id]).fetchall()[0][0]
        self.base = self._base_scenario()
        self.plane_filter, self.plane_params = self._plane_filter()
        self.narrow = self._has_narrow_rows()

    def _has_narrow_rows(self) -> bool:
        """True when the run's rows are in `result_rows` (schema 2): read them there, joining the
        run's scenarios by key, instead of through the `results` view's wider joins."""
        if "result_rows" not in self.tables or "scenario_key" not in _columns(self.con, "scenarios"):
            return False
        return bool(self.con.execute("SELECT count(*) FROM scenarios WHERE run_id = ? AND scenario_key IS NOT NULL",
                                     [self.run_id]).fetchall()[0][0])

    def rows(self, *, projects: list[str] | None = None) -> tuple[str, list[Any]]:
        """A relation of the run's result rows: scenario_id, project_id, present_worth, accepted.

        Returns SQL (for a FROM clause) and its parameters; ``projects`` restricts it to those ids
        (filtered by project key before the join, so the other rows are never joined).
        """
        if not self.narrow:
            where = " AND list_contains(?, project_id)" if projects is not None else ""
            return (f"(SELECT scenario_id, project_id, present_worth, accepted FROM results "
                    f"WHERE run_id = ?{where})", [self.run_id] + ([projects] if projects is not None else []))
        keys = ""
        params: list[Any] = [self.run_id, self.run_id]
        if projects is not None:
            keys = " AND list_contains(?, ps.project_id)"
            params.append(projects)
        return (f"""(SELECT sc.scenario_id, ps.project_id, x.present_worth, x.present_worth >= 0 AS accepted
                    FROM result_rows x
                    JOIN (SELECT scenario_key, scenario_id FROM scenarios WHERE run_id = ?) sc
                      ON sc.scenario_key = x.scenario_key
                    JOIN (SELECT project_key, project_id FROM project_summary ps WHERE run_id = ?{keys}) ps
                      ON ps.project_key = x.project_key)""", params)

    def _base_scenario(self) -> dict[str, Any] | None:
        f = _q(self.con, "SELECT * FROM scenarios WHERE run_id = ? ORDER BY is_base DESC, scenario_id LIMIT 1"
               if "is_base" in _columns(self.con, "scenarios") else
               "SELECT * FROM scenarios WHERE run_id = ? ORDER BY scenario_id LIMIT 1", [self.run_id])
        if self.run.get("base_scenario_id") is not None:
            g = _q(self.con, "SELECT * FROM scenarios WHERE run_id = ? AND scenario_id = ?",
                   [self.run_id, self.run["base_scenario_id"]])
            if g.height:
                return g.row(0, named=True)
        return f.row(0, named=True) if f.height else None

    def _plane_filter(self) -> tuple[str, list[Any]]:
        """SQL keeping the x-y plane through the base scenario when other axes exist."""
        known = {"run_id", "scenario_id", "discount_rate", "real_rate", "inflation", "weight", "is_base",
                 "scenario_key"}
        others = [c for c in _columns(self.con, "scenarios") if c not in known]
        if not others or self.base is None:
            return "TRUE", []
        cond = " AND ".join(f"s.{_ident(c)} IS NOT DISTINCT FROM ?" for c in others)
        return cond, [self.base[c] for c in others]

    def levels(self, column: str) -> list[float]:
        rows = self.con.execute(
            f"SELECT DISTINCT s.{_ident(column)} FROM scenarios s WHERE s.run_id = ? AND "
            f"{self.plane_filter} AND s.{_ident(column)} IS NOT NULL ORDER BY 1",
            [self.run_id, *self.plane_params]).fetchall()
        return [r[0] for r in rows]


def _project_table(ctx: _Run, where: str, order: str, columns: str, params: Sequence[Any],
                   limit: int) -> tuple[pl.DataFrame, int]:
    base = (f"FROM project_summary ps LEFT JOIN projects p ON p.project_id = ps.project_id "
            f"WHERE ps.run_id = ? AND ({where})")
    count = ctx.con.execute(f"SELECT count(*) {base}", [ctx.run_id, *params]).fetchall()[0][0]
    frame = _q(ctx.con, f"SELECT {columns} {base} ORDER BY {order} LIMIT ?", [ctx.run_id, *params, limit])
    return frame, count


WEIGHTS_NOTE = ("Probability weights on the axes are the user's judgement, not a forecast; probabilities of "
                "acceptance and expected present worth are only as good as those weights.")
AFTER_TAX_NOTE = ("One income-tax rate per scenario applied to every taxable line in the year it arises; a "
                  "project's loss offsets the firm's other taxable income that year; the investment is "
                  "depreciated (fixed in then-current money, so inflation erodes the tax shield) and the gain "
                  "over book value at disposal is taxed at the ordinary rate. Tax law varies by jurisdiction "
                  "and year: screening only, not for filing.")


def _metadata(ctx: _Run) -> list[tuple[str, Any]]:
    run = ctx.run
    meta: list[tuple[str, Any]] = [("Run id", run["run_id"])]
    labels = [("status", "Status"), ("started_at", "Started"), ("finished_at", "Finished"),
              ("tool_version", "Tool version"), ("inputs_hash", "Hash of inputs"),
              ("discount_basis", "Discount rates given as"), ("timing", "Cash-flow timing"),
              ("periods_per_year", "Periods per year"), ("after_tax", "After tax")]
    for key, label in labels:
        if key in run and run[key] is not None:
            meta.append((label, run[key] if isinstance(run[key], (str, bool, int, float)) else str(run[key])))
    meta.append(("Projects screened", ctx.project_count))
    meta.append(("Scenarios", ctx.scenario_count))
    stats = ctx.con.execute(
        "SELECT min(discount_rate), max(discount_rate), count(DISTINCT discount_rate), "
        "min(real_rate), max(real_rate), min(inflation), max(inflation), count(DISTINCT inflation) "
        "FROM scenarios WHERE run_id = ?", [ctx.run_id]).fetchall()[0]
    if stats[0] is not None:
        meta.append(("Discount rate, nominal", f"{stats[0]:.2%} to {stats[1]:.2%} ({stats[2]} levels)"))
        if stats[3] is not None:
            meta.append(("Discount rate, real", f"{stats[3]:.2%} to {stats[4]:.2%}"))
        meta.append(("General inflation", f"{stats[5]:.2%} to {stats[6]:.2%} ({stats[7]} levels)"))
    if ctx.base is not None:
        meta.append(("Base scenario",
                     f"discount rate {ctx.base['discount_rate']:.2%} nominal, inflation {ctx.base['inflation']:.2%}"))
    meta.append(("Relation of rates", "exact Fisher relation (1 + nominal) = (1 + real)(1 + inflation)"))
    spec = run.get("grid_spec")
    if spec:
        try:
            parsed = json.loads(spec)
        except (TypeError, ValueError):
            parsed = None
        if isinstance(parsed, dict):
            for k, v in parsed.items():
                if k == "sources":
                    continue
                meta.append((f"Setting: {k}", v if isinstance(v, str) else json.dumps(v)))
            if parsed.get("weights"):
                meta.append(("Scenario weights", WEIGHTS_NOTE))
            if parsed.get("after_tax"):
                meta.append(("After-tax assumptions", AFTER_TAX_NOTE))
        else:
            meta.append(("Grid settings", str(spec)))
    if run.get("message"):
        meta.append(("Run message", run["message"]))
    return meta


def _headline_sections(ctx: _Run, top_n: int) -> tuple[list[Section], list[str]]:
    """Headline tables and the ids they suggest for drill-down."""
    cols = ("ps.project_id, p.name, ps.accept_share, ps.pw_base, ps.pw_min, ps.pw_max, ps.rank_base")
    secs: list[Section] = []
    suggest: list[str] = []

    acc, n_acc = _project_table(ctx, "ps.accept_share >= 1.0",
                                "ps.pw_base DESC NULLS LAST, ps.project_id", cols, [], top_n)
    secs.append(Section(
        "Accepted in every scenario",
        f"{n_acc:,} of {ctx.project_count:,} projects have present worth of at least zero in every "
        f"scenario of the grid. Shown: the {min(top_n, n_acc):,} with the highest base present worth.",
        table=acc))
    suggest += acc["project_id"].head(1).to_list()

    levels = ctx.levels("inflation")
    if len(levels) < 2:
        secs.append(Section("Fails under high inflation",
                            unavailable="Not available: the run has a single inflation level."))
    else:
        k = max(1, len(levels) // 4)
        low_max, high_min = levels[k - 1], levels[-k]
        sql = """
            WITH s AS (
                SELECT scenario_id,
                       CASE WHEN inflation <= ? THEN 'low' WHEN inflation >= ? THEN 'high' END AS band
                FROM scenarios WHERE run_id = ?),
            agg AS (
                SELECT r.project_id,
                       avg(CASE WHEN s.band = 'low' THEN CAST(r.accepted AS INTEGER) END) AS share_low,
                       avg(CASE WHEN s.band = 'high' THEN CAST(r.accepted AS INTEGER) END) AS share_high
                FROM {rows} r JOIN s ON s.scenario_id = r.scenario_id
                WHERE s.band IS NOT NULL
                GROUP BY r.project_id),
            hit AS (SELECT *, share_low - share_high AS drop FROM agg WHERE share_low - share_high >= 0.25)
            SELECT hit.project_id, p.name, hit.share_low, hit.share_high, hit.drop,
                   count(*) OVER () AS total
            FROM hit LEFT JOIN projects p ON p.project_id = hit.project_id
            ORDER BY hit.drop DESC, hit.share_low DESC, hit.project_id LIMIT ?"""
        rows, rows_params = ctx.rows()
        frame = _q(ctx.con, sql.replace("{rows}", rows), [low_max, high_min, ctx.run_id, *rows_params, top_n])
        total = int(frame["total"][0]) if frame.height else 0
        secs.append(Section(
            "Fails under high inflation",
            f"{total:,} project{'' if total == 1 else 's'} {'is' if total == 1 else 'are'} accepted in a share of scenarios at least 25 points lower when "
            f"inflation is high (at or above {high_min:.2%}) than when it is low (at or below "
            f"{low_max:.2%}), over the same discount rates. Shown: the {min(top_n, total):,} largest drops.",
            table=frame.drop("total")))
        suggest += frame["project_id"].head(1).to_list()

    movers, _ = _project_table(
        ctx, "ps.rank_max IS NOT NULL",
        "(ps.rank_max - ps.rank_min) DESC, ps.rank_median, ps.project_id",
        "ps.project_id, p.name, ps.rank_base, ps.rank_min, ps.rank_median, ps.rank_max, "
        "ps.rank_max - ps.rank_min AS rank_spread", [], top_n)
    secs.append(Section(
        "Rank movers",
        f"Projects whose rank by present worth (1 = highest) changes most across the scenarios. "
        f"Shown: the {movers.height:,} widest spreads.",
        table=movers))
    suggest += movers["project_id"].head(1).to_list()

    if "selections" in ctx.tables:
        denom_sql = ("SELECT count(DISTINCT scenario_id) FROM portfolios WHERE run_id = ?"
                     if "portfolios" in ctx.tables else
                     "SELECT count(*) FROM scenarios WHERE run_id = ?")
        n_port = ctx.con.execute(denom_sql, [ctx.run_id]).fetchall()[0][0] or 0
        if n_port == 0:
            secs.append(Section("Core portfolio", unavailable=NO_BUDGET))
        else:
            core = _q(ctx.con, """
                WITH sel AS (SELECT project_id, count(DISTINCT scenario_id) AS k
                             FROM selections WHERE run_id = ? GROUP BY project_id)
                SELECT sel.project_id, p.name, sel.k / ?::DOUBLE AS selected_share,
                       count(*) FILTER (WHERE sel.k >= ?) OVER () AS core_total
                FROM sel LEFT JOIN projects p ON p.project_id = sel.project_id
                ORDER BY selected_share DESC, sel.project_id LIMIT ?""",
                [ctx.run_id, n_port, n_port, top_n])
            n_core = int(core["core_total"][0]) if core.height else 0
            secs.append(Section(
                "Core portfolio",
                f"{n_core:,} projects are in the budget-limited portfolio in every one of the "
                f"{n_port:,} scenarios. Shown: the {core.height:,} projects selected most often.",
                table=core.drop("core_total")))
    else:
        secs.append(Section("Core portfolio", unavailable=NO_BUDGET))
    if "portfolios" in ctx.tables:
        pcols = set(_columns(ctx.con, "portfolios"))
        want = [c for c in ("objective", "lp_bound", "greedy_objective") if c in pcols]
        n_rows = ctx.con.execute("SELECT count(*) FROM portfolios WHERE run_id = ?", [ctx.run_id]).fetchall()[0][0]
        if want and n_rows:
            stat_rows = []
            for stat, fn in (("lowest", "min"), ("median", "median"), ("highest", "max")):
                vals = ctx.con.execute(
                    "SELECT " + ", ".join(f"{fn}({_ident(c)})" for c in want)
                    + " FROM portfolios WHERE run_id = ?", [ctx.run_id]).fetchall()[0]
                stat_rows.append({"statistic": stat, **dict(zip(want, vals))})
            secs.append(Section(
                "Budget-limited portfolio across scenarios",
                "Total present worth of the optimal portfolio (0-1 integer program), its "
                "LP-relaxation bound and the profitability-index greedy answer, over all scenarios.",
                table=pl.DataFrame(stat_rows, infer_schema_length=None)))
    return secs, suggest


def _drill_projects(ctx: _Run, projects: Sequence[str] | None, suggested: list[str]) -> list[str]:
    if projects is not None:
        ids = list(dict.fromkeys(str(p) for p in projects))
        if len(ids) > MAX_DRILL_PROJECTS:
            raise ReportError(f"at most {MAX_DRILL_PROJECTS} projects can be drilled into; got {len(ids)}. "
                              "Pick fewer with --project.")
        found = {r[0] for r in ctx.con.execute(
            "SELECT project_id FROM project_summary WHERE run_id = ? AND list_contains(?, project_id)",
            [ctx.run_id, ids]).fetchall()}
        missing = [p for p in ids if p not in found]
        if missing:
            raise ReportError(f"project(s) {missing} are not in run {ctx.run_id!r}; "
                              "check the ids with `ratescape query`.")
        return ids
    ids = list(dict.fromkeys(str(p) for p in suggested if p is not None))
    if len(ids) < 3:
        more = ctx.con.execute(
            "SELECT project_id FROM project_summary WHERE run_id = ? "
            "ORDER BY pw_base DESC NULLS LAST, project_id LIMIT 3", [ctx.run_id]).fetchall()
        ids = list(dict.fromkeys(ids + [r[0] for r in more]))
    return ids[:4]


def _portfolio_chart_sections(ctx: _Run, top_n: int) -> list[Section]:
    secs = []
    top = _q(ctx.con, """
        SELECT ps.project_id, p.name, ps.accept_share FROM project_summary ps
        LEFT JOIN projects p ON p.project_id = ps.project_id WHERE ps.run_id = ?
        ORDER BY ps.accept_share DESC NULLS LAST, ps.pw_base DESC NULLS LAST, ps.project_id LIMIT ?""",
             [ctx.run_id, top_n])
    secs.append(Section("Acceptance share by project",
                        f"The {top.height:,} projects accepted in the largest share of scenarios "
                        f"(of {ctx.project_count:,}).",
                        chart=charts.acceptance_share_bars(top)))
    if ctx.narrow:   # aggregate by scenario key, on the narrow rows alone
        by_scen = _q(ctx.con, f"""
            WITH a AS (SELECT x.scenario_key, avg(CAST(x.present_worth >= 0 AS INTEGER)) AS accept_share
                       FROM result_rows x
                       WHERE x.scenario_key IN (SELECT scenario_key FROM scenarios WHERE run_id = ?)
                       GROUP BY x.scenario_key)
            SELECT s.{_ident(ctx.y)} AS inflation, s.{_ident(ctx.x)} AS series, a.accept_share
            FROM a JOIN scenarios s ON s.run_id = ? AND s.scenario_key = a.scenario_key
            WHERE {ctx.plane_filter}""", [ctx.run_id, ctx.run_id, *ctx.plane_params])
    else:
        by_scen = _q(ctx.con, f"""
            WITH a AS (SELECT scenario_id, avg(CAST(accepted AS INTEGER)) AS accept_share
                       FROM results WHERE run_id = ? GROUP BY scenario_id)
            SELECT s.{_ident(ctx.y)} AS inflation, s.{_ident(ctx.x)} AS series, a.accept_share
            FROM a JOIN scenarios s ON s.run_id = ? AND s.scenario_id = a.scenario_id
            WHERE {ctx.plane_filter}""", [ctx.run_id, ctx.run_id, *ctx.plane_params])
    series_levels = _thin(sorted(by_scen["series"].unique().to_list()), 21)
    by_scen = by_scen.filter(pl.col("series").is_in(series_levels)).rename({"series": ctx.x})
    secs.append(Section("Acceptance against inflation",
                        "Share of all projects accepted, by inflation, one line per discount rate.",
                        chart=charts.acceptance_vs_inflation(by_scen, series=ctx.x)))
    ranks = _q(ctx.con, """
        SELECT ps.project_id, p.name, ps.rank_min, ps.rank_median, ps.rank_max, ps.rank_base
        FROM project_summary ps LEFT JOIN projects p ON p.project_id = ps.project_id
        WHERE ps.run_id = ? AND ps.rank_median IS NOT NULL
        ORDER BY ps.rank_median, ps.project_id LIMIT ?""", [ctx.run_id, top_n])
    secs.append(Section("Rank stability",
                        f"Best, median and worst rank of the {ranks.height:,} projects with the best median rank.",
                        chart=charts.rank_intervals(ranks)))
    if "selections" in ctx.tables:
        n_port = ctx.con.execute(
            "SELECT count(DISTINCT scenario_id) FROM portfolios WHERE run_id = ?" if "portfolios" in ctx.tables
            else "SELECT count(*) FROM scenarios WHERE run_id = ?", [ctx.run_id]).fetchall()[0][0] or 0
        if not n_port:
            secs.append(Section("Selection share in the budget-limited portfolio", unavailable=NO_BUDGET))
        else:
            sel = _q(ctx.con, """
                SELECT s.project_id, p.name, count(DISTINCT s.scenario_id) / ?::DOUBLE AS selected_share
                FROM selections s LEFT JOIN projects p ON p.project_id = s.project_id
                WHERE s.run_id = ? GROUP BY s.project_id, p.name
                ORDER BY selected_share DESC, s.project_id LIMIT ?""", [n_port, ctx.run_id, top_n])
            secs.append(Section("Selection share in the budget-limited portfolio",
                                chart=charts.selection_share_bars(sel)))
    else:
        secs.append(Section("Selection share in the budget-limited portfolio", unavailable=NO_BUDGET))
    return secs


def _drill_sections(ctx: _Run, ids: list[str]) -> list[Section]:
    secs: list[Section] = []
    if not ids:
        return secs
    x, y = ctx.x, ctx.y
    xs_all, ys_all = ctx.levels(x), ctx.levels(y)
    names = dict(ctx.con.execute(
        "SELECT project_id, name FROM projects WHERE list_contains(?, project_id)", [ids]).fetchall())
    # worth curves: every x level, up to MAX_CURVE_LINES inflation levels
    curve_ys = _thin(ys_all, MAX_CURVE_LINES)
    rows, rows_params = ctx.rows(projects=ids)
    curve = _q(ctx.con, f"""
        SELECT r.project_id, p.name, s.{_ident(x)} AS {_ident(x)}, s.inflation, r.present_worth
        FROM {rows} r JOIN scenarios s ON s.run_id = ? AND s.scenario_id = r.scenario_id
        LEFT JOIN projects p ON p.project_id = r.project_id
        WHERE list_contains(?, s.inflation) AND {ctx.plane_filter}
        ORDER BY r.project_id, s.inflation, s.{_ident(x)}""",
               [*rows_params, ctx.run_id, curve_ys, *ctx.plane_params])
    irr = None
    irr_col = "irr_real" if x == "real_rate" else "irr_nominal"
    # irr_roots holds every root of streams with several; irr_results one row per inflation level
    irr_table = None
    for t in ("irr_roots", "irr_results"):
        if t in ctx.tables and {"run_id", "project_id", "inflation", irr_col} <= set(_columns(ctx.con, t)):
            n_rows = ctx.con.execute(f"SELECT count(*) FROM {t} WHERE run_id = ? AND list_contains(?, project_id)",
                                     [ctx.run_id, ids]).fetchall()[0][0]
            if n_rows:
                irr_table = t
                break
    if irr_table is not None:
        irr = _q(ctx.con, f"""
            SELECT project_id, inflation, {irr_col} FROM {irr_table}
            WHERE run_id = ? AND list_contains(?, project_id) AND list_contains(?, inflation)
              AND {irr_col} IS NOT NULL""", [ctx.run_id, ids, curve_ys])
    secs.append(Section(
        "Present worth against the discount rate",
        "Drill-down projects: " + ", ".join(f"{names.get(i) or i} ({i})" for i in ids)
        + ". Pick a project in the list under the chart. Each line is one inflation level; "
        "diamonds mark the IRR at that inflation (several diamonds on one line mean several IRRs; "
        "an IRR outside the range of discount rates screened is not drawn).",
        chart=charts.worth_curve(curve, irr, x=x, irr_column=irr_col),
        notes=[] if irr is not None else ["IRR marks not available: no IRR rows for these projects."]))
    # surfaces: thinned to MAX_SURFACE_POINTS grid points
    keep = max(2, int(math.sqrt(MAX_SURFACE_POINTS)))
    sx, sy = _thin(xs_all, keep), _thin(ys_all, keep)
    surf = _q(ctx.con, f"""
        SELECT r.project_id, s.{_ident(x)} AS {_ident(x)}, s.inflation, r.present_worth
        FROM {rows} r JOIN scenarios s ON s.run_id = ? AND s.scenario_id = r.scenario_id
        WHERE list_contains(?, s.{_ident(x)}) AND list_contains(?, s.inflation) AND {ctx.plane_filter}""",
              [*rows_params, ctx.run_id, sx, sy, *ctx.plane_params])
    for pid in ids:
        one = surf.filter(pl.col("project_id") == pid).drop("project_id")
        label = f"{names.get(pid) or pid} ({pid})"
        if len(sx) < 2 or len(sy) < 2 or one.height == 0:
            secs.append(Section(f"Present worth surface: {label}", level=3,
                                unavailable="Not available: the grid needs at least two levels on each axis."))
            continue
        secs.append(Section(f"Present worth surface: {label}", level=3,
                            text="Colour shows present worth (blue above zero, orange-red below, pale near zero); "
                                 "black lines join scenarios of equal present worth.",
                            chart=charts.worth_surface(one, x=x, y=y,
                                                       title=f"Present worth of {label}")))
    return secs


def _decision_sections(ctx: _Run, ids: list[str]) -> list[Section]:
    title = "Decision maps for mutually exclusive alternatives"
    if "group_decisions" not in ctx.tables:
        return [Section(title, unavailable=NO_GROUPS)]
    groups = [r[0] for r in ctx.con.execute("""
        SELECT g.group_name FROM (SELECT DISTINCT group_name FROM group_decisions WHERE run_id = ?) g
        ORDER BY (SELECT count(*) FROM projects p WHERE p.group_name = g.group_name
                  AND list_contains(?, p.project_id)) DESC, g.group_name LIMIT ?""",
        [ctx.run_id, ids, MAX_GROUPS]).fetchall()]
    if not groups:
        return [Section(title, unavailable=NO_GROUPS)]
    x, y = ctx.x, ctx.y
    keep = max(2, int(math.sqrt(MAX_SURFACE_POINTS)))
    sx, sy = _thin(ctx.levels(x), keep), _thin(ctx.levels(y), keep)
    gcols = set(_columns(ctx.con, "group_decisions"))
    runner = "g.runner_up" if "runner_up" in gcols else "NULL"
    secs = [Section(title, "Each cell is coloured by the alternative with the highest present worth; "
                           "the black line is the indifference frontier, found by root finding; "
                           "hover for the margin over the runner-up. Click a legend entry to highlight it.")]
    for group in groups:
        cells = _q(ctx.con, f"""
            SELECT s.{_ident(x)} AS {_ident(x)}, s.inflation AS inflation, g.preferred, {runner} AS runner_up, g.margin
            FROM group_decisions g JOIN scenarios s ON s.run_id = g.run_id AND s.scenario_id = g.scenario_id
            WHERE g.run_id = ? AND g.group_name = ? AND list_contains(?, s.{_ident(x)})
              AND list_contains(?, s.inflation) AND {ctx.plane_filter}""",
                   [ctx.run_id, group, sx, sy, *ctx.plane_params])
        frontier = None
        note = []
        if "frontiers" in ctx.tables:
            fr = _q(ctx.con, """
                SELECT alternative_a, alternative_b, segment, point, x, y FROM frontiers
                WHERE run_id = ? AND group_name = ? AND x_axis = ? AND y_axis = ?
                ORDER BY alternative_a, alternative_b, segment, point""", [ctx.run_id, group, x, y])
            frontier = fr if fr.height else None
            if frontier is None:
                note.append(f"No frontier on the {x} x {y} plane for this group.")
        else:
            note.append("Frontier lines not available: no frontiers table.")
        if cells.height == 0:
            secs.append(Section(f"Group {group}", level=3, unavailable="No decisions recorded."))
            continue
        secs.append(Section(f"Group {group}", level=3, notes=note,
                            chart=charts.decision_map(cells, frontier, x=x, y=y,
                                                      title=f"Preferred alternative in group {group}")))
    return secs


def _sensitivity_sections(ctx: _Run, ids: list[str]) -> list[Section]:
    title = "One-at-a-time sensitivity"
    tor = sp = None
    if "sensitivity" in ctx.tables:
        cols = set(_columns(ctx.con, "sensitivity"))
        base_col = next((c for c in ("worth_base", "base_worth") if c in cols), None)
        if base_col and {"input", "worth_low", "worth_high"} <= cols:
            tor = _q(ctx.con, f"""
                SELECT t.project_id, p.name, t.input, t.worth_low, t.worth_high, t.{base_col} AS base_worth
                FROM sensitivity t LEFT JOIN projects p ON p.project_id = t.project_id
                WHERE t.run_id = ? AND list_contains(?, t.project_id)
                  AND t.worth_low IS NOT NULL AND t.worth_high IS NOT NULL
                ORDER BY t.project_id, t.input""", [ctx.run_id, ids])
    # spider rows: `spider(input, change, present_worth)`, or long-form sensitivity with pct_change
    for table, change in (("spider", "change"), ("spider", "pct_change"), ("sensitivity", "pct_change")):
        if table in ctx.tables and {"input", change, "present_worth"} <= set(_columns(ctx.con, table)):
            sp = _q(ctx.con, f"""
                SELECT t.project_id, p.name, t.input, t.{change} AS pct_change, t.present_worth
                FROM {table} t LEFT JOIN projects p ON p.project_id = t.project_id
                WHERE t.run_id = ? AND list_contains(?, t.project_id)
                ORDER BY t.project_id, t.input, t.{change}""", [ctx.run_id, ids])
            break
    have_tor = tor is not None and tor.height > 0
    have_sp = sp is not None and sp.height > 0
    if not have_tor and not have_sp:
        return [Section(title, unavailable=NO_SENSITIVITY)]
    secs = [Section(title, "Each input moved on its own, the others held at their base values, "
                           "for the drill-down projects.")]
    secs.append(Section("Tornado", level=3, chart=charts.tornado(tor)) if have_tor else
                Section("Tornado", level=3, unavailable="Not available for these projects."))
    secs.append(Section("Spider", level=3, chart=charts.spider(sp)) if have_sp else
                Section("Spider", level=3, unavailable="Not available for these projects."))
    return secs


def report_sections(
    con: duckdb.DuckDBPyConnection,
    run_id: str | None = None,
    projects: Sequence[str] | None = None,
    *,
    top_n: int = 25,
) -> tuple[str, list[tuple[str, Any]], list[Section]]:
    """Query an open results database and build the report's parts.

    Parameters
    ----------
    con : duckdb connection
        Preferably read-only.
    run_id : str, optional
        Defaults to the latest finished run.
    projects : sequence of str, optional
        Project ids to drill into (at most :data:`MAX_DRILL_PROJECTS`);
        by default the leading project of each headline table.
    top_n : int
        Rows of each headline table and bars of each portfolio chart.

    Returns
    -------
    (title, metadata, sections)

    Raises
    ------
    ReportError
        When a required table is missing, the run does not exist or is not
        finished, or a requested project is not in the run.
    """
    if top_n < 1:
        raise ReportError(f"top_n must be at least 1, got {top_n}")
    present = _tables(con)
    missing = [t for t in ("runs", "scenarios", "results", "project_summary", "projects") if t not in present]
    if missing:
        raise ReportError(f"the database lacks table(s) {missing}; run `ratescape screen` on it first")
    ctx = _Run(con, _pick_run(con, run_id))
    headline, suggested = _headline_sections(ctx, top_n)
    ids = _drill_projects(ctx, projects, suggested)
    sections = [
        Section("Headlines", "Tables list the leading projects only; the database holds every result."),
        *headline,
        Section("Portfolio charts"),
        *_portfolio_chart_sections(ctx, top_n),
        Section("Drill-down projects",
                "Projects chosen " + ("by the reader." if projects is not None else
                                      "automatically: the leading project of each headline table.")),
        *_drill_sections(ctx, ids),
        *_decision_sections(ctx, ids),
        *_sensitivity_sections(ctx, ids),
    ]
    title = f"ratescape screening report: run {ctx.run_id}"
    return title, _metadata(ctx), sections


def write_report(
    db_path: str | Path,
    out_path: str | Path,
    run_id: str | None = None,
    projects: Sequence[str] | None = None,
    *,
    top_n: int = 25,
) -> Path:
    """Write the offline HTML report of one run.

    Parameters
    ----------
    db_path : str or Path
        The results database; opened read-only.
    out_path : str or Path
        The HTML file to write.
    run_id : str, optional
        Defaults to the latest finished run.
    projects : sequence of str, optional
        Project ids for the drill-down charts (at most
        :data:`MAX_DRILL_PROJECTS`).
    top_n : int
        Rows of each headline table.

    Returns
    -------
    Path
        ``out_path``.

    Raises
    ------
    ReportError
        See :func:`report_sections`; also when ``db_path`` does not exist.

    Notes
    -----
    All aggregation runs in DuckDB; only top-N tables, one row per scenario
    for the portfolio chart and the drill-down projects' grids reach
    Python, so the file size does not grow with the number of projects.
    """
    db = Path(db_path)
    if not db.exists():
        raise ReportError(f"no database at {db}; create one with `ratescape load` and `ratescape screen`")
    con = duckdb.connect(str(db), read_only=True)
    try:
        title, meta, sections = report_sections(con, run_id, projects, top_n=top_n)
    finally:
        con.close()
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    page = build_report_html(sections, title=title, metadata=meta,
                             subtitle=f"Written {stamp} from {db.name}.")
    out = Path(out_path)
    # write next to the target and rename: an interrupted write never leaves a partial page
    tmp = out.with_name(f".{out.name}.{os.getpid()}.tmp")
    try:
        tmp.write_text(page, encoding="utf-8")
        os.replace(tmp, out)
    finally:
        if tmp.exists():
            tmp.unlink()
    return out


CHART_KINDS = {
    "acceptance-share": ("portfolio", "Acceptance share by project"),
    "acceptance-vs-inflation": ("portfolio", "Acceptance against inflation"),
    "rank-stability": ("portfolio", "Rank stability"),
    "selection-share": ("portfolio", "Selection share in the budget-limited portfolio"),
    "worth-curve": ("drill", "Present worth against the discount rate"),
    "worth-surface": ("drill", "Present worth surface"),
    "decision-map": ("decision", "Group "),
    "tornado": ("sensitivity", "Tornado"),
    "spider": ("sensitivity", "Spider"),
}


def write_chart(db_path: str | Path, kind: str, out_path: str | Path, *, run_id: str | None = None,
                projects: Sequence[str] | None = None, group: str | None = None, top_n: int = 25) -> Path:
    """Write one chart of a run to ``out_path`` (.html offline, .png, .svg or .json).

    ``kind`` is one of :data:`CHART_KINDS`; drill-down kinds take ``projects``,
    ``decision-map`` takes ``group``.
    """
    if kind not in CHART_KINDS:
        raise ReportError(f"unknown chart kind {kind!r}; use one of: {', '.join(CHART_KINDS)}")
    stage, title = CHART_KINDS[kind]
    con = duckdb.connect(str(db_path), read_only=True)
    try:
        ctx = _Run(con, _pick_run(con, run_id))
        if stage == "portfolio":
            sections = _portfolio_chart_sections(ctx, top_n)
        else:
            _, suggested = _headline_sections(ctx, top_n)
            ids = _drill_projects(ctx, projects, suggested)
            if stage == "drill":
                sections = _drill_sections(ctx, ids[:1])
            elif stage == "decision":
                sections = _decision_sections(ctx, ids)
                if group is not None:
                    title = f"Group {group}"
            else:
                sections = _sensitivity_sections(ctx, ids[:1])
        for sec in sections:
            if sec.chart is not None and sec.title.startswith(title):
                charts.save_chart(sec.chart, out_path)
                return Path(out_path)
        why = next((s.unavailable for s in sections if s.title.startswith(title) and s.unavailable), None)
        raise ReportError(f"no {kind} chart for this run" + (f": {why}" if why else
                          (f" (group {group!r} not found)" if group else "")))
    finally:
        con.close()
