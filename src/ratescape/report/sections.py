"""The sections of the report: headlines, portfolio charts, project drill-downs, decision maps and
sensitivity, each a :class:`~ratescape.report.page.Section` built from small aggregates.
"""
from __future__ import annotations

import json
import math
from collections.abc import Sequence
from typing import Any

import duckdb
import polars as pl

from ratescape.report import charts
from ratescape.report.brief import (
    assumptions_section,
    brief_section,
    budget_facts,
    fail_threshold,
    fails_definition,
    fails_under_high_inflation,
    group_changes,
)
from ratescape.report.chart_style import INPUT_LABELS, discount_rate_label, run_basis, sensitivity_input_label
from ratescape.report.drill_charts import drill_templates
from ratescape.report.explorer import explorer_data
from ratescape.report.explorer_script import explorer_html, search_html
from ratescape.report.page import Section
from ratescape.report.run_data import (
    ReportError,
    RunContext,
    column_names,
    pick_run,
    project_table,
    query_frame,
    quote_ident,
    table_names,
    thin_levels,
)

#: Most drill-down projects a report carries (each adds one surface chart).
MAX_DRILL_PROJECTS = 8


#: Most grid points of one drill-down surface; larger grids are thinned evenly.
MAX_SURFACE_POINTS = 10_000


#: Most lines (levels of the second axis) in a worth curve.
MAX_CURVE_LINES = 11


#: Most mutually exclusive groups drawn as decision maps.
MAX_GROUPS = 8


NO_BUDGET = "Not available: this run has no budget-limited portfolios."


NO_GROUPS = "Not available: this run has no groups of mutually exclusive alternatives."


NO_SENSITIVITY = "Not available: this run has no one-at-a-time sensitivity results."


WEIGHTS_NOTE = ("Probability weights on the axes are the user's judgement, not a forecast; probabilities of "
                "acceptance and expected present worth are only as good as those weights.")


AFTER_TAX_NOTE = ("One income-tax rate per scenario applied to every taxable line in the year it arises; a "
                  "project's loss offsets the firm's other taxable income that year; the investment is "
                  "depreciated (fixed in then-current money, so inflation erodes the tax shield) and the gain "
                  "over book value at disposal is taxed at the ordinary rate. Tax law varies by jurisdiction "
                  "and year: screening only, not for filing.")


def run_metadata(ctx: RunContext) -> list[tuple[str, Any]]:
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
        if run_basis(run) == "real" and ctx.base.get("real_rate") is not None:
            rate = (f"{discount_rate_label('real')} {ctx.base['real_rate']:.2%} "
                    f"(nominal {ctx.base['discount_rate']:.2%})")
        else:
            rate = f"{discount_rate_label('nominal')} {ctx.base['discount_rate']:.2%}"
        meta.append(("Base scenario", f"{rate}, inflation {ctx.base['inflation']:.2%}"))
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


def _least_cost_section(ctx: RunContext, top_n: int) -> list[Section]:
    """Groups of cost-only alternatives: a least-cost choice, not candidates to accept or reject."""
    if "group_decisions" not in ctx.tables or "least_cost" not in set(column_names(ctx.con, "group_decisions")):
        return []
    frame = query_frame(ctx.con, """
        SELECT group_name, preferred, count(*) AS scenarios, any_value(basis) AS basis
        FROM group_decisions WHERE run_id = ? AND least_cost
        GROUP BY group_name, preferred ORDER BY group_name, scenarios DESC, preferred LIMIT ?""", [ctx.run_id, top_n])
    if frame.height == 0:
        return []
    return [Section("Least-cost choices",
                    "Groups whose alternatives are all cost-only (no benefit lines): the choice is the least "
                    "life-cycle cost among them, not whether to accept; their negative worths and low ranks are "
                    "costs, not rejections. Ratios, IRR, MIRR, PI and payback do not exist for them (stored empty, "
                    "measure_status 'cost-only').", table=frame)]


