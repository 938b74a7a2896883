"""Issue 17 (hardening, round two) through the real command: exact messages and exit codes.

Each test reproduces one attack or clumsy case of the issue with CliRunner (or `python -m
ratescape` where a real process is needed) and asserts the exit code, the message and that
nothing the user had was lost.
"""
from __future__ import annotations

import errno
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest

from helpers import cli_load_and_screen, digest, fetch
from helpers import run_cli as run   # tests/ is on sys.path (conftest)

PROJECTS = ("project_id,name,group,first_cost,annual_benefit,benefit_basis,life\n"
            "A,Alpha,,100,30,real,5\nB,Beta,,,,,\nC,Gamma,g,100,28,nominal,5\nD,Delta,g,120,33,real,5\n")
FLOWS = "project_id,period,amount,basis,kind\nB,0,-100,real,\nB,1,230,real,\nB,2,-132,real,\n"
GRID = ["--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3"]


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    """A database with one finished run (built once; tests copy it before changing anything)."""
    d = tmp_path_factory.mktemp("hardening")
    db, run_id = cli_load_and_screen(d, PROJECTS, FLOWS, *GRID)
    return {"dir": d, "db": db, "run": run_id}


@pytest.fixture
def db(screened, tmp_path):
    target = tmp_path / "plan.duckdb"
    shutil.copyfile(screened["db"], target)
    return target


# --- 1. outputs never overwrite the database ---------------------------------------------------

@pytest.mark.parametrize("spelling", ["absolute", "relative", "dotted", "symlink", "wal", "scratch", "inside-scratch"])
@pytest.mark.parametrize("command", ["report", "chart", "export"])
def test_output_onto_the_database_is_refused_however_spelled(screened, tmp_path, monkeypatch, command, spelling):
    # the chart's database is named like a chart file, so only the database check can refuse it
    name = "plan.svg" if command == "chart" else "plan.duckdb"
    db = tmp_path / name
    shutil.copyfile(screened["db"], db)
    monkeypatch.chdir(tmp_path)
    (tmp_path / "sub").mkdir()
    (tmp_path / f"{name}.scratch").mkdir()
    target = {"absolute": str(db), "relative": name, "dotted": f"sub/../{name}", "symlink": "link.svg",
              "wal": f"{name}.wal", "scratch": f"{name}.scratch", "inside-scratch": f"{name}.scratch/x.svg"}[spelling]
    if spelling == "symlink":
        os.symlink(db, tmp_path / "link.svg")
    before = digest(db)
    args = {"report": ["report", "--db", db, "--out", target],
            "chart": ["chart", "--db", db, "acceptance-share", "--out", target],
            "export": ["export", "--db", db, "--out", target]}[command]
    r = run(*args)
    assert r.exit_code == 1
    what = {"wal": "the database's write-ahead log", "scratch": "the database's worth-file folder",
            "inside-scratch": "the database's worth-file folder"}.get(spelling, "the database file itself")
    assert r.stderr.startswith(f"Error: --out {target} is {what} ("), r.stderr
    assert "Fix: choose another output path" in r.stderr
    assert digest(db) == before
    assert fetch(db, "SELECT count(*) FROM runs")[0][0] == 1
    assert sorted(p.name for p in (tmp_path / f"{name}.scratch").iterdir()) == []


def test_report_onto_the_database_names_the_database_and_the_fix(db):
    r = run("report", "--db", db, "--out", db)
    assert r.exit_code == 1
    assert r.stderr == (f"Error: --out {db} is the database file itself ({db.resolve()}); writing there would "
                        "destroy the data. Fix: choose another output path, e.g. --out report.html\n")


# --- 2. a --db that is not a ratescape database ------------------------------------------------

def test_load_into_a_csv_named_as_db_is_refused_and_the_csv_kept(screened, tmp_path):
    other = tmp_path / "notes.csv"
    other.write_text("a,b\n1,2\n")
    before = digest(other)
    r = run("load", "--projects", screened["dir"] / "p.csv", "--db", other)
    assert r.exit_code == 1
    assert r.stderr == (f"Error: --db {other} exists and is not a DuckDB database (no DuckDB header); it was left "
                        "untouched. Fix: give the name of a ratescape database, or a new file name such as "
                        "plan.duckdb\n")
    assert digest(other) == before


