"""``ratescape demo``: the main job on the bundled, invented demo portfolio."""
from __future__ import annotations

from pathlib import Path

from .api import load_portfolio, screen_portfolio
from .caution import CAUTION
from .report import write_report
from .errors import RatescapeError
from .store.database import connect_read, fetch_frame



def demo_data_dir() -> Path:
    """Folder of the bundled demo files (repository ``data_demo/`` or the installed copy)."""
    here = Path(__file__).resolve().parent
    for candidate in (here / "_data_demo", here.parents[1] / "data_demo"):
        if (candidate / "projects.csv").is_file():
            return candidate
    raise RatescapeError("the bundled demo data is missing from this installation")


def run_demo(out_dir: Path, *, progress: bool = True) -> str:
    """Load, screen, decide and report the demo portfolio into ``out_dir``; return a summary text."""
    data = demo_data_dir()
    out_dir.mkdir(parents=True, exist_ok=True)
    db = out_dir / "ratescape-demo.duckdb"
    for stale in (db, db.with_name(db.name + ".wal")):
        if stale.exists():
            stale.unlink()
    load_portfolio(data / "projects.csv", data / "cash_flows.csv", db)
    run_id = screen_portfolio(db, grid=data / "grid.toml", progress=progress)
    report_path = out_dir / "report.html"
    write_report(db, report_path, run_id=run_id)
    return summarize_run(db, run_id, report_path)


def summarize_run(db, run_id: str, report_path: Path | None = None) -> str:
    """A short plain-text summary of a finished run."""
    con = connect_read(db)
    try:
        run = fetch_frame(con, "SELECT * FROM runs WHERE run_id = ?", [run_id]).row(0, named=True)
        s = fetch_frame(con, """
            SELECT count(*) AS projects,
                   count(*) FILTER (WHERE accept_share = 1) AS everywhere,
                   count(*) FILTER (WHERE accept_share = 0) AS nowhere,
                   count(*) FILTER (WHERE accept_share > 0 AND accept_share < 1) AS depends,
                   count(*) FILTER (WHERE accepted_base) AS base_accepted
            FROM project_summary WHERE run_id = ?""", [run_id]).row(0, named=True)
        base = fetch_frame(con, "SELECT discount_rate, real_rate, inflation FROM scenarios WHERE run_id = ? AND is_base",
                           [run_id]).row(0, named=True)
        top = fetch_frame(con, """
            SELECT s.project_id, p.name, s.pw_base FROM project_summary s JOIN projects p USING (project_id)
            WHERE s.run_id = ? AND s.accept_share = 1 ORDER BY s.pw_base DESC LIMIT 5""", [run_id])
        groups = fetch_frame(con, """
            SELECT count(*) AS groups, count(*) FILTER (WHERE n > 1) AS switching
            FROM (SELECT group_name, count(DISTINCT preferred) AS n FROM group_decisions WHERE run_id = ?
                  GROUP BY group_name)""", [run_id]).row(0, named=True)
        budget = fetch_frame(con, """
            SELECT count(*) AS scenarios, min(objective) AS lo, max(objective) AS hi, median(objective) AS mid,
                   max(objective) FILTER (WHERE scenario_id = (SELECT base_scenario_id FROM runs
                                                              WHERE run_id = $1)) AS at_base,
                   avg(1 - greedy_objective / nullif(objective, 0)) AS greedy_loss,
                   (SELECT count(*) FROM portfolio_summary WHERE run_id = $1 AND in_core) AS core
            FROM portfolios WHERE run_id = $1""", [run_id]).row(0, named=True)
    finally:
        con.close()
    lines = [
        f"Run {run_id}: {s['projects']} projects x {run['scenario_count']} scenarios "
        f"({run['discount_basis']} discount axis, {run['timing']}-of-period flows).",
        f"Base scenario: discount rate {base['discount_rate']:.2%} nominal / {base['real_rate']:.2%} real, "
        f"inflation {base['inflation']:.2%}: {s['base_accepted']} projects accepted.",
        f"Accepted in every scenario: {s['everywhere']}; in none: {s['nowhere']}; "
        f"decision depends on the scenario: {s['depends']}.",
    ]
    if groups["groups"]:
        lines.append(f"Groups of alternatives: {groups['groups']}; the preferred alternative changes across the "
                     f"scenarios in {groups['switching']} (see the decision maps).")
    if budget["scenarios"]:
        at_base = "" if budget["at_base"] is None else f"{budget['at_base']:,.0f} at the base scenario, "
        lines.append(f"Capital budget: the best portfolio is worth {at_base}{budget['lo']:,.0f} to "
                     f"{budget['hi']:,.0f} across {budget['scenarios']} scenarios (median {budget['mid']:,.0f}); "
                     "ranking by profitability index alone loses "
                     f"{budget['greedy_loss']:.1%} on average; {budget['core']} projects are in the core portfolio.")
    if top.height:
        lines.append("Largest base-case present worth among projects accepted everywhere:")
        for pid, name, pw in top.iter_rows():
            lines.append(f"  {pid:<8} {name[:48]:<48} {pw:>16,.0f}")
    lines.append(f"Database: {db}")
    if report_path is not None:
        lines.append(f"Report:   {report_path}")
    lines.append(CAUTION)
    lines.append(run_id)
    return "\n".join(lines)
