"""Cost-only alternatives (least life-cycle cost) and must-fund projects through the real screen.

Sources: numpy-financial (npv, pmt) for every worth; brute-force enumeration of the portfolios for
the rationing optimum (common practice for small 0-1 programs); L. T. Blank, A. J. Tarquin,
Engineering Economy, 7th ed., McGraw-Hill, 2012, "National Homebuilders" vendors (from memory:
A 15,000 / 3,500 a year / salvage 1,000 / 6 years; B 18,000 / 3,100 / 2,000 / 9 years; 15 %).
"""
import itertools

import duckdb
import numpy_financial as npf
import pytest

from ratescape import load_portfolio, screen_portfolio

PROJECTS = """project_id,name,group,mandatory,first_cost,annual_cost,annual_benefit,salvage,life
VA,Vendor A,homes,,15000,3500,,1000,6
VB,Vendor B,homes,,18000,3100,,2000,9
RR,Regulatory roof,,true,9000,100,,,10
G1,Good one,,,10000,,3000,,6
G2,Good two,,,8000,,2200,,6
"""
GRID = """
[grid]
discount_basis = "nominal"
discount_rates = { values = [0.10, 0.15] }
inflation = { values = [0.0, 0.03] }
base = { discount_rate = 0.15, inflation = 0.0 }
[budget]
periods = { "0" = BUDGET }
"""


def screened(tmp_path, budget=40000.0, projects=PROJECTS):
    (tmp_path / "p.csv").write_text(projects)
    (tmp_path / "g.toml").write_text(GRID.replace("BUDGET", repr(budget)))
    db = tmp_path / "plan.duckdb"
    load_portfolio(tmp_path / "p.csv", None, db)
    run_id = screen_portfolio(db, grid=tmp_path / "g.toml")
    return duckdb.connect(str(db), read_only=True), run_id


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    con, run_id = screened(tmp_path_factory.mktemp("cost"))
    yield con, run_id
    con.close()


def test_cost_only_measures_are_null_with_a_status(run):
    con, run_id = run
    rows = {r[0]: r[1:] for r in con.execute("""
        SELECT project_id, measure_status, bc_ratio_base, bc_ratio_modified_base, mirr_base, payback_periods,
               discounted_payback_base, investment_worth, pw_base, annual_worth_base
        FROM project_summary WHERE run_id = ?""", [run_id]).fetchall()}
    for pid in ("VA", "VB", "RR"):
        status, *measures, pw, aw = rows[pid]
        assert status == "cost-only"
        assert measures == [None] * 6
        assert pw < 0 and aw < 0                     # the life-cycle cost stays
    # Blank & Tarquin (from memory) via numpy-financial: vendor A's PW over its own life at 15 %
    assert rows["VA"][-2] == pytest.approx(npf.npv(0.15, [-15000] + [-3500] * 5 + [-2500]), rel=1e-12)
    status, bc, *_ = rows["G1"]
    assert status is None and bc is not None and bc > 1   # a project with benefits keeps its measures
    irr = con.execute("""SELECT DISTINCT status, irr_nominal, root_count FROM irr_results
                         WHERE run_id = ? AND project_id = 'VA'""", [run_id]).fetchall()
    assert irr == [("cost-only", None, 0)]
    assert con.execute("SELECT count(*) FROM irr_roots WHERE run_id = ? AND project_id = 'VA'", [run_id]).fetchone()[0] == 0
    pi = con.execute("""SELECT count(*), count(profitability_index) FROM results
                        WHERE run_id = ? AND project_id = 'VB'""", [run_id]).fetchone()
    assert pi == (4, 0)
    g1 = con.execute("SELECT DISTINCT status FROM irr_results WHERE run_id = ? AND project_id = 'G1'", [run_id]).fetchall()
    assert g1 == [("unique",)]


def test_cost_only_group_is_a_least_cost_choice(run):
    con, run_id = run
    rows = con.execute("""SELECT DISTINCT preferred, runner_up, least_cost, basis FROM group_decisions
                          WHERE run_id = ? AND group_name = 'homes'""", [run_id]).fetchall()
    # do nothing does not compete: the vendor of least equivalent annual cost (B, as the text finds)
    assert rows == [("VB", "VA", True, "annual-worth")]


