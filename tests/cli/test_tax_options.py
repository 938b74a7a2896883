"""Income-tax options through the real CLI: the combined state/federal rate, loss carry-forward
and the run notes on tax and loans.

Sources: combined (effective) income-tax rate t = t_s + t_f (1 - t_s), state tax deductible
federally (W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson, chapter
"Depreciation and Income Taxes"; from memory, common practice); net operating loss carried
forward to later profits (Internal Revenue Code section 172, mechanism only; common practice);
the discount rate for equity cash flows is the cost of equity (R. A. Brealey, S. C. Myers,
F. Allen, Principles of Corporate Finance, McGraw-Hill; from memory). Expected worths are
written out year by year in the tests.
"""
import duckdb
import pytest
from click.testing import CliRunner

from ratescape.cli import main

PROJECTS = "project_id,name,depreciation_method,recovery_years,loan_amount,loan_rate,loan_term\n" \
           "X,Start-up line,straight-line,3,,,\n"
LOAN_PROJECTS = PROJECTS + "Y,Borrowed line,straight-line,3,50000,0.08,3\n"
CASH_FLOWS = """project_id,period,amount,basis,escalation,kind
X,0,-90000,real,0,investment
X,1,10000,real,0,benefit
X,2,40000,real,0,benefit
X,3,60000,real,0,benefit
"""
LOAN_CASH_FLOWS = CASH_FLOWS + "\n".join(line.replace("X,", "Y,", 1) for line in CASH_FLOWS.splitlines()[1:]) + "\n"


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def loaded(tmp_path, projects=PROJECTS, flows=CASH_FLOWS):
    (tmp_path / "p.csv").write_text(projects)
    (tmp_path / "cf.csv").write_text(flows)
    db = tmp_path / "plan.duckdb"
    out = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "cf.csv", "--db", db)
    assert out.exit_code == 0, out.output
    return db


def screened(db, *flags):
    out = run("screen", "--db", db, "--discount-rates", "0.1", "--inflation", "0:0.05:2", "--quiet", *flags)
    assert out.exit_code == 0, out.output
    return out.stdout.strip().splitlines()[-1]


def worths(db, run_id, project="X"):
    con = duckdb.connect(str(db), read_only=True)
    try:
        return dict(con.execute("""SELECT round(sc.inflation, 9), r.present_worth FROM results r
                                   JOIN scenarios sc USING (run_id, scenario_id)
                                   WHERE run_id = ? AND project_id = ?""", [run_id, project]).fetchall())
    finally:
        con.close()


def notes(db, run_id):
    con = duckdb.connect(str(db), read_only=True)
    try:
        return dict(con.execute("SELECT topic, note FROM run_notes WHERE run_id = ?", [run_id]).fetchall())
    finally:
        con.close()


def table_x(i, f, tax, carry):
    """Project X year by year: straight-line 30,000 a year over 3 years; a year-1 loss of 20,000
    (at f = 0) either saves tax at once or is carried to years 2 and 3."""
    pw = -90000.0
    carried = 0.0
    for year, benefit in ((1, 10000.0), (2, 40000.0), (3, 60000.0)):
        cash = benefit * (1 + f) ** year
        taxable = cash - 30000.0
        if carry:
            used = min(carried, max(taxable, 0.0))
            paid = tax * max(taxable - used, 0.0)
            carried += max(-taxable, 0.0) - used
        else:
            paid = tax * taxable
        pw += (cash - paid) / 1.1 ** year
    return pw


def test_combined_rate_from_state_and_federal_flags(tmp_path):
    db = loaded(tmp_path)
    run_id = screened(db, "--state-tax-rate", "0.06", "--federal-tax-rate", "0.21")
    con = duckdb.connect(str(db), read_only=True)
    rates = {r[0] for r in con.execute("SELECT tax_rate FROM scenarios WHERE run_id = ?", [run_id]).fetchall()}
    con.close()
    # combined rate t = s + f (1 - s), state tax deductible from federal income (common practice; Newnan, from memory)
    assert len(rates) == 1 and rates.pop() == pytest.approx(0.06 + 0.21 * (1 - 0.06), abs=1e-15)   # 0.2574
    got = worths(db, run_id)
    for f in (0.0, 0.05):
        assert got[f] == pytest.approx(table_x(0.1, f, 0.2574, carry=False), rel=1e-12)
    assert "combined rate t = t_s + t_f (1 - t_s)" in notes(db, run_id)["tax"]


