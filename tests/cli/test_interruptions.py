"""SIGINT and SIGKILL at seeded random points of real `load`, `screen` and `report` processes.

After every trial the database must tell the truth and hold nothing partial:

* load: the portfolio is the old one or the new one completely, never a mix;
* screen: a run interrupted by SIGINT is 'interrupted', one killed by SIGKILL
  stays 'running'; `screen --resume` then finishes it with exactly the rows of
  an uninterrupted reference run;
* report: the target file is either the earlier complete report or a new
  complete one, never a truncated page.

Ten trials in all. Each delay is a seeded random fraction of how long the same
command took uninterrupted in this session (measured once, warm), so a failure
can be replayed, and every trial asserts that the process was still running
when the signal was sent: a trial whose process had already finished fails
instead of passing without testing anything. No assertion is made on elapsed
time itself.
"""
from __future__ import annotations

import random
import shutil
import signal
import subprocess
import time
from pathlib import Path

import pytest
from cli.processes import (finish, projects_csv, run_id_from, same_rows, signal_after, signal_running,   # tests/ on sys.path
                           start)
from helpers import fetch

pytestmark = pytest.mark.heavy   # subprocesses or a cluster: run by default, deselect with -m "not heavy"

RNG = random.Random(20261201)
CHUNK = 1            # 80 chunks of one project: the chunk phase lasts long enough to be hit
GRID = ["--discount-rates", "0:0.2:11", "--inflation", "0:0.1:6", "--chunk-size", str(CHUNK)]
SCENARIOS = 11 * 6


def _no_traceback(err: str) -> bool:
    """No stack trace on standard error, except one raised while Python was still importing the package.

    That start-up case (nothing opened yet) is tested on its own by
    ``test_interrupt_during_start_up_prints_no_traceback``.
    """
    return "Traceback" not in err or ("_get_module_details" in err and err.rstrip().endswith("KeyboardInterrupt"))


def timed(*args) -> tuple[subprocess.CompletedProcess, float]:
    """Run the command to its end; return it and its wall time [s] (used only to place the signals)."""
    t0 = time.perf_counter()
    done = finish(*args)
    return done, time.perf_counter() - t0


@pytest.fixture(scope="module")
def work(tmp_path_factory) -> dict:
    d = tmp_path_factory.mktemp("interrupt")
    (d / "old.csv").write_text(projects_csv(40, 1, "Q", 3, escalation=True))
    (d / "new.csv").write_text(projects_csv(40_000, 2, "Q", 3, escalation=True))   # about 1.3 s to load here, start-up included
    (d / "screen.csv").write_text(projects_csv(80, 3, "Q", 3, escalation=True))
    counts, seconds = {}, {}
    for name in ("old", "new"):
        db = d / f"{name}.duckdb"
        done, seconds[name] = timed("load", "--projects", d / f"{name}.csv", "--db", db)
        assert done.returncode == 0, done.stderr
        if name == "new":   # the signals are placed on a warm load's time (a first, cold one took about
            done, seconds[name] = timed("load", "--projects", d / f"{name}.csv", "--db", db)   # 1.6x as long,
            assert done.returncode == 0, done.stderr   # and 0.65 of it could fall after a warm load's end)
        counts[name] = fetch(db, "SELECT (SELECT count(*) FROM projects), (SELECT count(*) FROM cash_flows), "
                                 "(SELECT sum(hash(project_id, period, kind, amount)) FROM cash_flows)")[0]
    screen_db = d / "screen.duckdb"
    assert finish("load", "--projects", d / "screen.csv", "--db", screen_db).returncode == 0
    warm = finish("screen", "--db", screen_db, *GRID, "--quiet")    # compiles (or loads) the kernels
    assert warm.returncode == 0, warm.stderr
    ref = finish("screen", "--db", screen_db, *GRID)   # not --quiet: its log gives the time after planning
    assert ref.returncode == 0, ref.stderr
    return {"dir": d, "counts": counts, "screen_db": screen_db, "reference": ref.stdout.strip().splitlines()[-1],
            "load_seconds": seconds["new"], "screen_seconds": _seconds_after_planning(ref.stderr)}


