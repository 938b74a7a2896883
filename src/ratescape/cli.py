"""The ``ratescape`` command line: a thin layer over the library, one function per subcommand."""
from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from . import __version__
from .caution import CAUTION
from .errors import RatescapeError



def _fail(exc) -> None:
    from .store.outputs import terminal_safe
    click.echo(f"Error: {terminal_safe(str(exc))}", err=True)
    sys.exit(1)


def _interrupted(exc: BaseException) -> None:
    from .errors import interruption_exit_code
    code, name = interruption_exit_code(exc)
    click.echo("Interrupted." if name == "SIGINT" else f"Interrupted ({name}).", err=True)
    sys.exit(code)


def _os_error(exc: OSError) -> str:
    import errno

    from .store.outputs import os_error_message
    name = exc.filename or "a file"
    if exc.errno == errno.ENOSPC and ".scratch" in str(name):
        return (f"the disk is full: the screen could not write its worth file {name}. Fix: free disk space "
                "(the worth files of a run take about 8 bytes per project and scenario) and start the run "
                "again with `ratescape screen` (the run is marked failed)")
    if ".scratch" in str(name):
        return (f"the run's worth-file folder was removed or cannot be used while the screen needed it ({name}: "
                f"{exc.strerror}). Fix: leave DB.scratch alone while a screen runs, free disk space if it is "
                "full, and start the run again with `ratescape screen` (the run is marked failed)")
    return os_error_message(exc, name, "use")


class Command(click.Command):
    """Turn user-fixable errors into ``Error: ...`` and a non-zero exit, never a traceback.

    Ctrl-C, SIGTERM and SIGHUP end with "Interrupted." and exit 130, 143 and 129; the operating
    system's refusals (disk full, read-only location, missing folder) and a database DuckDB cannot
    read are one line each with the fix.
    """

    def invoke(self, ctx):
        import duckdb

        from .store.database import is_interrupt
        try:
            return super().invoke(ctx)
        except RatescapeError as exc:
            _fail(exc)
        except KeyboardInterrupt as exc:
            _interrupted(exc)
        except OSError as exc:
            _fail(_os_error(exc))
        except Exception as exc:   # DuckDB's forms of Ctrl-C during a query, and damaged databases
            if is_interrupt(exc):
                _interrupted(exc)
            if isinstance(exc, duckdb.Error) and "file too large" in str(exc).lower():
                _fail(f"the database file reached the file-size limit of this process (ulimit -f) while "
                      f"writing ({str(exc).splitlines()[0]}); the write was rolled back and the database holds "
                      "what it held before. Fix: raise the limit (ulimit -f unlimited) or free the quota, then "
                      "run the command again")
            if isinstance(exc, duckdb.Error):
                _fail(f"the database could not be read or written ({str(exc).splitlines()[0]}). Fix: if the "
                      "disk is full, free space; if the file is damaged, restore it from a copy or load the "
                      "portfolio into a new database")
            if isinstance(exc, MemoryError):
                _fail("out of memory. Fix: give a smaller grid or --chunk-size, or use a larger machine")
            raise


def _note(message: str, quiet: bool = False) -> None:
    """A line on standard error saying what the command chose or noticed (not with --quiet)."""
    if not quiet:
        from .store.outputs import terminal_safe
        click.echo(f"Note: {terminal_safe(message)}", err=True)


def _check_project_ids(db_path, projects) -> None:
    """Refuse a project id the database lacks when it differs from a known one only in case or
    Unicode form, with "did you mean"; other unknown ids are left to the command's own message."""
    if not projects:
        return
    import unicodedata

    from .store.database import connect_read

    con = connect_read(db_path)
    try:
        known = {r[0] for r in con.execute("SELECT project_id FROM projects UNION "
                                           "SELECT DISTINCT project_id FROM project_summary").fetchall()}
    finally:
        con.close()

    def fold(text: str) -> str:
        return unicodedata.normalize("NFKC", text).casefold().strip()

    folded = {}
    for k in sorted(known):
        folded.setdefault(fold(k), k)
    for pid in projects:
        if pid not in known and fold(pid) in folded:
            raise RatescapeError(f"no project {pid!r} in {db_path}; did you mean {folded[fold(pid)]!r}? "
                                 "Fix: project ids are matched exactly, case included")


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
@click.option("--allow-extreme-rates", is_flag=True,
              help="Accept escalation and loan rates above 100 % (|rate| > 1), refused otherwise as percentage "
                   "typos (2 written for 0.02).")
