"""Real ``python -m ratescape`` processes for the interruption and termination tests: start one, run
one to its end, read the run id it logs, signal it only while it still runs, and compare a resumed
run's rows with a reference run's."""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

from helpers import fetch   # tests/ is on sys.path (tests/conftest.py)

ENV = {**os.environ, "PYTHONUNBUFFERED": "1"}


def start(*args, **kw) -> subprocess.Popen:
    """Start ``python -m ratescape ARGS`` with text pipes for standard output and error."""
    return subprocess.Popen([sys.executable, "-m", "ratescape", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=ENV, **kw)


def finish(*args, timeout=None) -> subprocess.CompletedProcess:
    """Run ``python -m ratescape ARGS`` to its end."""
    return subprocess.run([sys.executable, "-m", "ratescape", *map(str, args)], capture_output=True, text=True,
                          env=ENV, timeout=timeout)


def run_id_from(proc: subprocess.Popen) -> str:
    """Read standard error until the screen logs its run id (the run row exists from then on)."""
    for line in proc.stderr:
        if line.startswith("run run-"):
            return line.split()[1].rstrip(":")
    raise AssertionError("screen ended before logging its run id")


def signal_after(launch, delay: float, sig, attempts: int = 4):
    """Start a process with ``launch()`` (it returns the Popen and whatever the trial needs), wait
    ``delay`` seconds and send ``sig`` while the process still runs. A process that finished first
    (a busy machine does not keep the timing the delay was drawn from) is started again, by
    ``launch()`` (which restores what the trial compares against), with half the delay, up to
    ``attempts`` times; then the trial fails, since it would test nothing. Returns (proc, extra, delay)."""
    for _ in range(attempts):
        proc, extra = launch()
        time.sleep(delay)
        if proc.poll() is None:
            proc.send_signal(sig)
            return proc, extra, delay
        proc.communicate()
        delay /= 2
    raise AssertionError(f"the process finished before the signal in {attempts} attempts (last delay {delay:.3f} s); "
                         "the trial would test nothing")


def signal_running(proc: subprocess.Popen, sig) -> None:
    """Send ``sig``, first asserting the process has not exited (else the trial would test nothing)."""
    assert proc.poll() is None, (f"the process had already exited (code {proc.returncode}) before the signal; "
                                 "the trial would test nothing")
    proc.send_signal(sig)


def same_rows(db: Path, run: str, reference: str, tables, *, nonempty: bool = False,
              no_duplicates: bool = False) -> None:
    """Assert run ``run`` stored the rows of run ``reference`` in each (table, key columns, value columns)
    of ``tables``: the same keys in order, values within rtol 1e-12 / atol 1e-9. ``nonempty`` also asserts
    the table has rows for the reference; ``no_duplicates`` that no key of ``run`` is stored twice."""
    for table, key, values in tables:
        got = fetch(db, f"SELECT {key}, {values} FROM {table} WHERE run_id = ? ORDER BY {key}", [run])
        want = fetch(db, f"SELECT {key}, {values} FROM {table} WHERE run_id = ? ORDER BY {key}", [reference])
        if nonempty:
            assert len(got) == len(want) > 0, table
        else:
            assert len(got) == len(want), (table, len(got), len(want))
        if no_duplicates:
            dupes = fetch(db, f"SELECT count(*) - count(DISTINCT ({key})) FROM {table} WHERE run_id = ?", [run])[0][0]
            assert dupes == 0, table
        nk = key.count(",") + 1
        assert [r[:nk] for r in got] == [r[:nk] for r in want], table
        np.testing.assert_allclose(np.array([r[nk:] for r in got], dtype=float),
                                   np.array([r[nk:] for r in want], dtype=float), rtol=1e-12, atol=1e-9)


def projects_csv(n: int, seed: int, prefix: str, width: int, escalation: bool = False) -> str:
    """``n`` invented parametric projects (lives 3..27 periods), ids ``prefix`` + ``width`` digits; with
    ``escalation`` a benefit_escalation column (0.01 for every fourth project from the second)."""
    rng = np.random.default_rng(seed)
    rows = ["project_id,name,first_cost,annual_benefit,benefit_basis," + ("benefit_escalation," if escalation else "")
            + "annual_cost,cost_basis,salvage,life"]
    for k in range(n):
        esc = f"{0.01 if k % 4 == 1 else 0}," if escalation else ""
        rows.append(f"{prefix}{k:0{width}d},Invented project {k},{rng.uniform(50, 150):.2f},{rng.uniform(5, 40):.2f},"
                    f"{'nominal' if k % 3 == 0 else 'real'},{esc}{rng.uniform(0, 5):.2f},real,"
                    f"{rng.uniform(0, 20):.2f},{3 + k % 25}")
    return "\n".join(rows) + "\n"
