"""After-tax screening through the whole pipeline, against an independent year-by-year table.

Sources: IRS Publication 946 (2023), How to Depreciate Property, Appendix A, Table A-1
(5-year property, half-year convention: 20.00, 32.00, 19.20, 11.52, 11.52, 5.76 %);
the after-tax cash-flow table layout of engineering-economy texts (Sullivan, Wicks &
Koelling, Engineering Economy, Pearson; from memory); loss offset against other income of
the firm in the same year (common practice, stated in the README).
"""
import duckdb
import numpy as np
import pytest

from helpers import load_csv   # tests/ is on sys.path (conftest)
from ratescape import load_portfolio, screen_portfolio

MACRS_5 = [0.20, 0.32, 0.192, 0.1152, 0.1152, 0.0576]   # IRS Pub 946 Table A-1, 5-year column

PROJECTS = """project_id,name,first_cost,annual_benefit,benefit_basis,benefit_escalation,annual_cost,cost_basis,cost_escalation,salvage,life,depreciation_method,recovery_years,loan_amount,loan_rate,loan_term
M,Machine (MACRS 5),100000,30000,real,0,5000,real,0.02,10000,6,macrs,5,,,
S,Van (straight line),40000,12000,real,0,,,,4000,4,straight-line,4,,,
L,Borrowed plant,100000,30000,real,0,5000,real,0.02,10000,6,macrs,5,60000,0.06,4
"""


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    return load_csv(tmp_path_factory.mktemp("tax"), PROJECTS)


def stored(path, run_id, column="present_worth"):
    con = duckdb.connect(str(path), read_only=True)
    try:
        return {(p, round(i, 10), round(f, 10), None if t is None else round(t, 10)): v for p, i, f, t, v in con.execute(f"""
            SELECT r.project_id, sc.discount_rate, sc.inflation, sc.tax_rate, r.{column}
            FROM results r JOIN scenarios sc USING (run_id, scenario_id) WHERE run_id = ?""", [run_id]).fetchall()}
    finally:
        con.close()


def machine_after_tax_pw(i, f, tax, loan=None):
    """Independent after-tax table of project M (or L with a loan), year by year, nominal money."""
    pw = -100000.0
    book = 100000.0
    balance = 0.0
    payment = 0.0
    if loan:
        amount, rate, term = loan
        pw += amount
        balance = amount
        payment = amount * rate / (1 - (1 + rate) ** -term)
    for year in range(1, 7):
        benefit = 30000 * (1 + f) ** year
        cost = 5000 * ((1 + f) * 1.02) ** year
        dep = 100000 * MACRS_5[year - 1]
        book -= dep
        taxable = benefit - cost - dep
        cash = benefit - cost
        if loan and year <= loan[2]:
            interest = balance * loan[1]
            balance -= payment - interest
            taxable -= interest
            cash -= payment
        if year == 6:
            sale = 10000 * (1 + f) ** 6
            taxable += sale - book          # gain over book value taxed as ordinary income
            cash += sale
        pw += (cash - tax * taxable) / (1 + i) ** year
    return pw


def van_after_tax_pw(i, f, tax):
    pw = -40000.0
    dep = (40000 - 4000) / 4                 # straight line to the estimated salvage
    for year in range(1, 5):
        benefit = 12000 * (1 + f) ** year
        taxable = benefit - dep
        cash = benefit
        if year == 4:
            sale = 4000 * (1 + f) ** 4
            taxable += sale - 4000           # book value at disposal = estimated salvage
            cash += sale
        pw += (cash - tax * taxable) / (1 + i) ** year
    return pw


def test_engine_matches_independent_after_tax_tables(db):
    run_id = screen_portfolio(db, discount_rates="0.04:0.16:4", inflation="0:0.08:3", tax_rate="0.2,0.35")
    got = stored(db, run_id)
    assert len(got) == 3 * 4 * 3 * 2
    for (p, i, f, t), pw in got.items():
        if p == "M":
            want = machine_after_tax_pw(i, f, t)
        elif p == "S":
            want = van_after_tax_pw(i, f, t)
        else:
            want = machine_after_tax_pw(i, f, t, loan=(60000, 0.06, 4))
        assert pw == pytest.approx(want, rel=1e-10, abs=1e-6), (p, i, f, t)


def test_before_tax_worth_is_stored_beside_and_equals_a_before_tax_run(db):
    after = screen_portfolio(db, discount_rates="0.04:0.16:4", inflation="0:0.08:3", tax_rate="0.3")
    before = screen_portfolio(db, discount_rates="0.04:0.16:4", inflation="0:0.08:3")
    bt = stored(db, after, "present_worth_before_tax")
    plain = stored(db, before)
    for (p, i, f, _t), v in bt.items():
        if p == "L":
            continue   # financing flows are after-tax lines only; L's before-tax worth equals M's
        assert v == pytest.approx(plain[(p, i, f, None)], rel=1e-12)
        assert bt[("L", i, f, _t)] == pytest.approx(v if p == "M" else bt[("L", i, f, _t)], rel=1e-12)
    # every project has one outlay at time 0, so every PI is derived: the after-tax rows sit in
    # the table without a PI column (no empty column stored), the before-tax run's in PW only
    con = duckdb.connect(str(db), read_only=True)
    try:
        counts = {(table, run): con.execute(f"""SELECT count(*) FROM {table} x JOIN scenarios s USING (scenario_key)
                                                WHERE s.run_id = ?""", [run]).fetchone()[0]
                  for table in ("result_rows_pw", "result_rows_after_tax", "result_rows_full")
                  for run in (after, before)}
    finally:
        con.close()
    assert counts == {("result_rows_pw", after): 0, ("result_rows_after_tax", after): 3 * 12,
                      ("result_rows_full", after): 0, ("result_rows_pw", before): 3 * 12,
                      ("result_rows_after_tax", before): 0, ("result_rows_full", before): 0}


