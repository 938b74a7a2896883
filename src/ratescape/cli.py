"""The ``ratescape`` command line: a thin layer over the library, one function per subcommand."""
from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from . import __version__
from .caution import CAUTION
from .errors import RatescapeError



def _fail(exc: Exception) -> None:
    click.echo(f"Error: {exc}", err=True)
    sys.exit(1)


class Command(click.Command):
    """Turn user-fixable errors into ``Error: ...`` and a non-zero exit, never a traceback."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except RatescapeError as exc:
            _fail(exc)
        except KeyboardInterrupt:
            click.echo("Interrupted.", err=True)
            sys.exit(130)
        except Exception as exc:   # DuckDB's forms of Ctrl-C during a query
            from .store.database import is_interrupt
            if not is_interrupt(exc):
                raise
            click.echo("Interrupted.", err=True)
            sys.exit(130)


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="ratescape")
def main():
    """Screen capital projects over a grid of discount-rate and inflation scenarios.

    \b
    Example:
      ratescape demo --out ./ratescape-demo
    """


@main.command(cls=Command)
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default="./ratescape-demo", show_default=True,
              help="Folder for ratescape-demo.duckdb and report.html.")
@click.option("--quiet", is_flag=True, help="No progress lines.")
def demo(out_dir, quiet):
    """Run the main job on the bundled, invented demo portfolio.

    Loads the demo projects, screens them over the demo grid, decides, writes
    DIR/ratescape-demo.duckdb and DIR/report.html and prints a short summary.

    \b
    Example:
      ratescape demo --out ./ratescape-demo
    """
    from .demo import run_demo
    summary = run_demo(Path(out_dir), progress=not quiet)
    click.echo(summary)


@main.command(cls=Command)
@click.option("--projects", "projects_path", required=True, type=click.Path(dir_okay=False),
              help="Projects CSV (project_id,name[,group][,requires][,parametric columns]).")
@click.option("--cash-flows", "cash_flows_path", type=click.Path(dir_okay=False),
              help="Long-form cash-flow CSV (project_id,period,amount[,basis][,escalation][,kind]).")
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
def load(projects_path, cash_flows_path, db_path):
    """Validate the CSV files and load them into the database.

    Every problem is reported at once (file, line, column, value, fix); an
    invalid input writes nothing. A valid load replaces the database's
    portfolio in one transaction; earlier runs stay.

    \b
    Example:
      ratescape load --projects projects.csv --cash-flows cash_flows.csv --db plan.duckdb
    """
    from .api import load_portfolio
    info = load_portfolio(projects_path, cash_flows_path, db_path)
    for note in info["notes"]:
        click.echo(f"Note: {note}", err=True)
    click.echo(f"Loaded {info['projects']} projects and {info['cash_flow_rows']} cash-flow lines into {db_path}.")


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.option("--grid", "grid_path", type=click.Path(dir_okay=False), help="Grid and run settings (TOML).")
@click.option("--discount-rates", help="START:STOP:COUNT of discount rates as fractions, e.g. 0:0.2:41.")
@click.option("--inflation", help="START:STOP:COUNT of general inflation rates as fractions, e.g. 0:0.1:21.")
@click.option("--discount-basis", type=click.Choice(["nominal", "real"]), help="Whether the discount-rate axis is nominal (market) or real.")
@click.option("--budget", "budgets", multiple=True, metavar="PERIOD=AMOUNT",
              help="Most the investment lines of PERIOD may spend (then-current money). Repeatable.")
@click.option("--timing", type=click.Choice(["end", "mid", "beginning"]), help="When in a period cash flows fall (default end).")
@click.option("--periods-per-year", type=float, help="Periods per year (1 = years, 12 = months).")
@click.option("--after-tax/--before-tax", default=None,
              help="Screen after-tax cash flows (before-tax worth is stored beside them).")
@click.option("--tax-rate", help="Income-tax rate(s) as fractions: 0.25, or START:STOP:COUNT as a grid axis. Implies --after-tax.")
@click.option("--chunk-size", type=click.IntRange(min=1), help="Projects per chunk (default: from memory).")
@click.option("--keep", metavar="all|summary|thinned:K",
              help="Result rows to store: all (default), summary (per-project summaries only), "
                   "or thinned:K (every K-th rate and inflation level, and the base scenario).")
@click.option("--alternatives-basis", type=click.Choice(["annual-worth", "study-period", "present-worth"]),
              help="How alternatives of a group with different lives are compared: annual-worth (default), "
                   "study-period (with --study-period) or present-worth over their own lives.")
@click.option("--study-period", type=int, metavar="T",
              help="Study period in periods for --alternatives-basis study-period (implies it).")
@click.option("--resume", "resume", metavar="RUN_ID", help="Finish an interrupted run.")
@click.option("--cluster", metavar="tcp://HOST:PORT", help="Evaluate chunks on this Dask scheduler's workers.")
@click.option("--workers", type=click.IntRange(min=1), help="Evaluate chunks on a local Dask cluster of N processes.")
@click.option("--quiet", is_flag=True, help="No progress output.")
def screen(db_path, grid_path, discount_rates, inflation, discount_basis, budgets, timing, periods_per_year,
           after_tax, tax_rate, chunk_size, keep, alternatives_basis, study_period, resume, cluster, workers, quiet):
    """Evaluate every project in every scenario of the grid and store the results.

    Rates are fractions (0.07 = 7 %). Flags override the TOML file. The run
    id is printed on the last line of standard output; progress and logs go
    to standard error.

    \b
    Example:
      ratescape screen --db plan.duckdb --discount-rates 0:0.2:41 --inflation 0:0.1:21 --discount-basis nominal
      ratescape screen --db plan.duckdb --grid grid.toml --budget 0=50e6 --budget 1=20e6
      ratescape screen --db plan.duckdb --after-tax --tax-rate 0.15:0.35:5
      ratescape screen --db plan.duckdb --cluster tcp://10.0.0.5:8786
      ratescape screen --db plan.duckdb --resume run-20261201-101500-ab12cd
    """
    from .api import screen_portfolio
    if cluster and workers:
        raise click.UsageError("give --cluster (an existing scheduler) or --workers (a local cluster), not both")
    if resume and (any(v is not None for v in (grid_path, discount_rates, inflation, discount_basis, timing,
                                                periods_per_year, after_tax, tax_rate, keep, alternatives_basis,
                                                study_period)) or bool(budgets)):
        raise click.UsageError("--resume continues a run with its stored grid; give no grid options with it")
    run_id = screen_portfolio(db_path, grid=grid_path, discount_rates=discount_rates, inflation=inflation,
                              discount_basis=discount_basis, budgets=list(budgets), timing=timing,
                              periods_per_year=periods_per_year, after_tax=after_tax, tax_rate=tax_rate,
                              keep=keep, chunk_size=chunk_size, cluster=cluster, workers=workers,
                              alternatives_basis=alternatives_basis, study_period=study_period,
                              resume=resume, progress=not quiet)
    from .store.database import connect_read
    con = connect_read(db_path)
    try:
        spec_json = con.execute("SELECT grid_spec FROM runs WHERE run_id = ?", [run_id]).fetchall()[0][0]
    finally:
        con.close()
    spec = json.loads(spec_json)
    if spec.get("weights"):
        click.echo("Note: the scenario weights are your judgement, not a forecast; probabilities of acceptance "
                   "and expected worths rest on them.", err=True)
    if spec.get("after_tax"):
        click.echo("Note: after-tax results assume one tax rate per scenario, losses offset against the firm's "
                   "other income, and the depreciation rules given; tax law varies by jurisdiction and year.",
                   err=True)
    click.echo(CAUTION, err=True)
    click.echo(run_id)


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.argument("name_or_file", required=False)
@click.option("--param", "params", multiple=True, metavar="KEY=VALUE", help="A query parameter. Repeatable.")
@click.option("--format", "fmt", type=click.Choice(["table", "csv", "json"]), default="table", show_default=True)
@click.option("--list", "list_only", is_flag=True, help="List the bundled queries and their parameters.")
def query(db_path, name_or_file, params, fmt, list_only):
    """Run a bundled query by name, or a .sql file, on a read-only connection.

    \b
    Example:
      ratescape query --db plan.duckdb accepted-everywhere
      ratescape query --db plan.duckdb fails-above-inflation --param threshold=0.06 --format csv
      ratescape query --db plan.duckdb --list
    """
    from .query import list_queries, run_query
    if list_only:
        for q in list_queries():
            ps = ", ".join(f"{k}={v[0]}" for k, v in q.params.items())
            click.echo(f"{q.name}: {q.about}" + (f" [{ps}]" if ps else ""))
        return
    if not name_or_file:
        raise click.UsageError("give a query name or a .sql file (see --list)")
    parsed = {}
    for item in params:
        if "=" not in item:
            raise click.UsageError(f"--param {item!r}: expected KEY=VALUE, e.g. --param threshold=0.05")
        k, v = item.split("=", 1)
        parsed[k.strip()] = v.strip()
    frame = run_query(db_path, name_or_file, parsed)
    if fmt == "csv":
        click.echo(frame.write_csv(), nl=False)
    elif fmt == "json":
        click.echo(json.dumps(frame.to_dicts(), default=str, indent=1))
    else:
        import polars as pl
        with pl.Config(tbl_rows=200, tbl_cols=30, fmt_str_lengths=60, tbl_width_chars=200,
                       tbl_hide_dataframe_shape=True, tbl_hide_column_data_types=True):
            click.echo(str(frame))
        click.echo(f"({frame.height} rows)")


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.option("--run", "run_id", help="Run id (default: the newest finished run).")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False), help="HTML file to write.")
@click.option("--project", "projects", multiple=True, help="Project id for drill-down charts. Repeatable.")
def report(db_path, run_id, out_path, projects):
    """Write the self-contained, offline HTML report of a run.

    \b
    Example:
      ratescape report --db plan.duckdb --out report.html
      ratescape report --db plan.duckdb --run run-20261201-101500-ab12cd --project P007 --out report.html
    """
    from .report import write_report
    write_report(db_path, out_path, run_id=run_id, projects=list(projects) or None)
    click.echo(f"Wrote {out_path}")
    click.echo(CAUTION, err=True)


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.argument("kind", type=click.Choice(["acceptance-share", "acceptance-vs-inflation", "rank-stability",
                                           "selection-share", "worth-curve", "worth-surface", "decision-map",
                                           "tornado", "spider"]))
@click.option("--run", "run_id", help="Run id (default: the newest finished run).")
@click.option("--project", "projects", multiple=True, help="Project id for project charts. Repeatable.")
@click.option("--group", help="Group of alternatives for decision-map.")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False),
              help="Output file: .html (offline), .png, .svg or .json (the chart specification).")
def chart(db_path, kind, run_id, projects, group, out_path):
    """Write a single chart of a run.

    \b
    Example:
      ratescape chart --db plan.duckdb worth-curve --project P007 --out p007.html
      ratescape chart --db plan.duckdb decision-map --group fleet-depot --out depot.svg
      ratescape chart --db plan.duckdb acceptance-share --out acceptance.png
    """
    from .report import write_chart
    from .store.database import connect_read
    connect_read(db_path).close()  # clear message when the file is missing or busy
    write_chart(db_path, kind, out_path, run_id=run_id, projects=list(projects) or None, group=group)
    click.echo(f"Wrote {out_path}")


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.option("--run", "run_id", help="Run id (default: the newest finished run).")
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Folder for the Parquet files.")
@click.option("--table", "tables", multiple=True, help="Table to export (default: every table of the run). Repeatable.")
def export(db_path, run_id, out_dir, tables):
    """Export a run's tables as Parquet files (one per table) for other tools.

    \b
    Example:
      ratescape export --db plan.duckdb --out ./run-parquet
      ratescape export --db plan.duckdb --table results --table scenarios --out ./cube
    """
    from .store.export import export_run
    info = export_run(db_path, out_dir, run_id=run_id, tables=list(tables) or None)
    for table, rows in info["tables"].items():
        click.echo(f"{table}: {rows} rows -> {Path(out_dir) / (table + '.parquet')}")


REFERENCE_START = "<!-- cli-reference: generated by ratescape.cli.reference_markdown(); do not edit -->"
REFERENCE_END = "<!-- end of cli-reference -->"


def reference_markdown() -> str:
    """The command-line reference (every subcommand's --help) as Markdown, for DEVELOPERS.md."""
    parts = [REFERENCE_START, ""]
    settings = dict(terminal_width=100, max_content_width=100, help_option_names=["-h", "--help"])
    with click.Context(main, info_name="ratescape", **settings) as top:
        for name in [None, *sorted(main.commands)]:
            if name is None:
                text = main.get_help(top)
            else:
                command = main.commands[name]
                with click.Context(command, info_name=name, parent=top, **settings) as ctx:
                    text = command.get_help(ctx)
            parts += [f"### `ratescape{'' if name is None else ' ' + name}`", "", "```text", text, "```", ""]
    parts.append(REFERENCE_END)
    return "\n".join(parts)
