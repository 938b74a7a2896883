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


def taxes_paid(taxable, tax, carry):
    """Tax of each year on the taxable incomes given: tax x income at once (a loss saves tax against the
    firm's other income), or with each loss carried forward without expiry to the project's own later
    profits (Internal Revenue Code section 172, mechanism only; common practice)."""
    paid, carried = [], 0.0
    for x in taxable:
        if carry:
            used = min(carried, max(x, 0.0))
            paid.append(tax * max(x - used, 0.0))
            carried += max(-x, 0.0) - used
        else:
            paid.append(tax * x)
    return paid


def table_x(i, f, tax, carry):
    """Project X year by year: straight-line 30,000 a year over 3 years; a year-1 loss of 20,000
    (at f = 0) either saves tax at once or is carried to years 2 and 3 (discounted at 10 %)."""
    cash = [benefit * (1 + f) ** year for year, benefit in ((1, 10000.0), (2, 40000.0), (3, 60000.0))]
    paid = taxes_paid([c - 30000.0 for c in cash], tax, carry)
    return -90000.0 + sum((c - p) / 1.1 ** year for year, (c, p) in enumerate(zip(cash, paid), start=1))


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


# Project Z (invented): a contract whose benefit is fixed in nominal money and escalates by 4 % a
# period by contract (a nominal line with escalation), so its taxable income grows by 1.04^t whatever
# the inflation; year 1 is a loss that a stand-alone project carries forward.
ESCALATED_FLOWS = """project_id,period,amount,basis,escalation,kind
Z,0,-90000,real,0,investment
Z,1,5000,nominal,0.04,benefit
Z,2,45000,nominal,0.04,benefit
Z,3,70000,nominal,0.04,benefit
"""
ESCALATED_PROJECTS = PROJECTS.replace("X,Start-up line", "Z,Escalating contract")


def flows_z(tax, carry):
    """After-tax then-current flows of Z, year by year (straight line 30,000 a year over 3 years)."""
    cash = [benefit * 1.04 ** year for year, benefit in ((1, 5000.0), (2, 45000.0), (3, 70000.0))]
    return [-90000.0] + [c - p for c, p in zip(cash, taxes_paid([c - 30000.0 for c in cash], tax, carry))]


def test_carried_losses_follow_a_nominal_lines_contractual_escalation(tmp_path):
    import numpy_financial as npf
    db = loaded(tmp_path, ESCALATED_PROJECTS, ESCALATED_FLOWS)
    run_id = screened(db, "--tax-rate", "0.3", "--losses", "carry-forward")
    got = worths(db, run_id, "Z")
    # the nominal line does not move with inflation: the same worth at f = 0 and f = 0.05
    for f in (0.0, 0.05):
        assert got[f] == pytest.approx(npf.npv(0.1, flows_z(0.3, carry=True)), rel=1e-12)   # numpy-financial
    assert got[0.0] < npf.npv(0.1, flows_z(0.3, carry=False))   # the carried loss saves its tax later


def flows_x(f, tax, carry):
    """Project X's after-tax then-current flows at inflation f, the same year-by-year table as table_x."""
    return flows_x_moved(f, tax, carry=carry)


def test_irr_and_mirr_include_the_carried_losses(tmp_path):
    import numpy_financial as npf
    from scipy.optimize import brentq
    db = loaded(tmp_path)
    run_id = screened(db, "--tax-rate", "0.3", "--losses", "carry-forward")
    con = duckdb.connect(str(db), read_only=True)
    try:
        irr = dict(con.execute("SELECT round(inflation, 9), irr_nominal FROM irr_results WHERE run_id = ? "
                               "AND project_id = 'X'", [run_id]).fetchall())
        mirr = con.execute("SELECT mirr_base FROM project_summary WHERE run_id = ? AND project_id = 'X'",
                           [run_id]).fetchone()[0]
        base_f = con.execute("SELECT inflation FROM scenarios WHERE run_id = ? AND is_base", [run_id]).fetchone()[0]
    finally:
        con.close()
    assert table_x(0.1, 0.05, 0.3, True) == pytest.approx(npf.npv(0.1, flows_x(0.05, 0.3, True)), rel=1e-13)
    for f in (0.0, 0.05):
        # the IRR is the rate at which the stored (carried-forward) worth is zero: SciPy's brentq on
        # the year-by-year table, cross-checked with numpy-financial's irr
        carried = brentq(lambda i, f=f: npf.npv(i, flows_x(f, 0.3, True)), 0.0, 0.5, xtol=1e-14)
        offset = brentq(lambda i, f=f: npf.npv(i, flows_x(f, 0.3, False)), 0.0, 0.5, xtol=1e-14)
        assert carried == pytest.approx(npf.irr(flows_x(f, 0.3, True)), abs=1e-9)
        assert irr[f] == pytest.approx(carried, abs=1e-9)
        assert abs(carried - offset) > 1e-4       # the check can tell the two treatments apart
    assert mirr == pytest.approx(npf.mirr(flows_x(base_f, 0.3, True), 0.1, 0.1), abs=1e-12)   # numpy-financial


