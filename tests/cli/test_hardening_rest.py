"""Issue 17, the items finished last, through the real command: exact messages and exit codes.

* item 7: an older run keeps the names of the portfolio it screened (``run_projects``);
* item 6: a value that is not finite is stored as NULL with a status that says why;
* a load stopped by a file-size limit (``ulimit -f``) is an error, not "Loaded";
* one project requiring 20,000 others: memory linear in the count;
* SIGTERM during ``load`` and ``report``: exit 143, nothing half-written.
"""
from __future__ import annotations

import hashlib
import os
import resource
import shutil
import signal
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from ratescape.cli import main

SRC = str(Path(__file__).resolve().parents[2] / "src")


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def fetch(db: Path, sql: str, params=()):
    con = duckdb.connect(str(db), read_only=True)
    try:
        return con.execute(sql, list(params)).fetchall()
    finally:
        con.close()


# --- one project requiring 20,000 others: memory linear in the count ----------------------------

HUB_COUNT = 20_000


def _hub_portfolio(path: Path, n: int) -> None:
    lines = ["project_id,name,first_cost,annual_benefit,benefit_basis,life,requires",
             "HUB,Hub,100,30,real,5," + ";".join(f"P{i}" for i in range(n))]
    lines += [f"P{i},Project {i},100,{20 + i % 17},real,5," for i in range(n)]
    path.write_text("\n".join(lines) + "\n")


def test_a_project_requiring_20000_others_loads_and_screens_in_linear_memory(tmp_path):
    _hub_portfolio(tmp_path / "p.csv", HUB_COUNT)
    db = tmp_path / "plan.duckdb"
    tracemalloc.start()
    try:
        r = run("load", "--projects", tmp_path / "p.csv", "--db", db)
        assert r.exit_code == 0, r.output
        assert r.stdout.startswith(f"Loaded {HUB_COUNT + 1} projects")
        _, load_peak = tracemalloc.get_traced_memory()
        tracemalloc.reset_peak()
        # a budget for half the portfolio: capital rationing with the 20,000 'requires' pairs
        r = run("screen", "--db", db, "--discount-rates", "0.05:0.1:2", "--inflation", "0:0.02:2",
                "--budget", "0=1e6", "--quiet")
        _, screen_peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert r.exit_code == 0, r.output
    run_id = r.stdout.strip().splitlines()[-1]
    # the hub needs every other project, and the budget (1e6 of 2.0e6) cannot buy them all:
    # no scenario selects it, every selection respects it
    assert fetch(db, "SELECT count(*) FROM selections WHERE run_id = ? AND project_id = 'HUB'", [run_id]) == [(0,)]
    assert fetch(db, "SELECT min(projects_selected), max(projects_selected) FROM portfolios WHERE run_id = ?",
                 [run_id]) == [(10_000, 10_000)]
    # Loose bound, linear in the count: 20 kB per required project (400 MB). The padded
    # prerequisite table this replaces alone took 8 bytes x 20,001 x 20,000 = 3.2 GB (measured
    # before: 4.06 GB peak resident for this screen, 0.50 GB after).
    bound = 20_000 * HUB_COUNT
    assert load_peak < bound, load_peak
    assert screen_peak < bound, screen_peak


def test_a_cycle_through_20000_projects_is_reported_where_it_starts(tmp_path):
    n = HUB_COUNT
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_basis,life,requires\n" + "".join(
        f"P{i},Project {i},100,30,real,5,P{(i + 1) % n}\n" for i in range(n)))
    db = tmp_path / "plan.duckdb"
    r = run("load", "--projects", tmp_path / "p.csv", "--db", db)
    assert r.exit_code == 1
    assert r.stderr == (
        "Error: 1 problem found in the input; nothing was written.\n"
        f"  {tmp_path / 'p.csv'}, line 2, column 'requires': 'requires' dependencies form a cycle (value "
        "'P0 -> P1 -> P2 -> P3 -> P4 -> P5 -> P6 -> P7 -> P8 -> P9 ...'). Fix: break the cycle: a project "
        "cannot depend on itself through others\n")
    assert not db.exists()