def test_load_into_its_own_input_file_is_refused_without_traceback(tmp_path):
    (tmp_path / "p.csv").write_text(PROJECTS)
    before = digest(tmp_path / "p.csv")
    r = run("load", "--projects", tmp_path / "p.csv", "--db", tmp_path / "p.csv")
    assert r.exit_code == 1
    assert "exists and is not a DuckDB database" in r.stderr and "Traceback" not in r.stderr
    assert digest(tmp_path / "p.csv") == before


def test_screen_on_a_duckdb_file_of_another_program_is_refused(tmp_path):
    other = tmp_path / "sales.duckdb"
    con = duckdb.connect(str(other))
    con.execute("CREATE TABLE sales (region VARCHAR, amount DOUBLE)")
    con.execute("INSERT INTO sales VALUES ('north', 10)")
    con.close()
    for args in (["screen", "--db", other, *GRID], ["load", "--projects", _write(tmp_path), "--db", other]):
        r = run(*args)
        assert r.exit_code == 1
        assert "is a DuckDB database made by another program" in r.stderr
        assert "ratescape will not add its tables to it" in r.stderr
    tables = {t[0] for t in fetch(other, "SELECT table_name FROM information_schema.tables")}
    assert tables == {"sales"}


def _write(tmp_path: Path) -> Path:
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_basis,life\nA,Alpha,100,30,real,5\n")
    return tmp_path / "p.csv"


def test_a_schema_version_from_the_future_is_refused_for_reads_and_writes(db):
    con = duckdb.connect(str(db))
    con.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    con.close()
    r = run("query", "--db", db, "runs")
    assert r.exit_code == 1
    assert r.stderr == (f"Error: {db} has schema version 99, newer than this ratescape reads (version 2). "
                        "Fix: use the ratescape version that wrote it, or upgrade ratescape\n")
    r = run("screen", "--db", db, *GRID, "--quiet")
    assert r.exit_code == 1 and "schema version 99" in r.stderr
    r = run("report", "--db", db, "--out", db.parent / "r.html")
    assert r.exit_code == 1 and "schema version 99" in r.stderr
    assert fetch(db, "SELECT value FROM meta WHERE key = 'schema_version'") == [("99",)]


def test_report_on_a_corrupt_database_is_a_message(db, tmp_path):
    data = bytearray(db.read_bytes())
    data[4096:] = b"\xff" * (len(data) - 4096)       # header kept, every block destroyed
    db.write_bytes(bytes(data))
    r = run("report", "--db", db, "--out", tmp_path / "r.html")
    assert r.exit_code == 1
    assert r.stderr.startswith("Error: ") and "Traceback" not in r.stderr
    assert "Fix:" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "r.html").exists()


# --- 5. query time limit and the truth about who holds the file -------------------------------

def test_a_runaway_query_is_stopped_by_the_time_limit(db, tmp_path):
    sql = tmp_path / "forever.sql"
    sql.write_text("WITH RECURSIVE t(n) AS (SELECT 1 UNION ALL SELECT n + 1 FROM t) SELECT max(n) FROM t\n")
    r = run("query", "--db", db, sql, "--timeout", "1")
    assert r.exit_code == 1
    assert r.stderr == ("Error: query 'forever' was stopped after 1 s, its time limit. Fix: narrow the query, or "
                        "give a longer limit with --timeout SECONDS (0 = none)\n")


def test_query_help_documents_the_default_time_limit():
    r = run("query", "--help")
    assert "--timeout SECONDS" in r.output and "[default: 300;" in r.output