def test_combined_rate_from_toml(tmp_path):
    db = loaded(tmp_path)
    (tmp_path / "g.toml").write_text("[tax]\nstate_rate = 0.05\nfederal_rate = 0.30\n")
    run_id = screened(db, "--grid", tmp_path / "g.toml")
    got = worths(db, run_id)
    assert got[0.0] == pytest.approx(table_x(0.1, 0.0, 0.05 + 0.30 * 0.95, carry=False), rel=1e-12)


def test_single_rate_and_pair_together_are_refused(tmp_path):
    db = loaded(tmp_path)
    out = run("screen", "--db", db, "--tax-rate", "0.25", "--state-tax-rate", "0.06", "--federal-tax-rate", "0.21")
    assert out.exit_code == 1
    assert out.output.strip() == ("Error: --state-tax-rate/--federal-tax-rate: give either one income-tax rate or "
                                  "the state and federal rates, not both. Fix: remove the single rate (tax.rate / "
                                  "--tax-rate) or the pair")
    (tmp_path / "g.toml").write_text("[tax]\nrate = 0.25\nstate_rate = 0.05\nfederal_rate = 0.30\n")
    out = run("screen", "--db", db, "--grid", tmp_path / "g.toml")
    assert out.exit_code == 1
    assert "give either one income-tax rate or the state and federal rates, not both" in out.output
    assert str(tmp_path / "g.toml") in out.output


def test_half_a_pair_is_refused(tmp_path):
    db = loaded(tmp_path)
    out = run("screen", "--db", db, "--state-tax-rate", "0.06")
    assert out.exit_code == 1
    assert out.output.strip() == ("Error: --state-tax-rate/--federal-tax-rate: the federal rate is missing; the "
                                  "combined rate needs both. Fix: give the federal rate too (0 if there is none)")
    con = duckdb.connect(str(db), read_only=True)
    assert con.execute("SELECT count(*) FROM runs").fetchone()[0] == 0     # refused: nothing written
    con.close()


@pytest.mark.parametrize("losses", ["offset", "carry-forward"])
def test_losses_flag_against_the_year_by_year_table(tmp_path, losses):
    db = loaded(tmp_path)
    run_id = screened(db, "--tax-rate", "0.3", "--losses", losses)
    got = worths(db, run_id)
    for f in (0.0, 0.05):
        assert got[f] == pytest.approx(table_x(0.1, f, 0.3, carry=losses == "carry-forward"), rel=1e-12)
    note = notes(db, run_id)["tax"]
    assert ("carried forward" in note) == (losses == "carry-forward")
    assert ("offsets the firm's other taxable income" in note) == (losses == "offset")


def test_losses_from_toml_and_the_default_is_offset(tmp_path):
    db = loaded(tmp_path)
    (tmp_path / "g.toml").write_text('[tax]\nrate = 0.3\nlosses = "carry-forward"\n')
    carried = worths(db, screened(db, "--grid", tmp_path / "g.toml"))
    default = worths(db, screened(db, "--tax-rate", "0.3"))
    assert carried[0.0] == pytest.approx(table_x(0.1, 0.0, 0.3, carry=True), rel=1e-12)
    assert default[0.0] == pytest.approx(table_x(0.1, 0.0, 0.3, carry=False), rel=1e-12)
    assert carried[0.0] < default[0.0]        # a carried loss saves its tax later, never sooner


def test_unknown_losses_value_in_toml_is_refused(tmp_path):
    db = loaded(tmp_path)
    (tmp_path / "g.toml").write_text('[tax]\nrate = 0.3\nlosses = "carryback"\n')
    out = run("screen", "--db", db, "--grid", tmp_path / "g.toml")
    assert out.exit_code == 1
    assert f"{tmp_path / 'g.toml'}: tax.losses: losses must be 'offset'" in out.output


def test_run_with_loans_has_the_cost_of_equity_note_and_one_without_has_not(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    with_loans = loaded(tmp_path / "a", LOAN_PROJECTS, LOAN_CASH_FLOWS)
    without = loaded(tmp_path / "b")
    noted = notes(with_loans, screened(with_loans, "--tax-rate", "0.3"))
    assert "cost of equity" in noted["loans"] and noted["loans"].startswith("1 project(s) carry a loan")
    assert "loans" not in notes(without, screened(without, "--tax-rate", "0.3"))
    assert "tax" in notes(without, screened(without, "--tax-rate", "0.3"))
    assert notes(without, screened(without)) == {}           # before tax, no loans: no tax or loans note