GROUP_PROJECTS = ("project_id,name,group,depreciation_method,recovery_years\n"
                  "X,Start-up line,line,straight-line,3\n"
                  "W,Steady line,line,straight-line,3\n")
GROUP_FLOWS = CASH_FLOWS + """W,0,-60000,real,0,investment
W,1,26000,real,0,benefit
W,2,26000,real,0,benefit
W,3,26000,real,0,benefit
"""


def flows_w(f, tax):
    """W's after-tax then-current flows: taxable 26,000 (1+f)^t - 20,000 > 0 every year (no loss)."""
    return [-60000.0] + [26000.0 * (1 + f) ** t - tax * (26000.0 * (1 + f) ** t - 20000.0) for t in (1, 2, 3)]


def test_decision_map_frontier_uses_the_carried_losses(tmp_path):
    import numpy_financial as npf
    db = loaded(tmp_path, GROUP_PROJECTS, GROUP_FLOWS)
    out = run("screen", "--db", db, "--discount-rates", "0.02:0.3:15", "--inflation", "0:0.08:5", "--tax-rate", "0.3",
              "--losses", "carry-forward", "--quiet")
    assert out.exit_code == 0, out.output
    run_id = out.stdout.strip().splitlines()[-1]
    con = duckdb.connect(str(db), read_only=True)
    try:
        pts = con.execute("""SELECT x, y FROM frontiers WHERE run_id = ? AND x_axis = 'discount_rate'
                             AND y_axis = 'inflation' AND alternative_a IN ('X', 'W')
                             AND alternative_b IN ('X', 'W')""", [run_id]).fetchall()
        unconverged = con.execute("SELECT count(*) FROM frontiers WHERE run_id = ? AND NOT converged",
                                  [run_id]).fetchone()[0]
        # the group's preferred alternative in each scenario is the one the results table ranks first
        disagree = con.execute("""
            WITH best AS (SELECT scenario_id, arg_max(project_id, present_worth) AS top, max(present_worth) AS pw
                          FROM results WHERE run_id = ? GROUP BY scenario_id)
            SELECT count(*) FROM group_decisions g JOIN best b USING (scenario_id)
            WHERE g.run_id = ? AND g.preferred <> CASE WHEN b.pw >= 0 THEN b.top ELSE g.preferred END""",
                               [run_id, run_id]).fetchone()[0]
    finally:
        con.close()
    assert len(pts) >= 5 and unconverged == 0 and disagree == 0
    for i, f in pts:
        # on the frontier the two stand-alone after-tax worths (numpy-financial's npv of the
        # year-by-year tables, losses carried forward) are equal; with the loss offset at once they are not
        x_carried, w = npf.npv(i, flows_x(f, 0.3, True)), npf.npv(i, flows_w(f, 0.3))
        assert x_carried == pytest.approx(w, abs=1e-6 * max(abs(w), 1.0)), (i, f)
        assert abs(npf.npv(i, flows_x(f, 0.3, False)) - w) > 1.0


# A cost overrun raises the depreciable basis with the outlay (the depreciation deduction is a share
# of the asset's actual cost: IRS Publication 946, "What Is the Basis for Depreciation?", cost basis;
# common practice), while a loan's amount, payments and interest are fixed by contract. Invented:
# B buys 60,000 of plant now and 40,000 (real) next year, earns 30,000 (real) a year for 5 years,
# depreciates each asset straight line over 5 years from its own period (disposed of at 5: the
# rest written off), and borrows 50,000 at 8 % over 3 years.
OVERRUN_PROJECTS = ("project_id,name,depreciation_method,recovery_years,loan_amount,loan_rate,loan_term\n"
                    "B,Staged plant,straight-line,5,50000,0.08,3\n")
OVERRUN_FLOWS = "project_id,period,amount,basis,escalation,kind\nB,0,-60000,real,0,investment\n" \
                "B,1,-40000,real,0,investment\n" + "".join(f"B,{t},30000,real,0,benefit\n" for t in range(1, 6))
