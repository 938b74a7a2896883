"""Several processes on one database: one writer at a time, a clear "database busy" otherwise.

While a `screen` runs, a second `screen` (and a `query`) on the same database
exits non-zero with a message naming the running process, never a stack
trace. With no writer, several read-only `query` processes run at once.
"""
from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

pytestmark = pytest.mark.heavy   # subprocesses or a cluster: run by default, deselect with -m "not heavy"

ENV = {**os.environ, "PYTHONUNBUFFERED": "1"}


def ratescape(*args) -> list[str]:
    return [sys.executable, "-m", "ratescape", *map(str, args)]


@pytest.fixture(scope="module")
def db(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("concurrency")
    rng = np.random.default_rng(5)
    rows = ["project_id,name,first_cost,annual_benefit,life"]
    rows += [f"C{k:03d},Invented {k},{rng.uniform(50, 150):.2f},{rng.uniform(5, 40):.2f},{3 + k % 20}" for k in range(200)]
    (d / "p.csv").write_text("\n".join(rows) + "\n")
    path = d / "plan.duckdb"
    subprocess.run(ratescape("load", "--projects", d / "p.csv", "--db", path), check=True, capture_output=True, env=ENV)
    subprocess.run(ratescape("screen", "--db", path, "--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3", "--quiet"),
                   check=True, capture_output=True, env=ENV)
    return path


def test_second_writer_and_reader_get_database_busy_naming_the_writer(db):
    writer = subprocess.Popen(ratescape("screen", "--db", db, "--discount-rates", "0:0.2:21", "--inflation", "0:0.1:11",
                                        "--chunk-size", "2"),      # not --quiet: its log names the run
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    try:
        for line in writer.stderr:          # the run row exists, so the writer holds the database
            if line.startswith("run run-"):
                break
        else:
            pytest.fail("the first screen ended before it started its run")
        second = subprocess.run(ratescape("screen", "--db", db, "--discount-rates", "0.1", "--inflation", "0.02",
                                          "--quiet"), capture_output=True, text=True, env=ENV)
        reader = subprocess.run(ratescape("query", "--db", db, "runs"), capture_output=True, text=True, env=ENV)
        assert writer.poll() is None, "the first screen finished too early for the test to mean anything"
    finally:
        writer.send_signal(signal.SIGINT)
        writer.communicate(timeout=60)
    for other in (second, reader):
        assert other.returncode == 1, other.stderr
        assert other.stderr.startswith("Error: database busy: "), other.stderr
        assert f"process {writer.pid}" in other.stderr, other.stderr
        assert "Fix: wait for it to finish" in other.stderr
        assert "Traceback" not in other.stderr


def test_several_readers_at_once_without_a_writer(db):
    readers = [subprocess.Popen(ratescape("query", "--db", db, name, "--format", "csv"), stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True, env=ENV)
               for name in ("runs", "accepted-everywhere", "runs", "accepted-everywhere")]
    outs = [r.communicate(timeout=120) for r in readers]
    for r, (out, err) in zip(readers, outs):
        assert r.returncode == 0, err
    assert outs[0][0] == outs[2][0] and outs[1][0] == outs[3][0]
    assert outs[0][0].startswith("run_id,") and outs[1][0].startswith("project_id,")