def load(projects_path, cash_flows_path, db_path, allow_extreme_rates):
    """Validate the CSV files and load them into the database.

    Every problem is reported at once (file, line, column, value, fix); an
    invalid input writes nothing. A valid load replaces the database's
    portfolio in one transaction; earlier runs stay.

    \b
    Example:
      ratescape load --projects projects.csv --cash-flows cash_flows.csv --db plan.duckdb
    """
    from .api import load_portfolio
    from .store.database import check_database_file
    check_database_file(db_path)        # refuse a CSV (or any non-database) as --db before reading anything
    info = load_portfolio(projects_path, cash_flows_path, db_path, allow_extreme_rates=allow_extreme_rates)
    for note in info["notes"]:
        click.echo(f"Note: {note}", err=True)
    click.echo(f"Loaded {info['projects']} projects and {info['cash_flow_rows']} cash-flow lines into {db_path}.")


RANGE_HELP = "START:STOP:COUNT, one value or a list (see RANGES above)"


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.option("--grid", "grid_path", type=click.Path(dir_okay=False),
              help="Grid and run settings (TOML, a regular file of at most 1 MB).")
@click.option("--discount-rates", metavar="RANGE", help=f"Discount rates as fractions: {RANGE_HELP}. Default 0:0.2:41.")
@click.option("--inflation", metavar="RANGE", help=f"General inflation rates as fractions: {RANGE_HELP}. Default 0:0.1:21.")
@click.option("--discount-basis", type=click.Choice(["nominal", "real"]), help="Whether the discount-rate axis is nominal (market) or real.")
@click.option("--budget", "budgets", multiple=True, metavar="PERIOD=AMOUNT",
              help="Most the investment lines of PERIOD may spend (then-current money). Repeatable.")
@click.option("--timing", type=click.Choice(["end", "mid", "beginning"]), help="When in a period cash flows fall (default end).")
@click.option("--periods-per-year", type=float, help="Periods per year: 1 = years (default), 4 = quarters, 12 = months, "
                                                     "at most 365.")
@click.option("--after-tax/--before-tax", default=None,
              help="Screen after-tax cash flows (before-tax worth is stored beside them).")
@click.option("--tax-rate", metavar="RANGE", help="Income-tax rate(s) as fractions: 0.25, or a range as a grid axis. "
                                                  "Implies --after-tax.")
@click.option("--state-tax-rate", help="State (provincial) income-tax rate as a fraction; with --federal-tax-rate "
              "the tax axis carries the combined rate t_s + t_f (1 - t_s). Not with --tax-rate. Implies --after-tax.")
@click.option("--federal-tax-rate", help="Federal income-tax rate as a fraction (see --state-tax-rate).")
@click.option("--losses", type=click.Choice(["offset", "carry-forward"]),
              help="A project's tax losses: offset the firm's other income that year (default) or, for a "
                   "stand-alone project, carried forward to its later profits.")
@click.option("--allow-extreme-rates", is_flag=True,
              help="Accept rates above 100 % (|rate| > 1; tax rates of 1 or more), refused otherwise as "
                   "percentage typos (3 written for 0.03). For hyperinflation studies.")