OVERRUN_GRID = """[grid]
discount_basis = "nominal"
discount_rates = { values = [0.10] }
inflation = { values = [0.03] }
cost_multiplier = { values = [1.0, 1.25] }
base = { discount_rate = 0.10, inflation = 0.03, cost_multiplier = 1.0 }
[tax]
rate = 0.25
[sensitivity]
first_cost = [0.8, 1.3]
"""


def flows_b(m, f=0.03, tax=0.25):
    """B's after-tax then-current flows, periods 0..5, at cost multiplier m (numpy_financial.pmt for the loan)."""
    import numpy_financial as npf
    out = [-60000.0 * m + 50000.0, -40000.0 * m * (1 + f)] + [0.0] * 4
    payment = -npf.pmt(0.08, 3, 50000.0)
    balance = 50000.0
    second = 40000.0 * m * (1 + f)                       # the second asset's cost in period-1 money
    for t in range(1, 6):
        benefit = 30000.0 * (1 + f) ** t
        depreciation = 12000.0 * m + (second / 5 if t >= 2 else 0.0)
        if t == 5:
            depreciation += second - 4 * second / 5      # book value written off at disposal
        interest = balance * 0.08 if t <= 3 else 0.0
        if t <= 3:
            balance -= payment - interest
            out[t] -= payment
        out[t] += benefit - tax * (benefit - depreciation - interest)
    return out


def test_a_cost_overrun_scales_the_depreciation_but_not_the_loan(tmp_path):
    import numpy_financial as npf
    db = loaded(tmp_path, OVERRUN_PROJECTS, OVERRUN_FLOWS)
    (tmp_path / "g.toml").write_text(OVERRUN_GRID)
    out = run("screen", "--db", db, "--grid", tmp_path / "g.toml", "--quiet")
    assert out.exit_code == 0, out.output
    run_id = out.stdout.strip().splitlines()[-1]
    con = duckdb.connect(str(db), read_only=True)
    try:
        grid = dict(con.execute("""SELECT sc.cost_multiplier, r.present_worth FROM results r
                                   JOIN scenarios sc USING (run_id, scenario_id) WHERE run_id = ?""",
                                [run_id]).fetchall())
        low, high, switch = con.execute("""SELECT worth_low, worth_high, switching_value FROM sensitivity
                                           WHERE run_id = ? AND input = 'first_cost'""", [run_id]).fetchone()
    finally:
        con.close()
    for m in (1.0, 1.25):                                # the grid's cost-multiplier axis
        assert grid[m] == pytest.approx(npf.npv(0.10, flows_b(m)), rel=1e-12)
    assert low == pytest.approx(npf.npv(0.10, flows_b(0.8)), rel=1e-12)      # the tornado's ends
    assert high == pytest.approx(npf.npv(0.10, flows_b(1.3)), rel=1e-12)
    # worth is linear in m: the switching value is where the year-by-year table crosses zero (SciPy brentq)
    from scipy.optimize import brentq
    assert switch == pytest.approx(brentq(lambda m: npf.npv(0.10, flows_b(m)), 0.5, 5.0, xtol=1e-14), rel=1e-10)


def test_investment_tax_credit_follows_the_cost_on_the_grid_and_in_the_tornado(tmp_path):
    db = loaded(tmp_path, OVERRUN_PROJECTS, OVERRUN_FLOWS)
    grid = OVERRUN_GRID.replace("first_cost = [0.8, 1.3]", "first_cost = [0.8, 1.25]").replace(
        "rate = 0.25", "rate = 0.25\ninvestment_tax_credit = 0.1")
    (tmp_path / "g.toml").write_text(grid)
    out = run("screen", "--db", db, "--grid", tmp_path / "g.toml", "--quiet")
    assert out.exit_code == 0, out.output
    run_id = out.stdout.strip().splitlines()[-1]
    con = duckdb.connect(str(db), read_only=True)
    try:
        at_125 = con.execute("""SELECT r.present_worth FROM results r JOIN scenarios sc USING (run_id, scenario_id)
                                WHERE run_id = ? AND sc.cost_multiplier = 1.25""", [run_id]).fetchone()[0]
        base = con.execute("SELECT pw_base FROM project_summary WHERE run_id = ?", [run_id]).fetchone()[0]
        high = con.execute("SELECT worth_high FROM sensitivity WHERE run_id = ? AND input = 'first_cost'",
                           [run_id]).fetchone()[0]
    finally:
        con.close()
    import numpy_financial as npf
    # the two evaluators (grid tensor and one-at-a-time) agree; the credit (10 % of each asset's cost,
    # received a period after it) grows with the overrun: worth(1.25) - worth(1) is the table's change
    # plus a quarter of the credits' worth
    assert high == pytest.approx(at_125, rel=1e-12)
    credits = npf.npv(0.10, [0.0, 6000.0, 4000.0 * 1.03])
    assert at_125 - base == pytest.approx(npf.npv(0.10, flows_b(1.25)) - npf.npv(0.10, flows_b(1.0))
                                          + 0.25 * credits, rel=1e-9)


