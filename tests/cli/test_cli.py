"""The real `ratescape` command: exact messages, exit codes, and nothing written on refusal."""
import hashlib
import subprocess
import sys
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from ratescape.cli import main

PROJECTS = ("project_id,name,group,first_cost,annual_benefit,benefit_basis,life\n"
            "A,Alpha,,100,30,real,5\nB,Beta,,,,,\nC,Gamma,g,100,28,nominal,5\nD,Delta,g,120,33,real,5\n")
FLOWS = "project_id,period,amount,basis,kind\nB,0,-100,real,\nB,1,230,real,\nB,2,-132,real,\n"


@pytest.fixture
def files(tmp_path):
    (tmp_path / "p.csv").write_text(PROJECTS)
    (tmp_path / "c.csv").write_text(FLOWS)
    return tmp_path


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_every_subcommand_has_help_with_an_example():
    for name, command in main.commands.items():
        result = run(name, "--help")
        assert result.exit_code == 0, name
        assert "Example:" in result.output, f"`ratescape {name} --help` lacks an example"


def test_load_screen_query_end_to_end(files):
    db = files / "plan.duckdb"
    r = run("load", "--projects", files / "p.csv", "--cash-flows", files / "c.csv", "--db", db)
    assert r.exit_code == 0
    assert r.stdout == f"Loaded 4 projects and 21 cash-flow lines into {db}.\n"
    r = run("screen", "--db", db, "--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3")
    assert r.exit_code == 0
    run_id = r.stdout.strip().splitlines()[-1]
    assert run_id.startswith("run-")
    assert "screening aid" in r.stderr   # the caution (not under --quiet: errors and the run id only)
    con = duckdb.connect(str(db), read_only=True)
    assert con.execute("SELECT status, scenario_count, project_count FROM runs WHERE run_id = ?", [run_id]).fetchone() == ("done", 15, 4)
    assert con.execute("SELECT count(*) FROM results WHERE run_id = ?", [run_id]).fetchone()[0] == 60
    con.close()
    r = run("query", "--db", db, "accepted-everywhere", "--format", "csv")
    assert r.exit_code == 0
    assert r.stdout.splitlines()[0] == "project_id,name,group_name,pw_min,pw_base,pw_max,rank_base"
    r = run("query", "--db", db, "project-irr", "--param", "inflation=0.05", "--format", "json")
    assert r.exit_code == 0 and '"status": "multiple"' in r.stdout


def test_refused_load_leaves_database_byte_for_byte_unchanged(files):
    db = files / "plan.duckdb"
    assert run("load", "--projects", files / "p.csv", "--cash-flows", files / "c.csv", "--db", db).exit_code == 0
    before = digest(db)
    (files / "bad.csv").write_text("project_id,period,amount\nB,0,-100\nB,x,5\n")
    r = run("load", "--projects", files / "p.csv", "--cash-flows", files / "bad.csv", "--db", db)
    assert r.exit_code == 1
    assert r.stderr.startswith("Error: 1 problem found in the input; nothing was written.\n")
    assert "bad.csv, line 3, column 'period': not a finite number (value 'x'). Fix: write a period index (0 = now) using digits" in r.stderr
    assert digest(db) == before


def test_refused_load_creates_no_database(files):
    (files / "bad.csv").write_text("project_id;name\nA;B\n")
    r = run("load", "--projects", files / "bad.csv", "--db", files / "new.duckdb")
    assert r.exit_code == 1
    assert "semicolons" in r.stderr
    assert not (files / "new.duckdb").exists()


@pytest.mark.parametrize("args,message", [
    (["screen", "--discount-rates", "0.2:0:5"], "Error: --discount-rates: the range 0.2:0.0 runs backwards."),
    (["screen", "--inflation", "-1:0:3"], "Error: --inflation: the inflation axis has -1 (-100 % or less)"),
    (["screen", "--budget", "zero"], "Error: --budget 'zero': expected PERIOD=AMOUNT."),
    (["screen", "--resume", "run-nope"], "Error: no run 'run-nope' in this database."),
    (["query", "no-such-query"], "Error: no query named 'no-such-query'."),
    (["query", "accepted-everywhere", "--param", "colour=red"], "Error: query 'accepted-everywhere' has no parameter 'colour'."),
])
def test_user_errors_exit_non_zero_with_a_message(files, args, message):
    db = files / "plan.duckdb"
    assert run("load", "--projects", files / "p.csv", "--cash-flows", files / "c.csv", "--db", db).exit_code == 0
    assert run("screen", "--db", db, "--discount-rates", "0.1", "--inflation", "0.02", "--quiet").exit_code == 0
    r = run(*args[:1], "--db", db, *args[1:])
    assert r.exit_code == 1
    assert r.stderr.startswith(message), r.stderr


def test_usage_errors_exit_2():
    r = run("screen")
    assert r.exit_code == 2 and "Missing option '--db'" in r.stderr


def test_query_on_missing_database(tmp_path):
    r = run("query", "--db", tmp_path / "none.duckdb", "runs")
    assert r.exit_code == 1
    assert "no such database" in r.stderr


def test_python_dash_m_entry_point(files):
    out = subprocess.run([sys.executable, "-m", "ratescape", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and out.stdout.startswith("ratescape, version ")


def test_export_writes_parquet_per_table(files):
    import polars as pl
    db = files / "plan.duckdb"
    assert run("load", "--projects", files / "p.csv", "--cash-flows", files / "c.csv", "--db", db).exit_code == 0
    assert run("screen", "--db", db, "--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3", "--quiet").exit_code == 0
    r = run("export", "--db", db, "--table", "results", "--table", "project_summary", "--out", files / "pq")
    assert r.exit_code == 0
    assert r.stdout.splitlines()[0] == f"results: 60 rows -> {files / 'pq' / 'results.parquet'}"
    frame = pl.read_parquet(files / "pq" / "results.parquet")
    assert frame.height == 60 and {"project_id", "scenario_id", "present_worth", "accepted"} <= set(frame.columns)
    r = run("export", "--db", db, "--table", "runs", "--out", files / "pq")
    assert r.exit_code == 1 and "cannot export table 'runs'" in r.stderr


def test_cli_reference_in_developers_guide_is_generated_from_the_help():
    from pathlib import Path

    from ratescape.cli import REFERENCE_END, REFERENCE_START, reference_markdown
    text = (Path(__file__).resolve().parents[2] / "DEVELOPERS.md").read_text(encoding="utf-8")
    stored = text[text.index(REFERENCE_START):text.index(REFERENCE_END) + len(REFERENCE_END)]
    assert stored == reference_markdown(), "regenerate the CLI reference in DEVELOPERS.md (see its instructions)"


def test_ci_runs_the_readme_test_command():
    from pathlib import Path
    root = Path(__file__).resolve().parents[2]
    readme = (root / "README.md").read_text(encoding="utf-8")
    command = 'python3 -m venv .venv && .venv/bin/pip install -q -e ".[test]" && .venv/bin/python -m pytest -q'
    assert command in readme
    assert command in (root / ".ci" / "run").read_text(encoding="utf-8")