def test_inflation_erodes_the_depreciation_shield_at_a_fixed_real_rate(db):
    # BRIEF section 3: depreciation is fixed in nominal money, so at a fixed real rate the
    # after-tax worth falls as inflation rises (the loan-free projects).
    run_id = screen_portfolio(db, discount_rates="0.05", discount_basis="real", inflation="0:0.1:6", tax_rate="0.3")
    con = duckdb.connect(str(db), read_only=True)
    rows = con.execute("""SELECT r.project_id, sc.inflation, r.present_worth, r.present_worth_before_tax
                          FROM results r JOIN scenarios sc USING (run_id, scenario_id)
                          WHERE run_id = ? ORDER BY 1, 2""", [run_id]).fetchall()
    con.close()
    for pid in ("M", "S"):
        after = [r[2] for r in rows if r[0] == pid]
        before = [r[3] for r in rows if r[0] == pid]
        assert np.all(np.diff(after) < 0), pid
        # M has escalating costs, so only S's before-tax worth is independent of inflation
        if pid == "S":
            np.testing.assert_allclose(before, before[0], rtol=1e-12)


def test_zero_inflation_real_and_nominal_analyses_agree(db):
    a = screen_portfolio(db, discount_rates="0.06", discount_basis="real", inflation="0", tax_rate="0.25")
    b = screen_portfolio(db, discount_rates="0.06", discount_basis="nominal", inflation="0", tax_rate="0.25")
    sa = {k[0]: v for k, v in stored(db, a).items()}
    sb = {k[0]: v for k, v in stored(db, b).items()}
    for p in sa:
        assert sa[p] == pytest.approx(sb[p], rel=1e-13)


def test_a_fixed_rate_loan_gains_value_as_inflation_rises(db):
    # borrowing at a fixed nominal rate: the real burden of the payments falls with inflation (common practice)
    run_id = screen_portfolio(db, discount_rates="0.05", discount_basis="real", inflation="0:0.1:3", tax_rate="0.25")
    got = stored(db, run_id)
    edge = {}
    for (p, i, f, t), v in got.items():
        edge.setdefault(f, {})[p] = v
    gains = [edge[f]["L"] - edge[f]["M"] for f in sorted(edge)]
    assert np.all(np.diff(gains) > 0)


def test_after_tax_needs_a_tax_rate(db):
    from ratescape.errors import RunError
    with pytest.raises(RunError, match="after-tax screening needs an income-tax rate"):
        screen_portfolio(db, discount_rates="0.05", inflation="0", after_tax=True)


def test_mid_quarter_convention_from_the_projects_file(tmp_path):
    """MACRS 5-year property placed in service in the fourth quarter: IRS Publication 946, Appendix A,
    Table A-5 (mid-quarter convention, 4th quarter), 5-year column: 5.00, 38.00, 22.80, 13.68, 10.94,
    9.58 % (as embedded in evaluate/tables; the 5-year column agrees across the transcriptions cited
    there). An independent after-tax table at zero inflation is compared with the engine."""
    db = load_csv(tmp_path, "project_id,name,first_cost,annual_benefit,life,depreciation_method,recovery_years,"
                  "depreciation_convention,service_quarter\n"
                  "Q,Late-year press,100000,28000,6,macrs,5,mid-quarter,4\n"
                  "H,Same press (half-year),100000,28000,6,macrs,5,,\n")
    run_id = screen_portfolio(db, discount_rates="0.1", inflation="0", tax_rate="0.3")
    got = {k[0]: v for k, v in stored(db, run_id).items()}
    for pid, table in (("Q", [0.05, 0.38, 0.228, 0.1368, 0.1094, 0.0958]), ("H", MACRS_5)):
        pw = -100000.0
        for year in range(1, 7):
            taxable = 28000 - 100000 * table[year - 1]
            pw += (28000 - 0.3 * taxable) / 1.1 ** year
        assert got[pid] == pytest.approx(pw, rel=1e-10), pid
    assert got["Q"] < got["H"]   # a fourth-quarter start defers the deductions


def test_unknown_depreciation_method_is_refused_at_load(tmp_path):
    from ratescape.errors import ValidationError
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,life,depreciation_method\n"
                                    "Z,Odd,100,30,5,sum-of-years\n")
    with pytest.raises(ValidationError, match="column 'depreciation_method': unknown value"):
        load_portfolio(tmp_path / "p.csv", None, tmp_path / "x.duckdb")


def test_after_tax_run_resumed_without_its_worth_files_equals_a_full_run(db):
    """The worth files of an after-tax run also hold the before-tax PW ("pwb"), from which result
    rows are written; a resumed run whose files were deleted rebuilds all three (identity)."""
    import shutil
    from pathlib import Path
    args = dict(discount_rates="0.04:0.16:4", inflation="0:0.08:3", tax_rate="0.2,0.35", chunk_size=1)
    full = screen_portfolio(db, **args)
    part = screen_portfolio(db, stop_after_chunks=2, **args)
    folder = Path(f"{db}.scratch") / part
    assert sorted(p.name for p in folder.iterdir() if p.name.startswith("pwb")) == ["pwb-0000000.f8",
                                                                                    "pwb-0000001.f8"]
    shutil.rmtree(folder)
    assert screen_portfolio(db, resume=part) == part
    for column in ("present_worth", "profitability_index", "present_worth_before_tax"):
        assert stored(db, part, column) == stored(db, full, column)
    assert not folder.exists()
