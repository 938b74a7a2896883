"""`ratescape demo`, the README's first command, through the real program.

The demo must end with a summary whose every figure is what the database it wrote holds (the
counts of `project_summary`, the budget-limited optimum of `portfolios` at the base scenario), the
caution, and the run id on its last line. Figures are read back with plain SQL, not with
ratescape's own summary code (common practice: check a report against its source).
"""
from __future__ import annotations

import os
import re
import subprocess
import sys

import duckdb
import pytest

from ratescape.caution import CAUTION

pytestmark = pytest.mark.heavy


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    proc = subprocess.run([sys.executable, "-m", "ratescape", "demo", "--out", str(out), "--quiet"],
                          capture_output=True, text=True, timeout=900, env={**os.environ, "NO_COLOR": "1"})
    assert proc.returncode == 0, proc.stderr[-3000:]
    return out, proc.stdout


def number(text: str) -> float:
    return float(text.replace(",", ""))


def test_demo_writes_its_database_and_report(demo):
    out, stdout = demo
    assert (out / "ratescape-demo.duckdb").is_file()
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "screening aid" in html and "<script" in html
    lines = stdout.strip().splitlines()
    assert re.fullmatch(r"run-\d{8}-\d{6}-[0-9a-f]{6}", lines[-1])
    assert CAUTION in stdout


def test_demo_summary_agrees_with_its_database(demo):
    out, stdout = demo
    run_id = stdout.strip().splitlines()[-1]
    con = duckdb.connect(str(out / "ratescape-demo.duckdb"), read_only=True)
    try:
        everywhere, nowhere, depends, at_base = con.execute("""
            SELECT count(*) FILTER (WHERE accept_share = 1), count(*) FILTER (WHERE accept_share = 0),
                   count(*) FILTER (WHERE accept_share > 0 AND accept_share < 1),
                   count(*) FILTER (WHERE accepted_base)
            FROM project_summary WHERE run_id = ?""", [run_id]).fetchone()
        base_objective, lo, hi = con.execute("""
            SELECT max(p.objective) FILTER (WHERE s.is_base), min(p.objective), max(p.objective)
            FROM portfolios p JOIN scenarios s USING (run_id, scenario_id) WHERE run_id = ?""",
                                             [run_id]).fetchone()
    finally:
        con.close()
    assert f"Accepted in every scenario: {everywhere}; in none: {nowhere}; decision depends on the scenario: " \
           f"{depends}." in stdout
    assert f"{at_base} projects accepted." in stdout
    budget = re.search(r"the best portfolio is worth ([\d,]+) at the base scenario, ([\d,]+) to ([\d,]+) across",
                       stdout)
    assert budget, stdout
    assert [number(g) for g in budget.groups()] == [round(base_objective), round(lo), round(hi)]
    assert lo <= base_objective <= hi