@click.option("--chunk-size", type=click.IntRange(min=1, max=10_000_000), help="Projects per chunk (default: from memory).")
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
@click.option("--workers", type=click.IntRange(min=1, max=256), help="Evaluate chunks on a local Dask cluster of N processes.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors and the run id.")
def screen(db_path, grid_path, discount_rates, inflation, discount_basis, budgets, timing, periods_per_year,
           after_tax, tax_rate, state_tax_rate, federal_tax_rate, losses, allow_extreme_rates, chunk_size, keep,
           alternatives_basis, study_period, resume, cluster, workers, quiet):
    """Evaluate every project in every scenario of the grid and store the results.

    Rates are fractions (0.07 = 7 %); a rate above 1 in size (or a tax rate
    of 1 or more) is refused as a percentage typo unless
    --allow-extreme-rates is given. Flags override the TOML file. The
    resolved axes (first, last, count, step) are printed on standard error
    before the run starts; the run id is printed on the last line of
    standard output; progress and logs go to standard error.

    \b
    RANGES (--discount-rates, --inflation, --tax-rate):
      0:0.2:41        41 values from 0 to 0.2, both ends included (step 0.005)
      0.02:0.08:4     4 values from 0.02 to 0.08: 0.02, 0.04, 0.06, 0.08
      0.07            one value, 0.07
      0.03,0.05,0.07  the 3 values listed
    In the grid TOML: { start = 0.0, stop = 0.2, count = 41 }, { values =
    [0.03, 0.05] }, a list [0.03, 0.05], a number 0.07 or a range text
    "0:0.2:41".

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
                                                periods_per_year, after_tax, tax_rate, keep, state_tax_rate,
                                               federal_tax_rate, losses, alternatives_basis, study_period))
                   or bool(budgets) or allow_extreme_rates):
        raise click.UsageError("--resume continues a run with its stored grid; give no grid options with it")
    spec = None
    if not resume:
        from .grid import base_values, build_scenarios
        from .settings import describe_axes, make_run_settings, parse_budget, read_settings_toml
        spec = make_run_settings(toml_settings=read_settings_toml(grid_path) if grid_path else None,
                                 discount_rates=discount_rates, inflation=inflation, discount_basis=discount_basis,
                                 budgets=parse_budget(budgets) if budgets else None, timing=timing,
                                 periods_per_year=periods_per_year, after_tax=after_tax, tax_rate=tax_rate,
                                 keep=keep, allow_extreme_rates=allow_extreme_rates, state_tax_rate=state_tax_rate,
                                 federal_tax_rate=federal_tax_rate, losses=losses,
                                 alternatives_basis=alternatives_basis, study_period=study_period)
        if not quiet:
            for line in describe_axes(spec, base_values(spec, build_scenarios(spec))):
                click.echo(line, err=True)
    if quiet:
        from .run.progress import quiet_logs
        with quiet_logs():
            run_id = screen_portfolio(db_path, settings=spec, chunk_size=chunk_size, cluster=cluster,
                                      workers=workers, resume=resume, progress=False)
        click.echo(run_id)
        return
    run_id = screen_portfolio(db_path, settings=spec, chunk_size=chunk_size, cluster=cluster, workers=workers,
                              resume=resume, progress=True)
    from .store.database import connect_read
    con = connect_read(db_path)
    try:
        spec_json = con.execute("SELECT grid_spec FROM runs WHERE run_id = ?", [run_id]).fetchall()[0][0]
    finally:
        con.close()
    stored = json.loads(spec_json)
    if stored.get("weights"):
        click.echo("Note: the scenario weights are your judgement, not a forecast; probabilities of acceptance "
                   "and expected worths rest on them.", err=True)
    if stored.get("after_tax"):
        carried = (stored.get("tax") or {}).get("losses") == "carry-forward"
        click.echo("Note: after-tax results assume one tax rate per scenario, "
                   + ("each project's losses carried forward to its own later profits"
                      if carried else "losses offset against the firm's other income")
                   + ", and the depreciation rules given; tax law varies by jurisdiction and year.", err=True)
    click.echo(CAUTION, err=True)
    click.echo(run_id)


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.argument("name_or_file", required=False)
@click.option("--param", "params", multiple=True, metavar="KEY=VALUE",
              help="A query parameter; rates as fractions (0.06, not 6%). Repeatable.")
@click.option("--format", "fmt", type=click.Choice(["table", "csv", "json"]), default="table", show_default=True)
@click.option("--list", "list_only", is_flag=True, help="List the bundled queries and their parameters.")
@click.option("--timeout", type=click.FloatRange(min=0), default=300, show_default=True, metavar="SECONDS",
              help="Stop a query that runs longer than this (0 = no limit).")
@click.option("--raw-csv", is_flag=True,
              help="CSV cells as stored: no quote prefix on text beginning with = + - @ tab or carriage return.")
@click.option("--quiet", is_flag=True, help="No notes and no row count; the result and errors only.")
def query(db_path, name_or_file, params, fmt, list_only, timeout, raw_csv, quiet):
    """Run a bundled query by name, or a .sql file, on a read-only connection.

    A query running longer than --timeout seconds is stopped. In CSV output a
    text cell beginning with = + - @, a tab or a carriage return gets a leading
    ' so a spreadsheet shows it as text instead of running it as a formula
    (--raw-csv turns this off); numbers are not changed. Table output shows
    control characters, bidirectional overrides and invisible characters as
    escapes (\x1b, <U+202E>).

    \b
    Example:
      ratescape query --db plan.duckdb accepted-everywhere
      ratescape query --db plan.duckdb fails-above-inflation --param threshold=0.06 --format csv
      ratescape query --db plan.duckdb --list
    """
    from .query import list_queries, run_query
    from .store.outputs import terminal_safe
    if list_only:
        for q in list_queries():
            click.echo(terminal_safe(f"{q.name}: {q.about}"))
            for key, (default, meaning) in q.params.items():
                click.echo(terminal_safe(f"    --param {key}=VALUE  {meaning or 'no description'} (default {default})"))
        return
    if not name_or_file:
        raise click.UsageError("give a query name or a .sql file (see --list)")
    parsed = {}
    for item in params:
        if "=" not in item:
            raise click.UsageError(f"--param {item!r}: expected KEY=VALUE, e.g. --param threshold=0.05")
        k, v = item.split("=", 1)
        parsed[k.strip()] = v.strip()
    frame = run_query(db_path, name_or_file, parsed, timeout=timeout or None)
    _query_notes(db_path, name_or_file, parsed, frame, quiet)
    if fmt == "csv":
        from .store.outputs import neutralise_frame
        click.echo((frame if raw_csv else neutralise_frame(frame)).write_csv(), nl=False)
    elif fmt == "json":
        click.echo(json.dumps(frame.to_dicts(), default=str, indent=1))
    else:
        click.echo(table_for_terminal(frame))
        if not quiet:
            click.echo(f"({frame.height} rows)")


def table_for_terminal(frame) -> str:
    """A frame as a text table: control characters escaped, money with thousands separators, no
    scientific notation (amounts of 1,000 or more to the cent, smaller values in full)."""
    import polars as pl

    from .store.outputs import terminal_safe
    exprs = []
    for name, dtype in frame.schema.items():
        col = pl.col(name)
        if dtype == pl.Utf8:
            exprs.append(col.map_elements(terminal_safe, return_dtype=pl.Utf8))
        elif dtype.is_float():
            exprs.append(pl.when(col.abs() >= 1000).then(col.round(2)).otherwise(col).alias(name))
    shown = frame.with_columns(exprs) if exprs else frame
    shown = shown.rename({c: terminal_safe(c) for c in shown.columns})
    with pl.Config(tbl_rows=200, tbl_cols=30, fmt_str_lengths=60, tbl_width_chars=200, thousands_separator=",",
                   fmt_float="full", tbl_hide_dataframe_shape=True, tbl_hide_column_data_types=True):
        return terminal_safe(str(shown))


def _query_notes(db_path, name_or_file, params, frame, quiet) -> None:
    """Say on standard error what the query chose for the user: the run, the nearest grid level,
    and whether the portfolio was reloaded since the run."""
    if quiet:
        return
    from .query import find_query, latest_run
    from .store.database import connect_read, reloaded_note
    q = find_query(name_or_file)
    if "run" not in q.params:
        return
    con = connect_read(db_path)
    try:
        given = params.get("run", q.params["run"][0])
        run_id = latest_run(con) if given in ("latest", "") else given
        if given in ("latest", ""):
            _note(f"run {run_id} (the newest finished run; give --param run=RUN_ID for another)")
        note = reloaded_note(con, run_id)
        if note:
            _note(f"run {run_id}: {note}")
    finally:
        con.close()
    for key in q.params:
        if key == "run" or key not in frame.columns or frame.height == 0:
            continue
        try:
            asked = float(params.get(key, q.params[key][0]))
        except ValueError:
            continue
        levels = frame.get_column(key).unique().to_list()
        if len(levels) == 1 and levels[0] is not None and abs(float(levels[0]) - asked) > 1e-12:
            _note(f"{key} {asked:g} is not a level of the run's grid; showing the nearest level, {levels[0]:g}")


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.option("--run", "run_id", help="Run id (default: the newest finished run).")
@click.option("--out", "out_path", required=True, type=click.Path(), help="HTML file to write.")
@click.option("--project", "projects", multiple=True,
              help="Project id always embedded with its drill-down (the first opens on load). Repeatable.")
@click.option("--compare-to", "compare_to", metavar="RUN_ID",
              help="An earlier run of the same database: adds the section 'What changed since run RUN_ID'.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
def report(db_path, run_id, out_path, projects, compare_to, quiet):
    """Write the self-contained, offline HTML report of a run.

    --out may not be the database, its write-ahead log (DB.wal) or its
    worth-file folder (DB.scratch), however the path is spelled.

    \b
    Example:
      ratescape report --db plan.duckdb --out report.html
      ratescape report --db plan.duckdb --run run-20261201-101500-ab12cd --project P007 --out report.html
      ratescape report --db plan.duckdb --compare-to run-20261130-090000-aa11bb --out report.html
    """
    from .report import write_report
    from .store.outputs import check_output_path
    check_output_path(db_path, out_path)
    _check_project_ids(db_path, projects)
    write_report(db_path, out_path, run_id=run_id, projects=list(projects) or None, compare_to=compare_to)
    if not quiet:
        click.echo(f"Wrote {out_path}")
        click.echo(CAUTION, err=True)


CHART_KINDS = ["acceptance-share", "acceptance-vs-inflation", "rank-stability", "selection-share", "worth-curve",
               "worth-surface", "decision-map", "tornado", "spider"]


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.argument("kind", type=click.Choice(CHART_KINDS), metavar="KIND")
@click.option("--run", "run_id", help="Run id (default: the newest finished run).")
@click.option("--project", "projects", multiple=True, help="Project id for project charts. Repeatable.")
@click.option("--group", help="Group of alternatives for decision-map.")
@click.option("--out", "out_path", required=True, type=click.Path(),
              help="Output file: .html (offline), .png, .svg or .json (the chart specification).")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
def chart(db_path, kind, run_id, projects, group, out_path, quiet):
    """Write a single chart of a run.

    \b
    KIND is one of:
      acceptance-share         acceptance-vs-inflation
      rank-stability           selection-share
      worth-curve              worth-surface
      decision-map             tornado
      spider

    \b
    Example:
      ratescape chart --db plan.duckdb worth-curve --project P007 --out p007.html
      ratescape chart --db plan.duckdb decision-map --group fleet-depot --out depot.svg
      ratescape chart --db plan.duckdb acceptance-share --out acceptance.png
    """
    from .report import write_chart
    from .report.chart_files import check_chart_suffix
    from .store.database import connect_read
    from .store.outputs import check_output_path
    check_output_path(db_path, out_path)
    check_chart_suffix(out_path)
    connect_read(db_path).close()  # clear message when the file is missing or busy
    _check_project_ids(db_path, projects)
    write_chart(db_path, kind, out_path, run_id=run_id, projects=list(projects) or None, group=group,
                on_pick=lambda message: _note(message, quiet))
    if not quiet:
        click.echo(f"Wrote {out_path}")


@main.command(cls=Command)
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="DuckDB database file.")
@click.option("--run", "run_id", help="Run id (default: the newest finished run).")
@click.option("--out", "out_dir", required=True, type=click.Path(), help="Folder for the files.")
@click.option("--table", "tables", multiple=True, help="Table to export (default: every table of the run). Repeatable.")
@click.option("--format", "fmt", type=click.Choice(["parquet", "csv"]), default="parquet", show_default=True,
              help="File format (CSV text cells that a spreadsheet would run as formulas get a leading ').")
@click.option("--raw-csv", is_flag=True, help="CSV cells as stored, without the quote prefix.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
def export(db_path, run_id, out_dir, tables, fmt, raw_csv, quiet):
    """Export a run's tables as Parquet (or CSV) files, one per table, for other tools.

    The files are written into a temporary folder and moved into --out when
    all are written: a failure leaves no partial folder.

    \b
    Example:
      ratescape export --db plan.duckdb --out ./run-parquet
      ratescape export --db plan.duckdb --table results --table scenarios --out ./cube
      ratescape export --db plan.duckdb --format csv --out ./run-csv
    """
    from .store.export import export_run
    info = export_run(db_path, out_dir, run_id=run_id, tables=list(tables) or None, fmt=fmt, raw_csv=raw_csv)
    if not quiet:
        for table, rows in info["tables"].items():
            click.echo(f"{table}: {rows} rows -> {Path(out_dir) / (table + '.' + fmt)}")


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
