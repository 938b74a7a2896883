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

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import numpy as np
import pytest

pytestmark = pytest.mark.heavy   # real subprocesses

ENV = {**os.environ, "PYTHONUNBUFFERED": "1"}
GRID = ["--discount-rates", "0:0.2:11", "--inflation", "0:0.1:6", "--chunk-size", "8"]


def projects_csv(n: int) -> str:
    """``n`` invented parametric projects (lives 3..27 periods)."""
    rng = np.random.default_rng(17)
    rows = ["project_id,name,first_cost,annual_benefit,benefit_basis,annual_cost,cost_basis,salvage,life"]
    for k in range(n):
        rows.append(f"T{k:04d},Invented project {k},{rng.uniform(50, 150):.2f},{rng.uniform(5, 40):.2f},"
                    f"{'nominal' if k % 3 == 0 else 'real'},{rng.uniform(0, 5):.2f},real,"
                    f"{rng.uniform(0, 20):.2f},{3 + k % 25}")
    return "\n".join(rows) + "\n"


def cli(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "ratescape", *map(str, args)], capture_output=True, text=True,
                          env=ENV, timeout=600)


def fetch(db: Path, sql: str, params=()) -> list:
    con = duckdb.connect(str(db), read_only=True)
    try:
        return con.execute(sql, list(params)).fetchall()
    finally:
        con.close()


@pytest.fixture(scope="module")
def loaded(tmp_path_factory):
    d = tmp_path_factory.mktemp("termination")
    (d / "p.csv").write_text(projects_csv(1500))
    db = d / "plan.duckdb"
    assert cli("load", "--projects", d / "p.csv", "--db", db).returncode == 0
    ref = cli("screen", "--db", db, *GRID, "--quiet")
    assert ref.returncode == 0, ref.stderr
    return {"db": db, "reference": ref.stdout.strip().splitlines()[-1]}


def _signal_mid_run(db: Path, sig: int) -> tuple[subprocess.Popen, str, str, str]:
    proc = subprocess.Popen([sys.executable, "-m", "ratescape", "screen", "--db", str(db), *GRID],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    run_id = None
    for line in proc.stderr:                      # "run RUN_ID: ..." once the run row is committed
        if line.startswith("run run-"):
            run_id = line.split()[1].rstrip(":")
            break
    assert run_id, "the screen ended before starting its run"
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


def _same_rows(db: Path, run: str, reference: str) -> None:
    for table, key, values in (
            ("results", "project_id, scenario_id", "present_worth, accepted::INTEGER"),
            ("project_summary", "project_id", "pw_min, pw_max, pw_base, accept_share, rank_base"),
            ("irr_results", "project_id, inflation", "root_count, coalesce(irr_nominal, -9)")):
        got = fetch(db, f"SELECT {key}, {values} FROM {table} WHERE run_id = ? ORDER BY {key}", [run])
        want = fetch(db, f"SELECT {key}, {values} FROM {table} WHERE run_id = ? ORDER BY {key}", [reference])
        assert len(got) == len(want) > 0, table
        nk = key.count(",") + 1
        assert [r[:nk] for r in got] == [r[:nk] for r in want], table
        np.testing.assert_allclose(np.array([r[nk:] for r in got], dtype=float),
                                   np.array([r[nk:] for r in want], dtype=float), rtol=1e-12, atol=1e-9)


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
    _same_rows(db, run_id, loaded["reference"])
