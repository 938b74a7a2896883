"""SIGTERM and SIGHUP stop a real `ratescape screen` like Ctrl-C (issue 17, item 4).

A scheduler's or `timeout`'s SIGTERM, or a closed terminal's SIGHUP, must leave the run
`interrupted` (not `running` with no process behind it), exit with 143 / 129, and `--resume`
must then finish it with exactly the rows of an uninterrupted run.

The signal is sent only once the run is under way: the run's worth files (written per chunk
and removed when the run is done) exist and the process is still alive. The assertions that
follow (exit code 143, status `interrupted`, chunks_done < chunk_count) cannot hold for a
process that finished before the signal.
"""
from __future__ import annotations

import signal
import subprocess
import time
from pathlib import Path

import pytest
from cli.processes import finish, projects_csv, run_id_from, same_rows, start   # tests/ is on sys.path (conftest)
from helpers import fetch

pytestmark = pytest.mark.heavy   # real subprocesses

GRID = ["--discount-rates", "0:0.2:11", "--inflation", "0:0.1:6", "--chunk-size", "8"]


def cli(*args) -> subprocess.CompletedProcess:
    return finish(*args, timeout=600)


@pytest.fixture(scope="module")
def loaded(tmp_path_factory):
    d = tmp_path_factory.mktemp("termination")
    (d / "p.csv").write_text(projects_csv(1500, 17, "T", 4))
    db = d / "plan.duckdb"
    assert cli("load", "--projects", d / "p.csv", "--db", db).returncode == 0
    ref = cli("screen", "--db", db, *GRID, "--quiet")
    assert ref.returncode == 0, ref.stderr
    return {"db": db, "reference": ref.stdout.strip().splitlines()[-1]}


def _signal_mid_run(db: Path, sig: int) -> tuple[subprocess.Popen, str, str, str]:
    proc = start("screen", "--db", db, *GRID)
    run_id = run_id_from(proc)                    # "run RUN_ID: ..." once the run row is committed
    folder = Path(f"{db}.scratch") / run_id
    deadline = time.monotonic() + 300
    while not (folder.is_dir() and len(list(folder.iterdir())) >= 2):
        assert proc.poll() is None, "the screen ended before its first chunks were stored"
        assert time.monotonic() < deadline
        time.sleep(0.02)
    assert proc.poll() is None                    # still running when the signal is sent
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=300)
    return proc, run_id, out, err


COMPARED = (("results", "project_id, scenario_id", "present_worth, accepted::INTEGER"),
            ("project_summary", "project_id", "pw_min, pw_max, pw_base, accept_share, rank_base"),
            ("irr_results", "project_id, inflation", "root_count, coalesce(irr_nominal, -9)"))


@pytest.mark.parametrize("sig,code,name", [(signal.SIGTERM, 143, "SIGTERM"), (signal.SIGHUP, 129, "SIGHUP")])
def test_termination_signal_interrupts_the_screen_resumably(loaded, sig, code, name):
    db = loaded["db"]
    proc, run_id, out, err = _signal_mid_run(db, sig)
    assert proc.returncode == code, err
    assert err.rstrip().endswith(f"Interrupted ({name}).") and "Traceback" not in err, err
    status, done, count, message = fetch(db, "SELECT status, chunks_done, chunk_count, message FROM runs "
                                             "WHERE run_id = ?", [run_id])[0]
    assert status == "interrupted"
    assert done < count
    assert message == f"interrupted; resume with --resume {run_id}"
    resumed = cli("screen", "--db", db, "--resume", run_id, "--quiet")
    assert resumed.returncode == 0, resumed.stderr
    assert fetch(db, "SELECT status FROM runs WHERE run_id = ?", [run_id]) == [("done",)]
    same_rows(db, run_id, loaded["reference"], COMPARED, nonempty=True)