# --- item 7: an older run names the portfolio it screened ---------------------------------------

# names no other text of a report contains (its script has words like "globalAlpha")
PROJECTS = ("project_id,name,group,first_cost,annual_benefit,benefit_basis,life\n"
            "A,Quillonby,,100,60,real,5\nB,Brackenfold,,100,5,real,5\nC,Cindermoor,g,100,28,nominal,5\n"
            "D,Dunlowe,g,120,33,real,5\n")
RENAMED = {"Quillonby": "Ferncastle", "Brackenfold": "Gildmarsh", "Cindermoor": "Hollowmere", "Dunlowe": "Ivorydale"}
GRID = ["--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3"]


def _renamed(text: str) -> str:
    for old, new in RENAMED.items():
        text = text.replace(old, new)
    return text


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    """Load, screen, reload the same ids under new names, screen again."""
    d = tmp_path_factory.mktemp("snapshot")
    (d / "p.csv").write_text(PROJECTS)
    (d / "p2.csv").write_text(_renamed(PROJECTS))
    db = d / "plan.duckdb"
    assert run("load", "--projects", d / "p.csv", "--db", db).exit_code == 0
    first = run("screen", "--db", db, *GRID, "--quiet")
    assert first.exit_code == 0, first.output
    assert run("load", "--projects", d / "p2.csv", "--db", db).exit_code == 0
    second = run("screen", "--db", db, *GRID, "--quiet")
    assert second.exit_code == 0, second.output
    return {"dir": d, "db": db, "old": first.stdout.strip().splitlines()[-1],
            "new": second.stdout.strip().splitlines()[-1]}


@pytest.mark.parametrize("query", ["rank-movers", "accepted-everywhere", "project-irr", "switching-values"])
def test_an_older_run_names_the_projects_it_screened(two_runs, query):
    names = {}
    for which in ("old", "new"):
        r = run("query", "--db", two_runs["db"], query, "--param", f"run={two_runs[which]}", "--format", "csv")
        assert r.exit_code == 0, r.output
        header, *rows = r.stdout.splitlines()
        assert header.split(",")[:2] == ["project_id", "name"]
        names[which] = {row.split(",")[1] for row in rows}
        assert names[which], r.stdout
    assert names["old"] <= set(RENAMED), names
    assert names["new"] <= set(RENAMED.values()), names


def test_the_older_run_says_the_portfolio_changed_and_the_names_are_its_own(two_runs):
    r = run("query", "--db", two_runs["db"], "rank-movers", "--param", f"run={two_runs['old']}")
    assert r.exit_code == 0
    assert (f"Note: run {two_runs['old']}: the portfolio was reloaded after this run was screened: project names "
            "and groups shown are those it screened (kept with the run); today's portfolio may differ") in r.stderr
    r = run("query", "--db", two_runs["db"], "rank-movers", "--param", f"run={two_runs['new']}")
    assert r.exit_code == 0 and "reloaded" not in r.stderr
    r = run("query", "--db", two_runs["db"], "runs", "--format", "csv")
    assert [line.rsplit(",", 1)[1] for line in r.stdout.splitlines()[1:]] == ["current", "portfolio reloaded since this run"]


def test_run_changes_names_each_project_as_the_later_run_screened_it(two_runs):
    r = run("query", "--db", two_runs["db"], "run-changes", "--param", f"run={two_runs['new']}",
            "--param", f"before={two_runs['old']}", "--param", "min_share_change=0", "--param", "min_rank_change=0",
            "--format", "csv")
    assert r.exit_code == 0, r.output
    rows = r.stdout.splitlines()[1:]
    assert sorted(row.split(",")[:2] for row in rows) == [["A", "Ferncastle"], ["B", "Gildmarsh"], ["C", "Hollowmere"],
                                                          ["D", "Ivorydale"]]