def _seconds_after_planning(err: str) -> float:
    """The screen's own log line "screen: done in X s after planning" (from its run id line to the end)."""
    for line in err.splitlines():
        if line.startswith("screen: done in "):
            return float(line.split()[3])
    raise AssertionError(f"no 'screen: done' line in the log:\n{err}")


@pytest.mark.parametrize("trial,sig", [(0, signal.SIGINT), (1, signal.SIGKILL), (2, signal.SIGINT), (3, signal.SIGKILL)])
def test_interrupted_load_leaves_old_or_new_portfolio_whole(work, trial, sig, tmp_path):
    db = tmp_path / "plan.duckdb"

    def launch():
        shutil.copyfile(work["dir"] / "old.duckdb", db)
        return start("load", "--projects", work["dir"] / "new.csv", "--db", db), None

    delay = RNG.uniform(0.2, 0.65) * work["load_seconds"]   # start-up, reading, validating or writing
    proc, _, delay = signal_after(launch, delay, sig)
    out, err = proc.communicate(timeout=60)
    # a Ctrl-C in the interpreter's own start-up, before ratescape's first line runs, ends the
    # process by SIGINT (-2: Python's convention for an unhandled Ctrl-C); from then on, 130
    expected = (130, -signal.SIGINT) if sig == signal.SIGINT else (-signal.SIGKILL,)
    assert proc.returncode in expected, (delay, proc.returncode, err[-800:])
    assert proc.returncode != 130 or "Traceback" not in err, err[-800:]
    state = fetch(db, "SELECT (SELECT count(*) FROM projects), (SELECT count(*) FROM cash_flows), "
                      "(SELECT sum(hash(project_id, period, kind, amount)) FROM cash_flows)")[0]
    loads = fetch(db, "SELECT count(*) FROM loads")[0][0]
    assert state in (work["counts"]["old"], work["counts"]["new"]), (delay, state)
    assert loads == (1 if state == work["counts"]["old"] else 2)
    assert _no_traceback(err), err


COMPARED = (("results", "project_id, scenario_id", "present_worth, annual_worth, accepted::INTEGER"),
            ("project_summary", "project_id", "pw_min, pw_max, pw_base, accept_share, rank_base"),
            ("irr_results", "project_id, inflation", "root_count, coalesce(irr_nominal, -9)"),
            ("irr_roots", "project_id, inflation, root_index", "irr_nominal"))


@pytest.mark.parametrize("trial,sig", [(0, signal.SIGINT), (1, signal.SIGKILL), (2, signal.SIGKILL), (3, signal.SIGINT)])
def test_interrupted_screen_is_truthful_and_resumes_exactly(work, trial, sig):
    db = work["screen_db"]

    def launch():
        proc = start("screen", "--db", db, *GRID)   # not --quiet: the log line naming the run is read
        return proc, run_id_from(proc)

    delay = RNG.uniform(0.05, 0.5) * work["screen_seconds"]   # within the first half of the run's work
    proc, run_id, delay = signal_after(launch, delay, sig)
    out, err = proc.communicate(timeout=60)
    status, done, count = fetch(db, "SELECT status, chunks_done, chunk_count FROM runs WHERE run_id = ?", [run_id])[0]
    chunks = fetch(db, "SELECT count(*) FROM run_chunks WHERE run_id = ?", [run_id])[0][0]
    assert chunks == done, "the chunk marks and the run's counter disagree"
    if sig == signal.SIGINT:
        assert status == "interrupted", (delay, status, err[-800:])
        assert proc.returncode == 130 and "Interrupted." in err, (proc.returncode, err[-800:])
    else:
        assert proc.returncode == -signal.SIGKILL
        assert status == "running", status
    rows = fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [run_id])[0][0]
    assert rows == CHUNK * SCENARIOS * chunks, "results of uncommitted chunks are visible"
    resumed = finish("screen", "--db", db, "--resume", run_id, "--quiet")
    assert resumed.returncode == 0, resumed.stderr
    assert fetch(db, "SELECT status, chunks_done FROM runs WHERE run_id = ?", [run_id])[0] == ("done", count)
    same_rows(db, run_id, work["reference"], COMPARED, no_duplicates=True)
    assert _no_traceback(err), err