def test_a_writer_is_told_truthfully_that_a_reader_holds_the_file(db):
    holder = subprocess.Popen([sys.executable, "-c", "import duckdb, sys, time\n"
                               f"c = duckdb.connect({str(db)!r}, read_only=True)\nprint('open', flush=True)\n"
                               "time.sleep(60)"], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "open"
        r = run("screen", "--db", db, *GRID, "--quiet")
        assert r.exit_code == 1
        assert r.stderr == (f"Error: database busy: {db} is open for reading by process {holder.pid} (a query, "
                            "report, chart or export). Fix: wait for it to finish (or stop it), then run again\n")
    finally:
        holder.kill()
        holder.wait()


def test_report_while_a_writer_holds_the_file_is_a_message(db, tmp_path):
    holder = subprocess.Popen([sys.executable, "-c", "import duckdb, sys, time\n"
                               f"c = duckdb.connect({str(db)!r})\nprint('open', flush=True)\ntime.sleep(60)"],
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "open"
        r = run("report", "--db", db, "--out", tmp_path / "r.html")
        assert r.exit_code == 1
        assert r.stderr.startswith(f"Error: database busy: {db} is open for writing by process {holder.pid}.")
    finally:
        holder.kill()
        holder.wait()


# --- 7. an older run after a reload ------------------------------------------------------------

def test_older_run_after_a_reload_says_the_portfolio_changed(db, screened, tmp_path):
    (tmp_path / "p2.csv").write_text(PROJECTS.replace("Alpha", "Renamed alpha").replace("100,30", "900,31"))
    assert run("load", "--projects", tmp_path / "p2.csv", "--cash-flows", screened["dir"] / "c.csv",
               "--db", db).exit_code == 0
    r = run("query", "--db", db, "runs", "--format", "csv")
    assert r.exit_code == 0
    header, row = r.stdout.splitlines()[:2]
    assert header.endswith(",portfolio") and row.endswith(",portfolio reloaded since this run")
    r = run("query", "--db", db, "accepted-everywhere")
    assert r.exit_code == 0
    assert (f"Note: run {screened['run']}: the portfolio was reloaded after this run was screened: project names "
            "and groups shown are those it screened (kept with the run); today's portfolio may differ") in r.stderr
    assert run("report", "--db", db, "--out", tmp_path / "r.html").exit_code == 0
    page = (tmp_path / "r.html").read_text()
    assert "Portfolio reloaded since this run: the portfolio was reloaded after this run was screened" in page


def test_the_current_run_is_not_marked_reloaded(db, tmp_path):
    r = run("query", "--db", db, "runs", "--format", "csv")
    assert r.stdout.splitlines()[1].endswith(",current")
    assert "reloaded" not in run("query", "--db", db, "accepted-everywhere").stderr
    assert run("report", "--db", db, "--out", tmp_path / "r.html").exit_code == 0
    assert "Portfolio reloaded since this run" not in (tmp_path / "r.html").read_text()


# --- 8. spreadsheet formulas in CSV ------------------------------------------------------------

HOSTILE = ("project_id,name,first_cost,annual_benefit,benefit_basis,life\n"
           "=1+1,=HYPERLINK(\"http://x\"),100,30,real,5\n"
           "@SUM,+cmd,100,31,real,5\n"
           "Q,-2+3,100,32,real,5\n"
           "R,\"\x1b]0;owned\x07\x1b[2Jname\u202etxt\",100,33,real,5\n")


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    db, _ = cli_load_and_screen(tmp_path_factory.mktemp("hostile"), HOSTILE, None, *GRID)
    return db


def test_query_csv_neutralises_formula_cells_but_not_numbers(hostile):
    r = run("query", "--db", hostile, "project-irr", "--format", "csv")
    assert r.exit_code == 0
    lines = r.stdout.splitlines()
    assert "'=1+1,'=HYPERLINK(\"\"http://x\"\")" in r.stdout or "'=1+1,\"'=HYPERLINK(\"\"http://x\"\")\"" in r.stdout
    assert any(line.startswith("'@SUM,'+cmd,") for line in lines)
    assert any(line.startswith("Q,'-2+3,") for line in lines)
    # negative numbers stay numbers (no quote before a minus sign of a numeric column)
    r = run("query", "--db", hostile, "runs", "--format", "csv")
    assert "'" not in r.stdout.split("\n", 1)[1].split(",")[4]


def test_query_raw_csv_writes_cells_as_stored(hostile):
    r = run("query", "--db", hostile, "project-irr", "--format", "csv", "--raw-csv")
    assert any(line.startswith("@SUM,+cmd,") for line in r.stdout.splitlines())


def test_export_csv_neutralises_formula_cells(hostile, tmp_path):
    r = run("export", "--db", hostile, "--format", "csv", "--table", "project_summary", "--out", tmp_path / "x")
    assert r.exit_code == 0, r.stderr
    text = (tmp_path / "x" / "project_summary.csv").read_text()
    assert "\n'=1+1," in text and "\n'@SUM," in text
    assert "\n=1+1," not in text
    pw = [float(line.split(",")[6]) for line in text.splitlines()[1:]]   # pw_min: numbers, some negative
    assert len(pw) == 4


def test_negative_numbers_in_csv_stay_numbers(db, tmp_path):
    sql = tmp_path / "signs.sql"
    sql.write_text("SELECT 'B' AS project_id, -0.72727 AS present_worth, '-5 lines' AS note, -3 AS rank_change\n")
    r = run("query", "--db", db, str(sql), "--format", "csv")
    assert r.exit_code == 0, r.output
    rows = r.stdout.splitlines()
    assert rows[0] == "project_id,present_worth,note,rank_change"
    # numbers stay numbers, negative ones included; a text cell starting with '-' is neutralised
    assert rows[1] == "B,-0.72727,'-5 lines,-3"


# --- 9. terminal control sequences -------------------------------------------------------------

def test_query_table_escapes_control_and_bidirectional_characters(hostile):
    r = run("query", "--db", hostile, "project-irr")
    assert r.exit_code == 0
    assert "\x1b" not in r.stdout and "\x07" not in r.stdout and "\u202e" not in r.stdout
    assert "\\x1b]0;owned\\x07\\x1b[2Jname<U+202E>txt" in r.stdout


def test_json_output_carries_no_raw_escape(hostile):
    r = run("query", "--db", hostile, "project-irr", "--format", "json")
    assert "\x1b" not in r.stdout and "\\u001b]0;owned" in r.stdout


def test_error_messages_escape_control_characters(db):
    r = run("query", "--db", db, "accepted-everywhere", "--param", "run=x\x1b[2J")
    assert r.exit_code == 1
    assert "\x1b" not in r.stderr and "x\\x1b[2J" in r.stderr


# --- clumsy: tracebacks become messages --------------------------------------------------------

def test_chart_to_an_unsupported_suffix_is_refused(db, tmp_path):
    r = run("chart", "--db", db, "acceptance-share", "--out", tmp_path / "a.pdf")
    assert r.exit_code == 1
    assert r.stderr == (f"Error: cannot write a chart as .pdf ({tmp_path / 'a.pdf'}). "
                        "Fix: end --out with .html, .png, .svg or .json\n")


def test_report_into_a_missing_folder_is_refused(db, tmp_path):
    out = tmp_path / "nowhere" / "r.html"
    r = run("report", "--db", db, "--out", out)
    assert r.exit_code == 1
    assert r.stderr == (f"Error: cannot write {out}: its folder {out.parent} does not exist. "
                        f"Fix: create it first (mkdir -p {out.parent}) or choose another --out\n")


def test_report_chart_export_under_a_file_are_messages(db, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    r = run("report", "--db", db, "--out", blocker / "r.html")
    assert r.exit_code == 1 and f"{blocker} is a file, not a folder" in r.stderr
    r = run("chart", "--db", db, "acceptance-share", "--out", blocker / "c.svg")
    assert r.exit_code == 1 and f"{blocker} is a file, not a folder" in r.stderr
    r = run("export", "--db", db, "--out", blocker / "x")
    assert r.exit_code == 1 and "a part of the path is a file, not a folder" in r.stderr
    assert "Traceback" not in r.stderr


@pytest.mark.parametrize("code,why", [(errno.ENOSPC, "the disk is full"),
                                      (errno.EROFS, "the location is read-only or not writable by you")])
def test_report_and_chart_onto_a_full_or_read_only_disk(db, tmp_path, monkeypatch, code, why):
    def refuse(self, data):
        raise OSError(code, os.strerror(code), str(self))
    monkeypatch.setattr(Path, "write_bytes", refuse)
    r = run("report", "--db", db, "--out", tmp_path / "r.html")
    assert r.exit_code == 1
    assert r.stderr.startswith(f"Error: cannot write {tmp_path / 'r.html'}: {why}. Fix: ")
    r = run("chart", "--db", db, "acceptance-share", "--out", tmp_path / "c.json")
    assert r.exit_code == 1 and why in r.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.duckdb"]


def test_export_onto_a_full_disk_leaves_no_partial_folder(db, tmp_path, monkeypatch):
    import ratescape.store.export as export

    original = export._move_into_place

    def full(staging, out):
        assert len(list(staging.iterdir())) >= 1            # some files were already written
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(out))
    monkeypatch.setattr(export, "_move_into_place", full)
    r = run("export", "--db", db, "--out", tmp_path / "x")
    assert r.exit_code == 1
    assert r.stderr.startswith(f"Error: cannot write {tmp_path / 'x'}: the disk is full. Fix: ")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.duckdb"]
    monkeypatch.setattr(export, "_move_into_place", original)
    assert run("export", "--db", db, "--out", tmp_path / "x").exit_code == 0
    assert (tmp_path / "x" / "results.parquet").is_file()


def test_a_screen_that_runs_out_of_disk_fails_with_one_line(db, monkeypatch):
    from ratescape.store import worth_files

    def full(target, values):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(target))
    monkeypatch.setattr(worth_files.WorthFiles, "_write_file", staticmethod(full))
    r = run("screen", "--db", db, *GRID, "--quiet")
    assert r.exit_code == 1
    errors = [line for line in r.stderr.strip().splitlines() if not line.startswith("run run-")]
    assert errors == [f"Error: the disk is full: the screen could not write its worth file {errors[0].split('worth file ')[1].split('. Fix')[0]}. "
                      "Fix: free disk space (the worth files of a run take about 8 bytes per project and scenario) "
                      "and start the run again with `ratescape screen` (the run is marked failed)"], r.stderr
    assert ".scratch/" in errors[0] and "Traceback" not in r.stderr
    assert fetch(db, "SELECT status FROM runs ORDER BY started_at DESC LIMIT 1") == [("failed",)]


def test_worth_file_folder_deleted_during_a_run_is_a_message(db, monkeypatch):
    from ratescape.store import worth_files

    original = worth_files.WorthFiles._write_file

    def vanish(target, values):
        shutil.rmtree(Path(target).parent, ignore_errors=True)
        original(target, values)
    monkeypatch.setattr(worth_files.WorthFiles, "_write_file", staticmethod(vanish))
    r = run("screen", "--db", db, *GRID, "--quiet")
    assert r.exit_code == 1
    errors = [line for line in r.stderr.strip().splitlines() if not line.startswith("run run-")]
    assert len(errors) == 1 and errors[0].startswith("Error: the run's worth-file folder was removed or cannot be "
                                                     "used while the screen needed it"), r.stderr
    assert "Traceback" not in r.stderr
    assert fetch(db, "SELECT status FROM runs ORDER BY started_at DESC LIMIT 1") == [("failed",)]


# --- clumsy: silence ---------------------------------------------------------------------------

def test_query_for_a_run_that_does_not_exist_says_so(db):
    r = run("query", "--db", db, "accepted-everywhere", "--param", "run=run-nope")
    assert r.exit_code == 1
    assert r.stderr == ("Error: no run 'run-nope' in this database. Fix: list runs with `ratescape query --db DB "
                        "runs`, or leave out --param run (the newest)\n")


def test_symlinked_sql_parse_error_shows_only_the_name(db, tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("hunter2 is the password\n")
    link = tmp_path / "q.sql"
    os.symlink(secret, link)
    r = run("query", "--db", db, link)
    assert r.exit_code == 1
    assert r.stderr == (f"Error: {link}: the query does not parse as SQL. Fix: check the file's SQL (run it in a "
                        "DuckDB shell to see where)\n")
    assert "hunter2" not in r.stderr


# --- first-time user -------------------------------------------------------------------------

def test_table_output_shows_money_with_separators_and_no_scientific_notation(tmp_path):
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_basis,life\n"
                                    "BIG,Big one,1.5e9,4e8,real,10\n")
    db = tmp_path / "plan.duckdb"
    assert run("load", "--projects", tmp_path / "p.csv", "--db", db).exit_code == 0
    assert run("screen", "--db", db, *GRID, "--quiet").exit_code == 0
    r = run("query", "--db", db, "accepted-everywhere")
    pw_base = fetch(db, "SELECT pw_base FROM project_summary")[0][0]
    assert f"{round(pw_base, 2):,}".rstrip("0").rstrip(".") in r.stdout
    assert "e+" not in r.stdout and "e9" not in r.stdout


def test_long_names_are_not_cut_in_csv_or_json(tmp_path):
    long = "A very long project name " * 8
    (tmp_path / "p.csv").write_text(f"project_id,name,first_cost,annual_benefit,benefit_basis,life\n"
                                    f"L,{long.strip()},100,40,real,5\n")
    db = tmp_path / "plan.duckdb"
    assert run("load", "--projects", tmp_path / "p.csv", "--db", db).exit_code == 0
    assert run("screen", "--db", db, *GRID, "--quiet").exit_code == 0
    assert long.strip() in run("query", "--db", db, "accepted-everywhere", "--format", "csv").stdout
    got = json.loads(run("query", "--db", db, "accepted-everywhere", "--format", "json").stdout)
    assert got[0]["name"] == long.strip()


def test_query_list_shows_each_parameter_with_its_meaning():
    r = run("query", "--db", "unused.duckdb", "--list")
    assert r.exit_code == 0
    assert ("project-irr: Internal rates of return per project and inflation level" in r.stdout)
    assert ("    --param inflation=VALUE  inflation level, fraction per year; the nearest grid level is used "
            "(default 0.03)") in r.stdout


def test_a_percent_parameter_gets_the_fraction_it_meant(db):
    r = run("query", "--db", db, "fails-above-inflation", "--param", "threshold=6%")
    assert r.exit_code == 1
    assert r.stderr == ("Error: --param threshold=6%: rates are fractions, and 6% is 0.06. "
                        "Fix: --param threshold=0.06\n")


def test_picks_are_said_on_standard_error(db, screened, tmp_path):
    r = run("query", "--db", db, "project-irr", "--param", "inflation=0.03")
    assert r.exit_code == 0
    assert (f"Note: run {screened['run']} (the newest finished run; give --param run=RUN_ID for another)"
            in r.stderr)
    assert "Note: inflation 0.03 is not a level of the run's grid; showing the nearest level, 0.05" in r.stderr
    r = run("chart", "--db", db, "worth-curve", "--out", tmp_path / "w.json")
    assert r.exit_code == 0, r.stderr
    assert "Note: no --project given: charted project '" in r.stderr


def test_chart_help_keeps_kind_names_whole():
    r = run("chart", "--help")
    for kind in ("acceptance-vs-inflation", "rank-stability", "selection-share", "decision-map"):
        assert kind in r.output
    for line in r.output.splitlines():
        assert not line.rstrip().endswith("-"), line


def test_project_id_case_mismatch_gets_did_you_mean(db, tmp_path):
    r = run("chart", "--db", db, "worth-curve", "--project", "c", "--out", tmp_path / "w.json")
    assert r.exit_code == 1
    assert r.stderr == (f"Error: no project 'c' in {db}; did you mean 'C'? "
                        "Fix: project ids are matched exactly, case included\n")
    r = run("report", "--db", db, "--project", "a", "--out", tmp_path / "r.html")
    assert r.exit_code == 1 and "did you mean 'A'?" in r.stderr


def test_irr_roots_column_reads_plainly(db):
    r = run("query", "--db", db, "project-irr", "--format", "csv", "--quiet")
    header = r.stdout.splitlines()[0].split(",")
    assert "real_irr_roots" in header and "all_real_roots" not in header


@pytest.mark.parametrize("args", [
    ["query", "project-irr", "--quiet"],
    ["report", "--quiet", "--out", "{tmp}/r.html"],
    ["export", "--quiet", "--out", "{tmp}/x"],
    ["chart", "acceptance-share", "--quiet", "--out", "{tmp}/c.json"],
])
def test_quiet_prints_nothing_but_errors(db, tmp_path, args):
    args = [a.replace("{tmp}", str(tmp_path)) for a in args]
    r = run(args[0], "--db", db, *args[1:])
    assert r.exit_code == 0
    assert r.stderr == ""
    if args[0] != "query":
        assert r.stdout == ""
    else:
        assert "rows)" not in r.stdout and "A" in r.stdout


def test_output_onto_the_log_of_a_database_given_through_a_link_is_refused(db, tmp_path):
    link = tmp_path / "alias.duckdb"
    os.symlink(db, link)
    r = run("report", "--db", link, "--out", tmp_path / "alias.duckdb.wal")
    assert r.exit_code == 1
    assert "is the database's write-ahead log" in r.stderr
    assert not (tmp_path / "alias.duckdb.wal").exists()