def test_the_report_of_an_older_run_shows_its_own_names(two_runs, tmp_path):
    pages = {}
    for which in ("old", "new"):
        out = tmp_path / f"{which}.html"
        r = run("report", "--db", two_runs["db"], "--run", two_runs[which], "--out", out, "--project", "A",
                "--project", "C")
        assert r.exit_code == 0, r.output
        pages[which] = out.read_text()
    for old, new in RENAMED.items():
        assert old in pages["old"] and new not in pages["old"], (old, new)
        assert new in pages["new"] and old not in pages["new"], (old, new)
    assert "Portfolio reloaded since this run: the portfolio was reloaded after this run was screened: project names " \
           "and groups shown are those it screened (kept with the run)" in pages["old"]
    assert "Portfolio reloaded since this run" not in pages["new"]


def test_a_run_made_before_snapshots_falls_back_to_todays_names(two_runs, tmp_path):
    # an older database: the snapshot table and its view did not exist (read-only: a temporary view)
    db = tmp_path / "plan.duckdb"
    shutil.copyfile(two_runs["db"], db)
    con = duckdb.connect(str(db))
    con.execute("DROP VIEW run_project_names")
    con.execute("DROP TABLE run_projects")
    con.close()
    r = run("query", "--db", db, "rank-movers", "--param", f"run={two_runs['old']}", "--format", "csv")
    assert r.exit_code == 0, r.output
    assert {row.split(",")[1] for row in r.stdout.splitlines()[1:]} == set(RENAMED.values())
    assert (f"Note: run {two_runs['old']}: the portfolio was reloaded after this run was screened: project names "
            "and inputs shown beside its results are today's, not necessarily those it screened") in r.stderr
    # a writer adds the table and view; the runs made before keep today's names, new ones their own
    assert run("load", "--projects", two_runs["dir"] / "p.csv", "--db", db).exit_code == 0
    r = run("query", "--db", db, "rank-movers", "--param", f"run={two_runs['old']}", "--format", "csv")
    assert r.exit_code == 0
    assert {row.split(",")[1] for row in r.stdout.splitlines()[1:]} == set(RENAMED)


# --- item 6: a value too large for double precision is NULL with a status that says why ---------

def test_an_irr_too_large_to_state_per_year_is_null_with_status_overflow(tmp_path):
    # X: -1 now, +10 one period later: IRR 900 % a period (outflow x (1 + r) = inflow, the
    # definition; Blank & Tarquin, Engineering Economy, 7th ed., McGraw-Hill, 2012, sec. 7.1).
    # With 365 periods a year the effective annual rate is 10^365 - 1 (Blank & Tarquin sec. 4.3),
    # beyond the largest double (about 1.8e308, IEEE 754): no finite IRR can be stored.
    # Y: -100, +60, +60: IRR 13.066 % a period (numpy-financial irr([-100, 60, 60]) = 0.130662...).
    (tmp_path / "p.csv").write_text("project_id,name\nX,Extreme\nY,Plain\n")
    (tmp_path / "c.csv").write_text("project_id,period,amount,basis\nX,0,-1,nominal\nX,1,10,nominal\n"
                                    "Y,0,-100,nominal\nY,1,60,nominal\nY,2,60,nominal\n")
    db = tmp_path / "plan.duckdb"
    assert run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", db).exit_code == 0
    r = run("screen", "--db", db, "--discount-rates", "0:0.1:2", "--inflation", "0:0.05:2", "--periods-per-year", "365")
    assert r.exit_code == 0, r.output
    run_id = r.stdout.strip().splitlines()[-1]
    assert ("note: 1 project(s) had a measure and 2 IRR row(s) (project and inflation level) had a rate of return "
            "too large for double precision (beyond about 1.8e308): stored as NULL, never as infinity, with the "
            "status 'overflow' (project_summary.measure_status names the measures; irr_results.status).") in r.stderr
    assert "RuntimeWarning" not in r.stderr
    assert fetch(db, "SELECT project_id, inflation, root_count, irr_nominal, irr_real, status FROM irr_results "
                     "WHERE run_id = ? AND project_id = 'X' ORDER BY inflation", [run_id]) == [
        ("X", 0.0, 1, None, None, "overflow"), ("X", 0.05, 1, None, None, "overflow")]
    assert fetch(db, "SELECT count(*) FROM irr_roots WHERE run_id = ? AND project_id = 'X'", [run_id]) == [(0,)]
    (y_irr,) = fetch(db, "SELECT irr_nominal FROM irr_results WHERE run_id = ? AND project_id = 'Y' "
                         "AND inflation = 0", [run_id])[0]
    assert y_irr == pytest.approx(1.1306623862918075 ** 365 - 1, rel=1e-9)
    # MIRR of X (finance = reinvestment rate = the base rate, per year) overflows the same way
    assert fetch(db, "SELECT project_id, mirr_base IS NULL, measure_status FROM project_summary WHERE run_id = ? "
                     "ORDER BY project_id", [run_id]) == [("X", True, "overflow: mirr_base"), ("Y", False, None)]
    r = run("query", "--db", db, "run-notes", "--param", f"run={run_id}", "--format", "csv")
    assert r.exit_code == 0
    assert "overflow" in r.stdout and "stored as NULL, never as infinity" in r.stdout
    r = run("query", "--db", db, "project-irr", "--param", f"run={run_id}", "--param", "inflation=0", "--format", "csv")
    assert r.exit_code == 0
    assert "X,Extreme,0.0,overflow,1,,," in r.stdout


