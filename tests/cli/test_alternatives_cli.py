"""The alternatives basis and study period on `ratescape screen`: flags, TOML keys and refusals.

Source of the worked figures: L. T. Blank, A. J. Tarquin, Engineering Economy, 7th ed.,
McGraw-Hill, 2012, "National Homebuilders" vendors (from memory; AW at 15 %: A -7,349, B -6,753),
cross-checked with numpy-financial.
"""
import duckdb
import numpy_financial as npf
import pytest
from click.testing import CliRunner

from ratescape.cli import main

PROJECTS = ("project_id,name,group,first_cost,annual_cost,salvage,life\n"
            "VA,Vendor A,homes,15000,3500,1000,6\nVB,Vendor B,homes,18000,3100,2000,9\n")


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture
def db(tmp_path):
    (tmp_path / "p.csv").write_text(PROJECTS)
    path = tmp_path / "plan.duckdb"
    assert run("load", "--projects", tmp_path / "p.csv", "--db", path).exit_code == 0
    return path


def decided(db, run_id):
    con = duckdb.connect(str(db), read_only=True)
    try:
        return con.execute("SELECT preferred, preferred_worth, basis FROM group_decisions WHERE run_id = ?",
                           [run_id]).fetchone()
    finally:
        con.close()


def test_default_is_annual_worth_and_study_period_flag_implies_its_basis(db):
    r = run("screen", "--db", db, "--discount-rates", "0.15", "--inflation", "0", "--quiet")
    assert r.exit_code == 0, r.stderr
    pref, worth, basis = decided(db, r.stdout.strip().splitlines()[-1])
    assert (pref, basis) == ("VB", "annual-worth") and worth == pytest.approx(-6753, abs=1)   # Blank & Tarquin
    r = run("screen", "--db", db, "--discount-rates", "0.15", "--inflation", "0", "--study-period", "6", "--quiet")
    assert r.exit_code == 0, r.stderr
    pref, worth, basis = decided(db, r.stdout.strip().splitlines()[-1])
    pw_b = npf.npv(0.15, [-18000] + [-3100] * 5 + [-3100 + 18000 - 16000 * 6 / 9])   # straight-line value at 6
    pw_a = npf.npv(0.15, [-15000] + [-3500] * 5 + [-2500])
    assert basis == "study-period" and worth == pytest.approx(max(pw_a, pw_b), rel=1e-9)


def test_toml_alternatives_table(db, tmp_path):
    (tmp_path / "g.toml").write_text('[grid]\ndiscount_rates = { values = [0.15] }\ninflation = { values = [0.0] }\n'
                                    '[alternatives]\nbasis = "present-worth"\n')
    r = run("screen", "--db", db, "--grid", tmp_path / "g.toml")   # not --quiet: the note goes to stderr
    assert r.exit_code == 0, r.stderr
    assert decided(db, r.stdout.strip().splitlines()[-1])[::2] == ("VA", "present-worth")
    assert "alternatives: group 'homes' has different lives (VA 6, VB 9 periods)" in r.stderr


@pytest.mark.parametrize("args,message", [
    (["--alternatives-basis", "study-period"],
     "Error: --alternatives-basis: the study-period basis needs a study period. Fix: give --study-period T"),
    (["--alternatives-basis", "annual-worth", "--study-period", "5"],
     "Error: --study-period: a study period (5) is used only with the study-period basis, but the basis is "
     "'annual-worth'."),
    (["--study-period", "0"], "Error: --study-period: the study period must be a whole number of periods of at "
                              "least 1, got 0."),
    (["--study-period", "7"], "Error: --study-period: the study period of 7 periods is longer than the life of "
                              "alternative 'VA' of group 'homes' (6 periods; the group's lives are VA=6, VB=9)."),
])
def test_refusals_exit_1_and_write_nothing(db, args, message):
    before = db.read_bytes()
    r = run("screen", "--db", db, "--discount-rates", "0.15", "--inflation", "0", "--quiet", *args)
    assert r.exit_code == 1 and r.stderr.startswith(message), r.stderr
    con = duckdb.connect(str(db), read_only=True)
    assert con.execute("SELECT count(*) FROM runs").fetchone()[0] == 0
    con.close()
    assert before  # the file existed before the refused screen


@pytest.mark.parametrize("toml,message", [
    ('[alternatives]\nbasis = "equal-life"\n', "Error: {p}: alternatives.basis: the alternatives basis must be one "
                                               "of annual-worth, study-period, present-worth, got 'equal-life'."),
    ('[alternatives]\nstudy_years = 5\n', "Error: {p}: unknown key alternatives.study_years."),
    ('[alternatives]\nbasis = "study-period"\nstudy_period = 2.5\n',
     "Error: {p}: alternatives.study_period: the study period must be a whole number of periods of at least 1, "
     "got 2.5."),
])
def test_toml_refusals(db, tmp_path, toml, message):
    g = tmp_path / "g.toml"
    g.write_text(toml)
    r = run("screen", "--db", db, "--grid", g, "--discount-rates", "0.15", "--inflation", "0", "--quiet")
    assert r.exit_code == 1 and r.stderr.startswith(message.format(p=g)), r.stderr