def flows_x_moved(f, tax=0.3, m=1.0, bm=1.0, s=0.0, carry=True):
    """Project X's after-tax flows with its first cost times m (its depreciation too), its benefits
    times bm and its real escalation shifted by s; losses carried forward or offset at once."""
    cash = [bm * benefit * ((1 + f) * (1 + s)) ** year for year, benefit in ((1, 10000.0), (2, 40000.0), (3, 60000.0))]
    paid = taxes_paid([c - 30000.0 * m for c in cash], tax, carry)
    return [-90000.0 * m] + [c - p for c, p in zip(cash, paid)]


def test_tornado_and_switching_values_carry_the_losses_forward(tmp_path):
    import numpy_financial as npf
    from scipy.optimize import brentq
    db = loaded(tmp_path)
    (tmp_path / "g.toml").write_text("""[grid]
discount_basis = "nominal"
discount_rates = { values = [0.05, 0.10, 0.15] }
inflation = { values = [0.0, 0.05] }
base = { discount_rate = 0.10, inflation = 0.0 }
[tax]
rate = 0.3
losses = "carry-forward"
""")
    out = run("screen", "--db", db, "--grid", tmp_path / "g.toml", "--quiet")
    assert out.exit_code == 0, out.output
    run_id = out.stdout.strip().splitlines()[-1]
    con = duckdb.connect(str(db), read_only=True)
    try:
        rows = {r[0]: r[1:] for r in con.execute("""SELECT input, worth_base, worth_low, worth_high, switching_value
                                                    FROM sensitivity WHERE run_id = ?""", [run_id]).fetchall()}
        spider = dict(con.execute("""SELECT round(change, 6), present_worth FROM spider
                                     WHERE run_id = ? AND input = 'first_cost'""", [run_id]).fetchall())
    finally:
        con.close()

    def npv(i=0.10, **moved):          # numpy-financial's npv of the year-by-year table
        return npf.npv(i, flows_x_moved(moved.pop("f", 0.0), **moved))

    # tornado ends (defaults: rates over the grid's axes; first cost 0.8-1.3; benefits 0.7-1.2;
    # escalation -0.02..+0.02), each from the table with the loss carried forward
    expected = {"discount_rate": (npv(0.05), npv(0.15)), "inflation": (npv(f=0.0), npv(f=0.05)),
                "first_cost": (npv(m=0.8), npv(m=1.3)), "benefits": (npv(bm=0.7), npv(bm=1.2)),
                "escalation": (npv(s=-0.02), npv(s=0.02))}
    for name, (low, high) in expected.items():
        assert rows[name][0] == pytest.approx(npv(), rel=1e-12)
        assert rows[name][1:3] == pytest.approx((low, high), rel=1e-10), name
    # switching values: where the table's worth crosses zero (SciPy's brentq)
    assert rows["discount_rate"][3] == pytest.approx(brentq(lambda i: npv(i), 0.0, 0.5, xtol=1e-14), abs=1e-9)
    assert rows["first_cost"][3] == pytest.approx(brentq(lambda m: npv(m=m), 0.5, 3.0, xtol=1e-14), abs=1e-9)
    assert rows["benefits"][3] == pytest.approx(brentq(lambda b: npv(bm=b), 0.1, 2.0, xtol=1e-14), abs=1e-9)
    assert rows["escalation"][3] == pytest.approx(brentq(lambda s: npv(s=s), -0.5, 0.5, xtol=1e-14), abs=1e-9)
    # the linear tax would give another first-cost switching value: the check tells them apart
    linear = brentq(lambda m: npf.npv(0.10, flows_x_moved(0.0, m=m, carry=False)), 0.5, 3.0)
    assert abs(rows["first_cost"][3] - linear) > 1e-3
    for change, worth in spider.items():
        assert worth == pytest.approx(npv(m=1.0 + change), rel=1e-10)