# --- a load stopped by a file-size limit (ulimit -f) ---------------------------------------------

def _big_projects(path: Path, n: int = 60_000) -> None:
    path.write_text("project_id,name,first_cost,annual_benefit,benefit_basis,life\n" + "".join(
        f"P{i},Project number {i},{100 + i % 50},{30 + i % 7},real,{5 + i % 20}\n" for i in range(n)))


def _load_with_file_size_limit(projects: Path, db: Path, limit: int) -> subprocess.CompletedProcess:
    # Python ignores SIGXFSZ, so a write beyond RLIMIT_FSIZE fails with EFBIG ("File too large")
    return subprocess.run([sys.executable, "-m", "ratescape", "load", "--projects", str(projects), "--db", str(db)],
                          preexec_fn=lambda: resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit)),
                          capture_output=True, text=True, timeout=300, env=dict(os.environ, PYTHONPATH=SRC))


LIMIT_MESSAGE = ("the database file reached the file-size limit of this process (ulimit -f) while writing (")
LIMIT_FIX = ("); the write was rolled back and the database holds what it held before. Fix: raise the limit "
             "(ulimit -f unlimited) or free the quota, then run the command again\n")


@pytest.mark.parametrize("limit", [1_000_000, 4_000_000])
def test_a_load_into_an_existing_database_stopped_by_a_file_size_limit_changes_nothing(tmp_path, limit):
    (tmp_path / "small.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_basis,life\n"
                                        "A,Alpha,100,30,real,5\n")
    db = tmp_path / "plan.duckdb"
    assert run("load", "--projects", tmp_path / "small.csv", "--db", db).exit_code == 0
    before = fetch(db, "SELECT project_id, name FROM projects"), fetch(db, "SELECT load_id, project_count FROM loads")
    _big_projects(tmp_path / "big.csv")       # about 8.4 MB once loaded
    r = _load_with_file_size_limit(tmp_path / "big.csv", db, limit)
    assert r.returncode == 1, r.stdout
    assert "Loaded" not in r.stdout
    assert r.stderr.startswith("Error: " + LIMIT_MESSAGE) and r.stderr.endswith(LIMIT_FIX), r.stderr
    assert "File too large" in r.stderr and len(r.stderr.splitlines()) == 1
    assert (fetch(db, "SELECT project_id, name FROM projects"), fetch(db, "SELECT load_id, project_count FROM loads")) \
        == before == ([("A", "Alpha")], [(1, 1)])