def _complete(page: bytes) -> bool:
    return page.lstrip().lower().startswith(b"<!doctype html") and page.rstrip().endswith(b"</html>")


def _first_report(work) -> Path:
    """A complete report of the reference run, written once (the earlier file a rewrite must not damage);
    its wall time is kept in ``work["report_seconds"]`` to place the signals."""
    path = work["dir"] / "first-report.html"
    if not path.exists():
        first, work["report_seconds"] = timed("report", "--db", work["screen_db"], "--run", work["reference"],
                                              "--out", path)
        assert first.returncode == 0, first.stderr
    return path


@pytest.mark.parametrize("trial,sig", [(0, signal.SIGKILL), (1, signal.SIGINT)])
def test_interrupted_report_leaves_no_partial_page(work, trial, sig, tmp_path):
    out = tmp_path / "report.html"
    old = _first_report(work).read_bytes()
    assert _complete(old)

    def launch():
        out.write_bytes(old)
        return start("report", "--db", work["screen_db"], "--run", work["reference"], "--out", out), None

    delay = RNG.uniform(0.15, 0.45) * work["report_seconds"]
    proc, _, delay = signal_after(launch, delay, sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == (130 if sig == signal.SIGINT else -signal.SIGKILL), (delay, proc.returncode, err[-800:])
    page = out.read_bytes()
    assert page == old or _complete(page), f"a partial report of {len(page)} bytes was left at the target"
    assert _no_traceback(err), err


def test_interrupt_during_start_up_prints_no_traceback(tmp_path):
    proc = start("query", "--db", tmp_path / "none.duckdb", "runs")
    time.sleep(0.15)    # Python is still importing the package's dependencies
    signal_running(proc, signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    # 130 and "Interrupted.", not the refusal of the missing database (exit code 1) that a
    # process left to run would print
    assert proc.returncode == 130, (proc.returncode, err)
    assert err.strip().splitlines()[-1] == "Interrupted.", err
    assert "Traceback" not in err, err


class _Interrupting:
    """A DuckDB connection stand-in whose n-th INSERT fails as DuckDB fails when Ctrl-C arrives mid-query."""

    def __init__(self, con, after: int, _left=None):
        self._con = con
        self._left = _left if _left is not None else {"n": after}   # shared with its cursors

    def cursor(self):         # the writer threads' own connections count (and fail) too
        return _Interrupting(self._con.cursor(), 0, self._left)

    def execute(self, sql, *args, **kw):
        if sql.lstrip().upper().startswith("INSERT INTO RESULT_ROWS"):
            self._left["n"] -= 1
            if self._left["n"] < 0:
                raise RuntimeError("Query interrupted")   # what duckdb 2.0 raises on SIGINT during a query
        return self._con.execute(sql, *args, **kw)

    def __getattr__(self, name):
        return getattr(self._con, name)


def test_ctrl_c_inside_a_duckdb_query_marks_the_run_interrupted(work, tmp_path):
    from ratescape.run import screen as screen_module
    from ratescape.settings import make_run_settings
    from ratescape.store.database import connect_write
    db = tmp_path / "plan.duckdb"
    shutil.copyfile(work["screen_db"], db)
    con = connect_write(db)
    try:
        spec = make_run_settings(discount_rates="0:0.2:11", inflation="0:0.1:6")
        with pytest.raises((KeyboardInterrupt, RuntimeError)):
            screen_module.screen(_Interrupting(con, after=3), spec, chunk_size=8, progress=False)
        status, done = con.execute("SELECT status, chunks_done FROM runs ORDER BY started_at DESC LIMIT 1").fetchone()
    finally:
        con.close()
    assert done == 3
    assert status == "interrupted"