def _headline_sections(ctx: RunContext, top_n: int) -> tuple[list[Section], list[str]]:
    """Headline tables and the ids they suggest for drill-down."""
    cols = ("ps.project_id, p.name, ps.accept_share, ps.pw_base, ps.pw_min, ps.pw_max, ps.rank_base")
    secs: list[Section] = []
    suggest: list[str] = []

    acc, n_acc = project_table(ctx, "ps.accept_share >= 1.0",
                                "ps.pw_base DESC NULLS LAST, ps.project_id", cols, [], top_n)
    secs.append(Section(
        "Accepted in every scenario",
        f"{n_acc:,} of {ctx.project_count:,} projects have present worth of at least zero in every "
        f"scenario of the grid. Shown: the {min(top_n, n_acc):,} with the highest base present worth.",
        table=acc, anchor="accepted-everywhere"))
    suggest += acc["project_id"].head(1).to_list()
    secs += _least_cost_section(ctx, top_n)

    levels = ctx.levels("inflation")
    threshold = fail_threshold(levels)
    if threshold is None:
        secs.append(Section("Fails under high inflation", anchor="fails-high-inflation",
                            unavailable="Not available: the run has a single inflation level."))
    else:
        fails = fails_under_high_inflation(ctx, threshold)
        total = fails.height
        secs.append(Section(
            "Fails under high inflation",
            [fails_definition(threshold),
             f"{total:,} project{'' if total == 1 else 's'} meet{'s' if total == 1 else ''} it. Shown: the "
             f"{min(top_n, total):,} largest falls. The same list: ratescape query --db DB fails-above-inflation "
             f"--param threshold={threshold:g}."],
            table=fails.select("project_id", "name", "accept_share_at_or_below", "accept_share_above",
                               "lowest_failing_inflation").head(top_n),
            anchor="fails-high-inflation"))
        suggest += fails["project_id"].head(1).to_list()

    movers, _ = project_table(
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
            core = query_frame(ctx.con, """
                WITH sel AS (SELECT project_id, count(DISTINCT scenario_id) AS k
                             FROM selections WHERE run_id = ? GROUP BY project_id)
                SELECT sel.project_id, p.name, sel.k / ?::DOUBLE AS selected_share,
                       count(*) FILTER (WHERE sel.k >= ?) OVER () AS core_total
                FROM sel LEFT JOIN run_project_names p ON p.run_id = ? AND p.project_id = sel.project_id
                ORDER BY selected_share DESC, sel.project_id LIMIT ?""",
                [ctx.run_id, n_port, n_port, ctx.run_id, top_n])
            n_core = int(core["core_total"][0]) if core.height else 0
            secs.append(Section(
                "Core portfolio",
                f"{n_core:,} projects are in the budget-limited portfolio in every one of the "
                f"{n_port:,} scenarios. Shown: the {core.height:,} projects selected most often.",
                table=core.drop("core_total"), anchor="core-portfolio"))
    else:
        secs.append(Section("Core portfolio", unavailable=NO_BUDGET))
    if "portfolios" in ctx.tables:
        pcols = set(column_names(ctx.con, "portfolios"))
        want = [c for c in ("objective", "lp_bound", "greedy_objective") if c in pcols]
        n_rows = ctx.con.execute("SELECT count(*) FROM portfolios WHERE run_id = ?", [ctx.run_id]).fetchall()[0][0]
        if want and n_rows:
            stat_rows = []
            for stat, fn in (("lowest", "min"), ("median", "median"), ("highest", "max")):
                vals = ctx.con.execute(
                    "SELECT " + ", ".join(f"{fn}({quote_ident(c)})" for c in want)
                    + " FROM portfolios WHERE run_id = ?", [ctx.run_id]).fetchall()[0]
                stat_rows.append({"statistic": stat, **dict(zip(want, vals))})
            secs.append(Section(
                "Budget-limited portfolio across scenarios",
                "Total present worth of the optimal portfolio (0-1 integer program), its "
                "LP-relaxation bound and the profitability-index greedy answer, over all scenarios.",
                table=pl.DataFrame(stat_rows, infer_schema_length=None), anchor="budget"))
    return secs, suggest


def _drill_projects(ctx: RunContext, projects: Sequence[str] | None, suggested: list[str]) -> list[str]:
    if projects is not None:
        count = len(set(map(str, projects)))
        if count > MAX_DRILL_PROJECTS:
            raise ReportError(f"at most {MAX_DRILL_PROJECTS} projects can be drilled into; got {count}. "
                              "Pick fewer with --project.")
        return _named_projects(ctx, projects)
    ids = list(dict.fromkeys(str(p) for p in suggested if p is not None))
    if len(ids) < 3:
        more = ctx.con.execute(
            "SELECT project_id FROM project_summary WHERE run_id = ? "
            "ORDER BY pw_base DESC NULLS LAST, project_id LIMIT 3", [ctx.run_id]).fetchall()
        ids = list(dict.fromkeys(ids + [r[0] for r in more]))
    return ids[:4]


def _portfolio_chart_sections(ctx: RunContext, top_n: int) -> list[Section]:
    secs = []
    top = query_frame(ctx.con, """
        SELECT ps.project_id, p.name, ps.accept_share, count(*) OVER () AS total FROM project_summary ps
        LEFT JOIN run_project_names p ON p.run_id = ps.run_id AND p.project_id = ps.project_id
        WHERE ps.run_id = ? AND ps.accept_share > 0 AND ps.accept_share < 1
        ORDER BY ps.accept_share DESC NULLS LAST, ps.pw_base DESC NULLS LAST, ps.project_id LIMIT ?""",
             [ctx.run_id, top_n])
    n_dep = int(top["total"][0]) if top.height else 0
    if top.height:
        secs.append(Section("Projects whose decision depends on the scenario",
                            f"{n_dep:,} of {ctx.project_count:,} projects are accepted in some scenarios and "
                            f"not in others; shown: {top.height:,} of them. Projects accepted everywhere or "
                            "nowhere are counted in the decision brief, not drawn.",
                            chart=charts.acceptance_share_bars(top.drop("total")), chart_kind="acceptance-share",
                            guide="Read: a long bar is accepted in most scenarios; a short one only in a few. "
                                  "The scenario explorer shows which.", anchor="scenario-dependent"))
    else:
        secs.append(Section("Projects whose decision depends on the scenario", chart_kind="acceptance-share",
                            unavailable="No project's decision depends on the scenario: each is accepted "
                                        "everywhere or nowhere."))
    if ctx.narrow:   # aggregate by scenario key, on the narrow rows alone
        by_scen = query_frame(ctx.con, f"""
            WITH a AS (SELECT x.scenario_key, avg(CAST(x.present_worth >= 0 AS INTEGER)) AS accept_share
                       FROM result_rows x
                       WHERE x.scenario_key IN (SELECT scenario_key FROM scenarios WHERE run_id = ?)
                       GROUP BY x.scenario_key)
            SELECT s.{quote_ident(ctx.y)} AS inflation, s.{quote_ident(ctx.x)} AS series, a.accept_share
            FROM a JOIN scenarios s ON s.run_id = ? AND s.scenario_key = a.scenario_key
            WHERE {ctx.plane_filter}""", [ctx.run_id, ctx.run_id, *ctx.plane_params])
    else:
        by_scen = query_frame(ctx.con, f"""
            WITH a AS (SELECT scenario_id, avg(CAST(accepted AS INTEGER)) AS accept_share
                       FROM results WHERE run_id = ? GROUP BY scenario_id)
            SELECT s.{quote_ident(ctx.y)} AS inflation, s.{quote_ident(ctx.x)} AS series, a.accept_share
            FROM a JOIN scenarios s ON s.run_id = ? AND s.scenario_id = a.scenario_id
            WHERE {ctx.plane_filter}""", [ctx.run_id, ctx.run_id, *ctx.plane_params])
    series_levels = thin_levels(sorted(by_scen["series"].unique().to_list()), 21)
    by_scen = by_scen.filter(pl.col("series").is_in(series_levels)).rename({"series": ctx.x})
    secs.append(Section("Acceptance against inflation",
                        "Share of all projects accepted, by inflation, one line per discount rate.",
                        chart=charts.acceptance_vs_inflation(by_scen, series=ctx.x),
                        chart_kind="acceptance-vs-inflation",
                        guide="Read: a falling line means fewer projects pass as inflation rises at that "
                              "discount rate; hover a line to pick it out."))
    ranks = query_frame(ctx.con, """
        SELECT ps.project_id, p.name, ps.rank_min, ps.rank_median, ps.rank_max, ps.rank_base
        FROM project_summary ps LEFT JOIN run_project_names p ON p.run_id = ps.run_id AND p.project_id = ps.project_id
        WHERE ps.run_id = ? AND ps.rank_median IS NOT NULL
        ORDER BY ps.rank_median, ps.project_id LIMIT ?""", [ctx.run_id, top_n])
    secs.append(Section("Rank stability",
                        f"Best, median and worst rank of the {ranks.height:,} projects with the best median rank.",
                        chart=charts.rank_intervals(ranks), chart_kind="rank-stability",
                        guide="Read: a short bar is a project whose place in the ranking hardly moves; a long "
                              "bar one whose place depends on the scenario."))
    if "selections" in ctx.tables:
        n_port = ctx.con.execute(
            "SELECT count(DISTINCT scenario_id) FROM portfolios WHERE run_id = ?" if "portfolios" in ctx.tables
            else "SELECT count(*) FROM scenarios WHERE run_id = ?", [ctx.run_id]).fetchall()[0][0] or 0
        if not n_port:
            secs.append(Section("Selection share in the budget-limited portfolio", unavailable=NO_BUDGET, chart_kind="selection-share"))
        else:
            sel = query_frame(ctx.con, """
                SELECT s.project_id, p.name, count(DISTINCT s.scenario_id) / ?::DOUBLE AS selected_share
                FROM selections s LEFT JOIN run_project_names p ON p.run_id = s.run_id AND p.project_id = s.project_id
                WHERE s.run_id = ? GROUP BY s.project_id, p.name
                ORDER BY selected_share DESC, s.project_id LIMIT ?""", [n_port, ctx.run_id, top_n])
            secs.append(Section("Selection share in the budget-limited portfolio",
                                chart=charts.selection_share_bars(sel), chart_kind="selection-share",
                                guide="Read: a full bar is in the best affordable portfolio in every scenario "
                                      "(the core); shorter bars only in some."))
    else:
        secs.append(Section("Selection share in the budget-limited portfolio", unavailable=NO_BUDGET, chart_kind="selection-share"))
    return secs


def _drill_sections(ctx: RunContext, ids: list[str]) -> list[Section]:
    secs: list[Section] = []
    if not ids:
        return secs
    x, y = ctx.x, ctx.y
    xs_all, ys_all = ctx.levels(x), ctx.levels(y)
    names = dict(ctx.con.execute(
        "SELECT project_id, name FROM run_project_names WHERE run_id = ? AND list_contains(?, project_id)",
        [ctx.run_id, ids]).fetchall())
    # worth curves: every x level, up to MAX_CURVE_LINES inflation levels
    curve_ys = thin_levels(ys_all, MAX_CURVE_LINES)
    rows, rows_params = ctx.rows(projects=ids)
    curve = query_frame(ctx.con, f"""
        SELECT r.project_id, p.name, s.{quote_ident(x)} AS {quote_ident(x)}, s.inflation, r.present_worth
        FROM {rows} r JOIN scenarios s ON s.run_id = ? AND s.scenario_id = r.scenario_id
        LEFT JOIN run_project_names p ON p.run_id = s.run_id AND p.project_id = r.project_id
        WHERE list_contains(?, s.inflation) AND {ctx.plane_filter}
        ORDER BY r.project_id, s.inflation, s.{quote_ident(x)}""",
               [*rows_params, ctx.run_id, curve_ys, *ctx.plane_params])
    irr = None
    irr_col = "irr_real" if x == "real_rate" else "irr_nominal"
    # irr_roots holds every root of streams with several; irr_results one row per inflation level
    irr_table = None
    for t in ("irr_roots", "irr_results"):
        if t in ctx.tables and {"run_id", "project_id", "inflation", irr_col} <= set(column_names(ctx.con, t)):
            n_rows = ctx.con.execute(f"SELECT count(*) FROM {t} WHERE run_id = ? AND list_contains(?, project_id)",
                                     [ctx.run_id, ids]).fetchall()[0][0]
            if n_rows:
                irr_table = t
                break
    if irr_table is not None:
        irr = query_frame(ctx.con, f"""
            SELECT project_id, inflation, {irr_col} FROM {irr_table}
            WHERE run_id = ? AND list_contains(?, project_id) AND list_contains(?, inflation)
              AND {irr_col} IS NOT NULL""", [ctx.run_id, ids, curve_ys])
    secs.append(Section(
        "Present worth against the discount rate",
        "Drill-down projects: " + ", ".join(f"{names.get(i) or i} ({i})" for i in ids)
        + ". Pick a project in the list under the chart. Each line is one inflation level; "
        "diamonds mark the IRR at that inflation (several diamonds on one line mean several IRRs; "
        "an IRR outside the range of discount rates screened is not drawn).",
        chart=charts.worth_curve(curve, irr, x=x, irr_column=irr_col), chart_kind="worth-curve",
        notes=[] if irr is not None else ["IRR marks not available: no IRR rows for these projects."]))
    # surfaces: thinned to MAX_SURFACE_POINTS grid points
    keep = max(2, int(math.sqrt(MAX_SURFACE_POINTS)))
    sx, sy = thin_levels(xs_all, keep), thin_levels(ys_all, keep)
    surf = query_frame(ctx.con, f"""
        SELECT r.project_id, s.{quote_ident(x)} AS {quote_ident(x)}, s.inflation, r.present_worth
        FROM {rows} r JOIN scenarios s ON s.run_id = ? AND s.scenario_id = r.scenario_id
        WHERE list_contains(?, s.{quote_ident(x)}) AND list_contains(?, s.inflation) AND {ctx.plane_filter}""",
              [*rows_params, ctx.run_id, sx, sy, *ctx.plane_params])
    for pid in ids:
        one = surf.filter(pl.col("project_id") == pid).drop("project_id")
        label = f"{names.get(pid) or pid} ({pid})"
        if len(sx) < 2 or len(sy) < 2 or one.height == 0:
            secs.append(Section(f"Present worth surface: {label}", level=3,
                                unavailable="Not available: the grid needs at least two levels on each axis.",
                                chart_kind="worth-surface", subject=pid))
            continue
        secs.append(Section(f"Present worth surface: {label}", level=3,
                            text="Colour shows present worth (blue above zero, orange-red below, pale near zero); "
                                 "black lines join scenarios of equal present worth.",
                            chart=charts.worth_surface(one, x=x, y=y,
                                                       title=f"Present worth of {label}"),
                            chart_kind="worth-surface", subject=pid))
    return secs


def _decision_sections(ctx: RunContext, ids: list[str]) -> list[Section]:
    title = "Decision maps for mutually exclusive alternatives"
    if "group_decisions" not in ctx.tables:
        return [Section(title, unavailable=NO_GROUPS, anchor="decision-maps")]
    groups = [r[0] for r in ctx.con.execute("""
        SELECT g.group_name FROM (SELECT group_name, count(DISTINCT preferred) AS k FROM group_decisions
                                  WHERE run_id = ? GROUP BY group_name) g
        ORDER BY g.k > 1 DESC, (SELECT count(*) FROM run_project_names p WHERE p.run_id = ? AND p.group_name = g.group_name
                  AND list_contains(?, p.project_id)) DESC, g.group_name LIMIT ?""",
        [ctx.run_id, ctx.run_id, ids, MAX_GROUPS]).fetchall()]
    if not groups:
        return [Section(title, unavailable=NO_GROUPS, anchor="decision-maps")]
    x, y = ctx.x, ctx.y
    keep = max(2, int(math.sqrt(MAX_SURFACE_POINTS)))
    sx, sy = thin_levels(ctx.levels(x), keep), thin_levels(ctx.levels(y), keep)
    gcols = set(column_names(ctx.con, "group_decisions"))
    runner = "g.runner_up" if "runner_up" in gcols else "NULL"
    secs = [Section(title, anchor="decision-maps", text="Each cell is coloured by the alternative with the highest present worth; "
                           "the black line is the indifference frontier, found by root finding; "
                           "hover for the margin over the runner-up. Click a legend entry to highlight it.")]
    for group in groups:
        cells = query_frame(ctx.con, f"""
            SELECT s.{quote_ident(x)} AS {quote_ident(x)}, s.inflation AS inflation,
                   coalesce(pa.name || ' (' || g.preferred || ')', g.preferred) AS preferred,
                   coalesce(pb.name || ' (' || {runner} || ')', {runner}) AS runner_up, g.margin
            FROM group_decisions g JOIN scenarios s ON s.run_id = g.run_id AND s.scenario_id = g.scenario_id
            LEFT JOIN run_project_names pa ON pa.run_id = g.run_id AND pa.project_id = g.preferred
            LEFT JOIN run_project_names pb ON pb.run_id = g.run_id AND pb.project_id = {runner}
            WHERE g.run_id = ? AND g.group_name = ? AND list_contains(?, s.{quote_ident(x)})
              AND list_contains(?, s.inflation) AND {ctx.plane_filter}""",
                   [ctx.run_id, group, sx, sy, *ctx.plane_params])
        frontier = None
        note = []
        if "frontiers" in ctx.tables:
            fr = query_frame(ctx.con, """
                SELECT alternative_a, alternative_b, segment, point, x, y FROM frontiers
                WHERE run_id = ? AND group_name = ? AND x_axis = ? AND y_axis = ?
                ORDER BY alternative_a, alternative_b, segment, point""", [ctx.run_id, group, x, y])
            frontier = fr if fr.height else None
            if frontier is None:
                note.append(f"No frontier on the {x} x {y} plane for this group.")
        else:
            note.append("Frontier lines not available: no frontiers table.")
        if cells.height == 0:
            secs.append(Section(f"Group {group}", level=3, unavailable="No decisions recorded.",
                                chart_kind="decision-map", subject=group))
            continue
        secs.append(Section(f"Group {group}", level=3, notes=note,
                            chart=charts.decision_map(cells, frontier, x=x, y=y,
                                                      title=f"Preferred alternative in group {group}"),
                            guide="Read: each colour is the alternative worth most in those scenarios; crossing "
                                  "a black line changes the preferred choice.",
                            chart_kind="decision-map", subject=group))
    return secs


def _sensitivity_sections(ctx: RunContext, ids: list[str]) -> list[Section]:
    title = "One-at-a-time sensitivity"
    tor = sp = None
    if "sensitivity" in ctx.tables:
        cols = set(column_names(ctx.con, "sensitivity"))
        base_col = next((c for c in ("worth_base", "base_worth") if c in cols), None)
        if base_col and {"input", "worth_low", "worth_high"} <= cols:
            tor = query_frame(ctx.con, f"""
                SELECT t.project_id, p.name, t.input, t.worth_low, t.worth_high, t.{base_col} AS base_worth
                FROM sensitivity t LEFT JOIN run_project_names p ON p.run_id = t.run_id AND p.project_id = t.project_id
                WHERE t.run_id = ? AND list_contains(?, t.project_id)
                  AND t.worth_low IS NOT NULL AND t.worth_high IS NOT NULL
                ORDER BY t.project_id, t.input""", [ctx.run_id, ids])
    # spider rows: `spider(input, change, present_worth)`, or long-form sensitivity with pct_change
    for table, change in (("spider", "change"), ("spider", "pct_change"), ("sensitivity", "pct_change")):
        if table in ctx.tables and {"input", change, "present_worth"} <= set(column_names(ctx.con, table)):
            sp = query_frame(ctx.con, f"""
                SELECT t.project_id, p.name, t.input, t.{change} AS pct_change, t.present_worth
                FROM {table} t LEFT JOIN run_project_names p ON p.run_id = t.run_id AND p.project_id = t.project_id
                WHERE t.run_id = ? AND list_contains(?, t.project_id)
                ORDER BY t.project_id, t.input, t.{change}""", [ctx.run_id, ids])
            break
    basis = run_basis(ctx.run)                       # name the rates on the run's own basis

    def plain(name):
        return (sensitivity_input_label(name, basis) if name in ("discount_rate", "inflation")
                else INPUT_LABELS.get(name, str(name).replace("_", " ")))

    label = lambda f: f if f is None else f.with_columns(   # noqa: E731
        pl.col("input").map_elements(plain, return_dtype=pl.String))
    tor, sp = label(tor), label(sp)
    have_tor = tor is not None and tor.height > 0
    have_sp = sp is not None and sp.height > 0
    if not have_tor and not have_sp:
        return [Section(title, unavailable=NO_SENSITIVITY)]
    secs = [Section(title, "Each input moved on its own, the others held at their base values "
                           f"(the {discount_rate_label(basis)} among them), for the drill-down projects.")]
    secs.append(Section("Tornado", level=3, chart=charts.tornado(tor), chart_kind="tornado") if have_tor else
                Section("Tornado", level=3, unavailable="Not available for these projects.", chart_kind="tornado"))
    secs.append(Section("Spider", level=3, chart=charts.spider(sp), chart_kind="spider") if have_sp else
                Section("Spider", level=3, unavailable="Not available for these projects.", chart_kind="spider"))
    return secs


class ReportParts:
    """What :func:`report_sections` gives the page: title, sections, and the explorer's data."""

    def __init__(self, title: str, sections: list[Section], explorer: dict[str, Any], templates: dict[str, Any]):
        self.title = title
        self.sections = sections
        self.explorer = explorer
        self.templates = templates


def report_sections(
    con: duckdb.DuckDBPyConnection,
    run_id: str | None = None,
    projects: Sequence[str] | None = None,
    *,
    top_n: int = 25,
    compare_to: str | None = None,
) -> ReportParts:
    """Query an open results database and build the report's parts.

    Parameters
    ----------
    con : duckdb connection
        Preferably read-only.
    run_id : str, optional
        Defaults to the latest finished run.
    projects : sequence of str, optional
        Project ids always embedded with their drill-down (the first opens on load).
    top_n : int
        Rows of each headline table and bars of each portfolio chart.
    compare_to : str, optional
        An earlier run of the same database: adds "What changed since run X".

    Returns
    -------
    ReportParts

    Raises
    ------
    ReportError
        When a required table is missing, the run does not exist or is not
        finished, or a requested project is not in the run.
    """
    from ratescape.report.changes import changes_sections

    if top_n < 1:
        raise ReportError(f"top_n must be at least 1, got {top_n}")
    present = table_names(con)
    missing = [t for t in ("runs", "scenarios", "results", "project_summary", "projects") if t not in present]
    if missing:
        raise ReportError(f"the database lacks table(s) {missing}; run `ratescape screen` on it first")
    ctx = RunContext(con, pick_run(con, run_id))
    named = _named_projects(ctx, projects)
    headline, suggested = _headline_sections(ctx, top_n)
    counts = dict(zip(("every", "none", "some"), con.execute(
        "SELECT count(*) FILTER (WHERE accept_share >= 1), count(*) FILTER (WHERE accept_share <= 0), "
        "count(*) FILTER (WHERE accept_share > 0 AND accept_share < 1) FROM project_summary WHERE run_id = ?",
        [ctx.run_id]).fetchall()[0]))
    threshold = fail_threshold(ctx.levels("inflation"))
    fails = fails_under_high_inflation(ctx, threshold) if threshold is not None else None
    data = explorer_data(ctx, named, suggested)
    first = named[:1] or suggested[:1]
    ids = data["pr"]["id"]
    data["first"] = ids.index(first[0]) if first and first[0] in ids else (0 if ids else None)
    embedded = ("Every project is in this file: its row in the explorer and its drill-down." if data["full"] else
                f"This file embeds the drill-down of {len(data['pw']):,} of {ctx.project_count:,} projects "
                "(rule in the project search); the database holds every result.")
    compare = changes_sections(ctx, compare_to) if compare_to else []
    sections = [
        brief_section(ctx, counts=counts, budget=budget_facts(ctx), groups=group_changes(ctx), fails=fails,
                      threshold=threshold, embedded_note=embedded),
        assumptions_section(ctx, run_metadata(ctx)),
        Section("Scenario explorer", anchor="explorer",
                text="Choose a scenario; the table, the count of accepted projects and the portfolio's worth "
                     "follow, in this page, with no network.",
                html=explorer_html(data, x=ctx.x)),
        Section("Project search and drill-down", anchor="search", html=search_html(data)),
        *compare,
        Section("Headlines", "Tables list the leading projects only; the database holds every result.",
                anchor="headlines"),
        *headline,
        Section("Portfolio charts"),
        *_portfolio_chart_sections(ctx, top_n),
        *_decision_sections(ctx, named or suggested),
    ]
    title = f"ratescape screening report: run {ctx.run_id}"
    return ReportParts(title, sections, data, drill_templates(ctx.x))


def _named_projects(ctx: RunContext, projects: Sequence[str] | None) -> list[str]:
    if projects is None:
        return []
    ids = list(dict.fromkeys(str(p) for p in projects))
    found = {r[0] for r in ctx.con.execute(
        "SELECT project_id FROM project_summary WHERE run_id = ? AND list_contains(?, project_id)",
        [ctx.run_id, ids]).fetchall()}
    missing = [p for p in ids if p not in found]
    if missing:
        raise ReportError(f"project(s) {missing} are not in run {ctx.run_id!r}; "
                          "check the ids with `ratescape query`.")
    return ids