def test_a_first_load_stopped_by_a_file_size_limit_leaves_no_database(tmp_path):
    _big_projects(tmp_path / "big.csv")
    db = tmp_path / "plan.duckdb"
    r = _load_with_file_size_limit(tmp_path / "big.csv", db, 2_000_000)
    assert r.returncode == 1, r.stdout
    assert r.stderr.startswith("Error: " + LIMIT_MESSAGE) and r.stderr.endswith(LIMIT_FIX), r.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.csv"]
    # with room, the same load succeeds (the limit, not the input, stopped it)
    r = _load_with_file_size_limit(tmp_path / "big.csv", db, 64_000_000)
    assert r.returncode == 0, r.stderr
    assert r.stdout.startswith("Loaded 60000 projects and ")
    assert fetch(db, "SELECT count(*) FROM projects") == [(60_000,)]


# --- SIGTERM during `load` and `report` -----------------------------------------------------------
# The signal is sent only once the process has the database open (seen in /proc/PID/fd): after
# it has read and validated its input (load) or is building the page (report). Exit code 143 and
# the checks after it cannot hold for a process that finished first (that one exits 0 and has
# loaded the portfolio or written the page).

ENV = {**os.environ, "PYTHONPATH": SRC, "PYTHONUNBUFFERED": "1"}


def _has_open(pid: int, path: Path) -> bool:
    try:
        return any(os.readlink(f"/proc/{pid}/fd/{fd}") == str(path) for fd in os.listdir(f"/proc/{pid}/fd"))
    except OSError:           # the process ended, or a descriptor closed while being read
        return False


def _terminate_once_open(args: list, db: Path) -> tuple[subprocess.Popen, str, str]:
    proc = subprocess.Popen([sys.executable, "-m", "ratescape", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=ENV)
    deadline = time.monotonic() + 300
    while not _has_open(proc.pid, db.resolve()):
        assert proc.poll() is None, f"ended before opening the database: {proc.communicate()}"
        assert time.monotonic() < deadline
        time.sleep(0.002)
    assert proc.poll() is None                    # still running when the signal is sent
    proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=300)
    return proc, out, err


@pytest.mark.skipif(not Path("/proc/self/fd").is_dir(), reason="needs /proc to see the open database")
def test_sigterm_during_a_load_exits_143_and_leaves_the_database_as_it_was(tmp_path):
    (tmp_path / "small.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_basis,life\n"
                                        "A,Alpha,100,30,real,5\n")
    db = tmp_path / "plan.duckdb"
    assert run("load", "--projects", tmp_path / "small.csv", "--db", db).exit_code == 0
    before = [fetch(db, f"SELECT * FROM {t} ORDER BY ALL") for t in ("projects", "cash_flows", "loads")]
    _big_projects(tmp_path / "big.csv")           # 60,000 projects, about 930,000 cash-flow lines
    proc, out, err = _terminate_once_open(["load", "--projects", tmp_path / "big.csv", "--db", db], db)
    assert proc.returncode == 143, (out, err)
    assert err == "Interrupted (SIGTERM).\n" and out == ""
    assert [fetch(db, f"SELECT * FROM {t} ORDER BY ALL") for t in ("projects", "cash_flows", "loads")] == before


@pytest.fixture(scope="module")
def report_db(tmp_path_factory):
    d = tmp_path_factory.mktemp("report_term")
    _big_projects(d / "p.csv", 3_000)
    db = d / "plan.duckdb"
    assert run("load", "--projects", d / "p.csv", "--db", db).exit_code == 0
    r = run("screen", "--db", db, "--discount-rates", "0:0.2:21", "--inflation", "0:0.1:11", "--quiet")
    assert r.exit_code == 0, r.output
    return db


@pytest.mark.skipif(not Path("/proc/self/fd").is_dir(), reason="needs /proc to see the open database")
def test_sigterm_during_a_report_exits_143_and_leaves_no_report_file(report_db, tmp_path):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    before = digest(report_db)
    proc, out, err = _terminate_once_open(["report", "--db", report_db, "--out", out_dir / "r.html"], report_db)
    assert proc.returncode == 143, (out, err)
    assert err.endswith("Interrupted (SIGTERM).\n") and "Traceback" not in err, err
    assert list(out_dir.iterdir()) == []          # neither the page nor its temporary file
    assert digest(report_db) == before
