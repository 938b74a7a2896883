"""The section "What changed since run X": the bundled query queries/run-changes.sql (one definition,
also run by ``ratescape query run-changes``) and the changes of the grid between the two runs.
"""
from __future__ import annotations

import polars as pl

from ratescape.report.page import Section
from ratescape.report.run_data import ReportError, RunContext, bundled_sql, pick_run

#: Least changes reported (the query's defaults).
MIN_SHARE_CHANGE = 0.05
MIN_RANK_CHANGE = 1


def run_changes(ctx: RunContext, before: str) -> pl.DataFrame:
    """Rows of queries/run-changes.sql for this run against ``before``."""
    return ctx.con.sql(bundled_sql("run-changes"), params={
        "run": ctx.run_id, "before": before, "min_share_change": MIN_SHARE_CHANGE,
        "min_rank_change": MIN_RANK_CHANGE}).pl()


def grid_changes(ctx: RunContext, before: str) -> list[str]:
    """Plain sentences on how the grid and bases of ``before`` differ from this run's."""
    def axes(run_id: str):
        return ctx.con.execute("""SELECT min(discount_rate), max(discount_rate), count(DISTINCT discount_rate),
                                         min(inflation), max(inflation), count(DISTINCT inflation), count(*)
                                  FROM scenarios WHERE run_id = ?""", [run_id]).fetchall()[0]
    now, old = axes(ctx.run_id), axes(before)
    out = []
    if now[:3] != old[:3]:
        out.append(f"Discount rates changed: {old[0]:.2%} to {old[1]:.2%} in {old[2]} steps before, "
                   f"{now[0]:.2%} to {now[1]:.2%} in {now[2]} steps now.")
    if now[3:6] != old[3:6]:
        out.append(f"Inflation changed: {old[3]:.2%} to {old[4]:.2%} in {old[5]} steps before, "
                   f"{now[3]:.2%} to {now[4]:.2%} in {now[5]} steps now.")
    runs = dict(ctx.con.execute("SELECT run_id, inputs_hash FROM runs WHERE list_contains(?, run_id)",
                                [[ctx.run_id, before]]).fetchall())
    bases = ctx.con.execute("SELECT run_id, discount_basis, timing, after_tax FROM runs WHERE list_contains(?, run_id)",
                            [[ctx.run_id, before]]).fetchall()
    info = {r[0]: r[1:] for r in bases}
    if info.get(ctx.run_id) != info.get(before):
        out.append(f"Bases changed (discount basis, timing, after tax): {info.get(before)} before, "
                   f"{info.get(ctx.run_id)} now.")
    if runs.get(ctx.run_id) != runs.get(before):
        out.append("The portfolio's input files changed between the two runs (their hash differs).")
    return out or ["The grid, the bases and the input files are the same in both runs."]


def changes_sections(ctx: RunContext, before: str) -> list[Section]:
    """The comparison section; raises ReportError when ``before`` is not a finished run."""
    if before == ctx.run_id:
        raise ReportError(f"--compare-to {before!r} is the run being reported; name an earlier run")
    pick_run(ctx.con, before)   # exists and finished, or a ReportError naming the runs
    frame = run_changes(ctx, before)
    counts = {w: frame.filter(pl.col("why") == w).height for w in ("new project", "removed project")}
    text = [*grid_changes(ctx, before),
            f"{frame.height:,} project(s) changed: {counts['new project']:,} new, {counts['removed project']:,} "
            f"removed, the others by acceptance share (at least {MIN_SHARE_CHANGE:.0%} points), median rank "
            f"(at least {MIN_RANK_CHANGE}), core-portfolio membership or their group's preferred alternative "
            "(the one preferred in most scenarios). The same list: ratescape query --db DB run-changes "
            f"--param before={before}."]
    table = frame.select("project_id", "name", "accept_share_before", "accept_share_after",
                         "rank_median_before", "rank_median_after", "core_before", "core_after",
                         "group_preferred_before", "group_preferred_after", "why")
    return [Section(f"What changed since run {before}", text, table=table if table.height else None,
                    unavailable=None if table.height else "No project changed.", anchor="changes")]
