"""Helpers shared by the db/ and cli/ tests (tests/ is on sys.path through tests/conftest.py).

* :func:`run_cli` drives the real command through click's CliRunner;
* :func:`digest` is a file's SHA-256, to show a refused input left a file unchanged;
* :func:`fetch` reads rows from a database on a read-only connection it closes again;
* :func:`load_csv` writes a small projects CSV (and cash flows) into a folder and loads it;
* :func:`cli_load_and_screen` does the same through ``ratescape load`` / ``ratescape screen``.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

import duckdb
from click.testing import CliRunner

from ratescape import load_portfolio
from ratescape.cli import main


#: four invented projects with fixed-price (nominal) or real lines: inflation hurts fixed-price revenue
#: and helps a fixed lease payment; Q is never accepted
SMALL_PROJECTS = ("project_id,name,first_cost,annual_benefit,benefit_basis,annual_cost,cost_basis,life\n"
                  "A,Invented plain real,100,30,real,,,5\n"
                  "N,Invented fixed-price revenue,100,32,nominal,,,5\n"
                  "L,Invented fixed lease,0.01,40,real,25,nominal,5\n"
                  "Q,Invented never,100,10,real,,,5\n")


def run_cli(*args):
    """Invoke ``ratescape`` with ``args`` (each turned into text) through click's CliRunner."""
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def fetch(db: Path, sql: str, params=()) -> list:
    """All rows of ``sql`` (bound ``params``) on a read-only connection to ``db``."""
    con = duckdb.connect(str(db), read_only=True)
    try:
        return con.execute(sql, list(params)).fetchall()
    finally:
        con.close()


def write_inputs(folder: Path, projects: str, cash_flows: str | None = None) -> tuple[Path, Path | None]:
    """Write ``folder/p.csv`` (and ``folder/c.csv`` when cash flows are given); return both paths."""
    (folder / "p.csv").write_text(projects)
    if cash_flows is None:
        return folder / "p.csv", None
    (folder / "c.csv").write_text(cash_flows)
    return folder / "p.csv", folder / "c.csv"


def load_csv(folder: Path, projects: str, cash_flows: str | None = None, name: str = "plan.duckdb") -> Path:
    """Write the inputs into ``folder``, load them into ``folder/name`` with the API; return the database."""
    p, c = write_inputs(folder, projects, cash_flows)
    db = folder / name
    load_portfolio(p, c, db)
    return db


def cli_load_and_screen(folder: Path, projects: str, cash_flows: str | None, *screen_args) -> tuple[Path, str]:
    """``ratescape load`` then ``ratescape screen --quiet`` into ``folder/plan.duckdb``, both asserted to
    succeed; return the database and the run id the screen printed last."""
    p, c = write_inputs(folder, projects, cash_flows)
    db = folder / "plan.duckdb"
    flows = [] if c is None else ["--cash-flows", c]
    r = run_cli("load", "--projects", p, *flows, "--db", db)
    assert r.exit_code == 0, r.output
    r = run_cli("screen", "--db", db, *screen_args, "--quiet")
    assert r.exit_code == 0, r.output
    return db, r.stdout.strip().splitlines()[-1]


def load_good_corpus(db: Path):
    """``ratescape load`` of the good portfolio of the bad-input corpus (tests/bad_inputs/good) into ``db``."""
    good = Path(__file__).resolve().parent / "bad_inputs" / "good"
    r = run_cli("load", "--projects", good / "projects.csv", "--cash-flows", good / "cash_flows.csv", "--db", db)
    assert r.exit_code == 0, r.stderr
    return r
