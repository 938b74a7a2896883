"""The decision brief (first on the page) and the assumptions in plain sentences.

Every statement of the brief links to the section that details it. The assumptions section states
the grid, bases, timing, tax and weights in sentences, then every row of ``run_notes`` (notes other
stages write: the comparison basis of alternatives, loans, tax), and keeps the raw settings in a
collapsed block.
"""
from __future__ import annotations

import json
from typing import Any

import polars as pl

from ratescape.report.escaping import escape_html
from ratescape.report.page import Section, format_cell
from ratescape.report.run_data import RunContext, bundled_sql, query_frame

#: Default parameters of "fails under high inflation" (the same as queries/fails-above-inflation.sql).
FAIL_THRESHOLD = 0.05
FAIL_MIN_DROP = 0.25


def fail_threshold(levels: list[float]) -> float | None:
    """The inflation threshold for this grid: :data:`FAIL_THRESHOLD` when levels lie on both sides of
    it, else the middle level (so both sides hold scenarios); None for a single level.

    >>> fail_threshold([0.0, 0.05, 0.1]), fail_threshold([0.0, 0.01, 0.02, 0.03])
    (0.05, 0.01)
    """
    if len(levels) < 2:
        return None
    if levels[0] <= FAIL_THRESHOLD < levels[-1]:
        return FAIL_THRESHOLD
    return levels[(len(levels) - 1) // 2]


def fails_under_high_inflation(ctx: RunContext, threshold: float, min_drop: float = FAIL_MIN_DROP) -> pl.DataFrame:
    """The projects of queries/fails-above-inflation.sql (its one definition), run on this run.

    Kept on ``ctx`` per (threshold, min_drop): the headlines and the brief read the same list, and on
    a large run the query scans every result row (about 7 s at 100,000 projects x 2,601 scenarios).
    """
    cache = ctx.__dict__.setdefault("_fails_cache", {})
    key = (float(threshold), float(min_drop))
    if key not in cache:
        sql = bundled_sql("fails-above-inflation")
        cache[key] = ctx.con.sql(sql, params={"run": ctx.run_id, "threshold": threshold,
                                              "min_drop": min_drop}).pl()
    return cache[key]


def fails_definition(threshold: float, min_drop: float = FAIL_MIN_DROP) -> str:
    return (f"A project fails under high inflation when the share of scenarios in which it is accepted with "
            f"inflation above {threshold:.2%} is at least {min_drop:.0%} points lower than its share with "
            f"inflation at or below {threshold:.2%} (the definition of the bundled query "
            f"fails-above-inflation, threshold={threshold:g}, min_drop={min_drop:g}).")


def budget_facts(ctx: RunContext) -> dict[str, Any] | None:
    if "portfolios" not in ctx.tables:
        return None
    row = ctx.con.execute("""SELECT count(*), min(objective), median(objective), max(objective),
                                    avg(1 - greedy_objective / nullif(objective, 0)),
                                    max(1 - greedy_objective / nullif(objective, 0))
                             FROM portfolios WHERE run_id = ? AND objective IS NOT NULL""", [ctx.run_id]).fetchall()[0]
    if not row[0]:
        return None
    core = 0
    if "portfolio_summary" in ctx.tables:
        core = ctx.con.execute("SELECT count(*) FROM portfolio_summary WHERE run_id = ? AND in_core",
                               [ctx.run_id]).fetchall()[0][0]
    return {"scenarios": row[0], "lo": row[1], "median": row[2], "hi": row[3], "greedy_loss": row[4],
            "greedy_loss_max": row[5], "core": core}


def group_changes(ctx: RunContext) -> pl.DataFrame:
    """Groups whose preferred alternative changes across the scenarios, with each alternative's share."""
    if "group_decisions" not in ctx.tables:
        return pl.DataFrame(schema={"group_name": pl.String, "alternatives": pl.String})
    return query_frame(ctx.con, """
        WITH c AS (SELECT group_name, preferred, count(*) AS n, sum(count(*)) OVER (PARTITION BY group_name) AS total
                   FROM group_decisions WHERE run_id = ? GROUP BY group_name, preferred),
        g AS (SELECT group_name FROM c GROUP BY group_name HAVING count(*) > 1)
        SELECT c.group_name,
               string_agg(coalesce(p.name || ' (' || c.preferred || ')', c.preferred) || ': '
                          || CAST(round(100.0 * c.n / c.total) AS INTEGER) || ' %', '; '
                          ORDER BY c.n DESC, c.preferred) AS alternatives
        FROM c JOIN g USING (group_name) LEFT JOIN run_project_names p ON p.run_id = ? AND p.project_id = c.preferred
        GROUP BY c.group_name ORDER BY c.group_name""", [ctx.run_id, ctx.run_id])


def _li(text: str, href: str | None) -> str:
    link = f' <a href="#{escape_html(href)}">Details</a>' if href else ""
    return f"<li>{escape_html(text)}{link}</li>"


def brief_section(ctx: RunContext, *, counts: dict[str, int], budget: dict[str, Any] | None,
                  groups: pl.DataFrame, fails: pl.DataFrame | None, threshold: float | None,
                  embedded_note: str) -> Section:
    """The decision brief: short statements, each linking to its section."""
    n = ctx.project_count
    items = [_li(f"Of {n:,} projects, {counts['every']:,} are accepted (present worth at least zero) in every "
                 f"one of the {ctx.scenario_count:,} scenarios, {counts['none']:,} in none, and "
                 f"{counts['some']:,} depend on the scenario.", "headlines")]
    if budget:
        items.append(_li(
            f"What the budget buys: the best budget-limited portfolio is worth {_money(budget['lo'])} to "
            f"{_money(budget['hi'])} (median {_money(budget['median'])}) across {budget['scenarios']:,} scenarios; "
            f"{budget['core']:,} projects are in it in every scenario (the core portfolio); ranking by "
            f"profitability index alone loses {budget['greedy_loss']:.1%} of that worth on average "
            f"(up to {budget['greedy_loss_max']:.1%}).", "budget"))
    else:
        items.append(_li("No budget was set for this run, so there is no budget-limited portfolio.", None))
    if groups.height:
        items.append(_li(f"{groups.height:,} group(s) of alternatives change their preferred choice across the "
                         "scenarios: " + " | ".join(f"{g}: {a}" for g, a in groups.iter_rows())
                         + " (share of scenarios in which each is preferred).", "decision-maps"))
    elif "group_decisions" in ctx.tables:
        items.append(_li("No group of alternatives changes its preferred choice across the scenarios.", "decision-maps"))
    if fails is not None and threshold is not None:
        names = ", ".join(f"{nm or pid} ({pid})" for pid, nm in fails.select("project_id", "name").head(5).iter_rows())
        items.append(_li(f"{fails.height:,} project(s) fail when inflation is above {threshold:.2%}"
                         + (f", among them {names}" if names else "") + ". " + fails_definition(threshold),
                         "fails-high-inflation"))
    items.append(_li("Pick any scenario in the scenario explorer, or any project in the project search.", "explorer"))
    items.append(_li(embedded_note, None))
    return Section("Decision brief", html=f'<ul class="brief">{"".join(items)}</ul>', anchor="decision-brief")


def _money(v: float | None) -> str:
    if v is None:
        return "—"
    a = abs(v)
    if a >= 1e6:
        return f"{v / 1e6:,.1f} million"
    if a >= 1e3:
        return f"{v / 1e3:,.1f} thousand"
    return f"{v:,.0f}"


def assumption_sentences(ctx: RunContext) -> list[str]:
    run, base = ctx.run, ctx.base
    basis = str(run.get("discount_basis") or "nominal")
    st = ctx.con.execute("""SELECT min(discount_rate), max(discount_rate), count(DISTINCT discount_rate),
                                   min(real_rate), max(real_rate), count(DISTINCT real_rate),
                                   min(inflation), max(inflation), count(DISTINCT inflation),
                                   count(*) FILTER (WHERE real_rate < 0)
                            FROM scenarios WHERE run_id = ?""", [ctx.run_id]).fetchall()[0]
    out = []
    if basis == "real":
        out.append(f"Discount rates are real rates (above inflation), from {st[3]:.2%} to {st[4]:.2%} in {st[5]} "
                   f"steps; the nominal rate of each scenario follows from the Fisher relation "
                   f"(1 + nominal) = (1 + real)(1 + inflation).")
    else:
        out.append(f"Discount rates are nominal (market) rates, from {st[0]:.2%} to {st[1]:.2%} in {st[2]} steps; "
                   f"the real rate of each scenario follows from the Fisher relation (1 + nominal) = "
                   f"(1 + real)(1 + inflation).")
    out.append(f"General inflation runs from {st[6]:.2%} to {st[7]:.2%} a year in {st[8]} steps; "
               f"{ctx.scenario_count:,} scenarios in all.")
    if st[9]:
        out.append(f"{st[9]:,} scenarios have a real discount rate below zero (inflation above the nominal rate); "
                   "the explorer and the charts mark them.")
    if base is not None:
        if str(run.get("discount_basis")) == "real":   # a real-basis run is described in real rates
            out.append(f"The base scenario is a real discount rate of {base['real_rate']:.2%} "
                       f"(nominal {base['discount_rate']:.2%}) with inflation of {base['inflation']:.2%}.")
        else:
            out.append(f"The base scenario is a nominal discount rate of {base['discount_rate']:.2%} "
                       f"(real {base['real_rate']:.2%}) with inflation of {base['inflation']:.2%}.")
    timing = {"end": "at the end of each period", "mid": "in the middle of each period",
              "beginning": "at the beginning of each period"}.get(str(run.get("timing")), str(run.get("timing")))
    out.append(f"Cash flows fall {timing}, {run.get('periods_per_year') or 1:g} period(s) a year.")
    out.append("Figures are after income tax." if run.get("after_tax") else
               "Figures are before income tax.")
    spec = _grid_spec(run)
    if spec.get("weights"):
        out.append("Scenario weights are the user's judgement, not a forecast; shares weighted by them are only "
                   "as good as those weights.")
    out.append("A project is accepted in a scenario when its present worth is at least zero.")
    return out


def _grid_spec(run: dict[str, Any]) -> dict[str, Any]:
    try:
        parsed = json.loads(run.get("grid_spec") or "{}")
    except (TypeError, ValueError):
        return {}
    return parsed if isinstance(parsed, dict) else {}


def assumptions_section(ctx: RunContext, raw: list[tuple[str, Any]]) -> Section:
    """Plain sentences, every ``run_notes`` row, and the raw settings collapsed."""
    parts = ["<ul>" + "".join(f"<li>{escape_html(t)}</li>" for t in assumption_sentences(ctx)) + "</ul>"]
    notes = []
    if "run_notes" in ctx.tables:
        notes = ctx.con.execute("SELECT topic, note FROM run_notes WHERE run_id = ? ORDER BY topic",
                                [ctx.run_id]).fetchall()
    if notes:
        parts.append("<p>Notes this run states:</p><ul class=\"run-notes\">" + "".join(
            f"<li><strong>{escape_html(t.replace('_', ' ').capitalize())}:</strong> {escape_html(n)}</li>"
            for t, n in notes) + "</ul>")
    rows = "".join(f"<tr><th>{escape_html(k)}</th><td>{escape_html(v if isinstance(v, str) else format_cell('', v)[0])}</td></tr>"
                   for k, v in raw)
    parts.append(f'<details class="raw"><summary>Raw settings of the run</summary><table>{rows}</table></details>')
    return Section("Assumptions", html="".join(parts), anchor="assumptions")