def test_least_cost_query_and_report_headline(tmp_path):
    from ratescape.query import run_query
    from ratescape.report.publish import write_report
    con, run_id = screened(tmp_path)
    con.close()
    db = tmp_path / "plan.duckdb"
    frame = run_query(db, "least-cost-choices", {"run": run_id})
    assert frame.select("group_name", "preferred", "scenarios", "share", "basis").rows() == [
        ("homes", "VB", 4, 1.0, "annual-worth")]
    out = tmp_path / "r.html"
    write_report(db, out, run_id=run_id)
    html = out.read_text()
    assert "Least-cost choices" in html and "not whether to accept" in html


def test_must_fund_project_is_funded_first(run):
    con, run_id = run
    # RR (mandatory, no group) is in every scenario's portfolio although its worth is negative;
    # the rest is the brute-force optimum of the remaining budget (40,000 - 9,000 at period 0)
    pw = dict(con.execute("SELECT project_id, pw_base FROM project_summary WHERE run_id = ?", [run_id]).fetchall())
    base = con.execute("SELECT scenario_id FROM scenarios WHERE run_id = ? AND is_base", [run_id]).fetchone()[0]
    chosen = {r[0] for r in con.execute("SELECT project_id FROM selections WHERE run_id = ? AND scenario_id = ?",
                                        [run_id, base]).fetchall()}
    cost = {"VA": 15000, "VB": 18000, "G1": 10000, "G2": 8000}
    best = max((c for k in range(4) for c in itertools.combinations(cost, k)
                if sum(cost[p] for p in c) <= 31000 and not {"VA", "VB"} <= set(c)),
               key=lambda c: sum(pw[p] for p in c))
    assert chosen == {"RR", *best}
    n = con.execute("""SELECT count(DISTINCT scenario_id) FROM selections WHERE run_id = ? AND project_id = 'RR'""",
                    [run_id]).fetchone()[0]
    assert n == 4
    assert con.execute("SELECT DISTINCT status FROM portfolios WHERE run_id = ?", [run_id]).fetchall() == [("optimal",)]


def test_must_fund_over_budget_is_infeasible_with_a_message(tmp_path, capfd):
    con, run_id = screened(tmp_path, budget=5000.0)
    assert con.execute("SELECT DISTINCT status FROM portfolios WHERE run_id = ?", [run_id]).fetchall() == [("infeasible",)]
    note = con.execute("SELECT note FROM run_notes WHERE run_id = ? AND topic = 'rationing'", [run_id]).fetchone()[0]
    assert note.startswith("capital rationing: the must-fund projects and mandatory groups (RR) do not fit the "
                           "budgets in 4 of 4 scenarios")
    assert "do not fit the budgets in 4 of 4 scenarios" in capfd.readouterr().err


def test_a_sale_without_investment_has_no_benefit_cost_ratio(tmp_path):
    # invented: a parcel sold now for 9,000 net of a 250 fee (an "other" line, no investment, no
    # benefit line). Its present worth is the net proceeds (numpy-financial npv); its B/C ratios
    # have nothing positive to divide by and are NULL, not an overflowing infinity
    (tmp_path / "cf.csv").write_text("project_id,period,amount,basis,escalation,kind\n"
                                     "S1,0,9000,nominal,0,other\nS1,0,-250,nominal,0,cost\n")
    (tmp_path / "p.csv").write_text("project_id,name\nS1,Parcel sale (invented)\n")
    (tmp_path / "g.toml").write_text(GRID.split("[budget]")[0])
    db = tmp_path / "plan.duckdb"
    load_portfolio(tmp_path / "p.csv", tmp_path / "cf.csv", db)
    run_id = screen_portfolio(db, grid=tmp_path / "g.toml")
    con = duckdb.connect(str(db), read_only=True)
    try:
        status, bc, bc_mod, pw = con.execute("""SELECT measure_status, bc_ratio_base, bc_ratio_modified_base, pw_base
                                                FROM project_summary WHERE run_id = ?""", [run_id]).fetchone()
    finally:
        con.close()
    assert pw == pytest.approx(npf.npv(0.15, [8750.0]), rel=1e-14)
    assert (bc, bc_mod, status) == (None, None, None)
