"""Working capital, land and staged capital after tax, through the real CLI, against independent
year-by-year after-tax tables computed in the test.

Sources: IRS Publication 946 (2023), How to Depreciate Property, Appendix A, Table A-1 (5-year
property, half-year convention: 20.00, 32.00, 19.20, 11.52, 11.52, 5.76 %); the after-tax
cash-flow table with working capital and land of W. G. Sullivan, E. M. Wicks, C. P. Koelling,
Engineering Economy, Pearson, chapter "Depreciation and Income Taxes" (from memory: working
capital is paid out at the start, recovered at the end, never deducted nor taxed; land is not
depreciated, and its sale's gain over cost is taxed); C. S. Park, Contemporary Engineering
Economics, Pearson, chapter on project cash flows (from memory, same conventions). The
figures of the projects are invented; the tables below are written out year by year, not
through ratescape's code.
"""
import pytest

from helpers import cli_load_and_screen, fetch   # tests/ is on sys.path (conftest)

MACRS_5 = [0.20, 0.32, 0.192, 0.1152, 0.1152, 0.0576]   # IRS Pub 946 Table A-1, 5-year column

PROJECTS = """project_id,name,depreciation_method,recovery_years
W,Plant with working capital and land,macrs,5
B,Land sold below cost,macrs,5
G,Two-stage plant,macrs,5
N,Nominal second stage,macrs,5
E,Escalated nominal second stage,macrs,5
"""


def lines(pid: str, periods, amount: int, kind: str) -> str:
    """One real, unescalated cash-flow line of ``amount`` per period."""
    return "".join(f"{pid},{t},{amount},real,0,{kind}\n" for t in periods)


CASH_FLOWS = ("project_id,period,amount,basis,escalation,kind\n"
              "W,0,-100000,real,0,investment\nW,0,-20000,real,0,working_capital\nW,0,-30000,real,0,land\n"
              + lines("W", range(1, 6), 45000, "benefit") + lines("W", range(1, 6), -10000, "cost")
              + "W,5,15000,real,0,salvage\n"
              "B,0,-50000,real,0,investment\nB,0,-40000,real,0,land\n"
              + lines("B", range(1, 4), 30000, "benefit") + "B,3,25000,nominal,0,land\n"
              # three two-stage plants: the second stage real, nominal, and nominal with escalation
              "G,0,-60000,real,0,investment\nG,2,-40000,real,0.01,investment\n"
              + lines("G", range(1, 7), 30000, "benefit")
              + "N,0,-60000,real,0,investment\nN,3,-40000,nominal,0,investment\n"
              + lines("N", range(1, 7), 30000, "benefit")
              + "E,0,-60000,real,0,investment\nE,3,-40000,nominal,0.02,investment\n"
              + lines("E", range(1, 7), 30000, "benefit"))

RATES = [0.06, 0.12]
INFLATION = [0.0, 0.04, 0.08]
TAX = 0.25


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    db, run_id = cli_load_and_screen(tmp_path_factory.mktemp("kinds"), PROJECTS, CASH_FLOWS, "--discount-rates",
                                     "0.06:0.12:2", "--inflation", "0:0.08:3", "--tax-rate", TAX)
    rows = fetch(db, """SELECT r.project_id, sc.discount_rate, sc.inflation, r.present_worth, r.present_worth_before_tax
                        FROM results r JOIN scenarios sc USING (run_id, scenario_id) WHERE run_id = ?""", [run_id])
    return {(p, round(i, 9), round(f, 9)): (pw, before) for p, i, f, pw, before in rows}


def stored(screened, project, i, f, column=0):
    return screened[(project, round(i, 9), round(f, 9))][column]


def plant_with_working_capital(i, f, tax):
    """Project W's after-tax table: MACRS 5-year plant sold at year 5 for its real salvage, working
    capital recovered at year 5 at its real value (untaxed), land sold at year 5 at its real value
    (the inflation-only gain taxed)."""
    g = 1.0 + f
    pw = -100000.0 - 20000.0 - 30000.0
    book = 100000.0
    for year in range(1, 6):
        dep = 100000.0 * MACRS_5[year - 1]
        book -= dep
        taxable = (45000.0 - 10000.0) * g ** year - dep
        cash = (45000.0 - 10000.0) * g ** year
        if year == 5:
            sale = 15000.0 * g ** 5
            taxable += sale - book                  # recapture: gain over book value
            land = 30000.0 * g ** 5
            taxable += land - 30000.0               # land gain over its (historical) cost
            cash += sale + land + 20000.0 * g ** 5  # working capital back, not taxed
        pw += (cash - tax * taxable) / (1.0 + i) ** year
    return pw


def land_below_cost(i, f, tax):
    g = 1.0 + f
    pw = -50000.0 - 40000.0
    book = 50000.0
    for year in range(1, 4):
        dep = 50000.0 * MACRS_5[year - 1]
        book -= dep
        taxable = 30000.0 * g ** year - dep
        cash = 30000.0 * g ** year
        if year == 3:
            taxable -= book                         # plant written off at disposal (no sale)
            taxable += 25000.0 - 40000.0            # land sold below cost: the loss saves tax
            cash += 25000.0
        pw += (cash - tax * taxable) / (1.0 + i) ** year
    return pw


def two_stage(i, f, tax, second_cost, second_period, price_growth):
    """Explicit loop: stage 1 (60,000 at period 0) and stage 2 (its price of period k) each depreciated
    by MACRS 5-year from its own service period, the rest written off at the horizon (period 6)."""
    g = 1.0 + f
    k = second_period
    basis2 = second_cost * price_growth ** k
    pw = -60000.0 - basis2 / (1.0 + i) ** k
    for year in range(1, 7):
        dep = 60000.0 * MACRS_5[year - 1]
        j = year - k
        if 1 <= j <= 6:
            dep += basis2 * MACRS_5[j - 1]
        if year == 6:                       # book values left written off at disposal
            dep += 60000.0 * (1 - sum(MACRS_5[:6]))
            dep += basis2 * (1 - sum(MACRS_5[:6 - k]))
        taxable = 30000.0 * g ** year - dep
        pw += (30000.0 * g ** year - tax * taxable) / (1.0 + i) ** year
    return pw


@pytest.mark.parametrize("f", INFLATION)
@pytest.mark.parametrize("i", RATES)
def test_working_capital_and_land_after_tax(screened, i, f):
    # source: the independent year-by-year after-tax table above (IRS Pub 946 Table A-1; Sullivan, Wicks &
    # Koelling, from memory)
    assert stored(screened, "W", i, f) == pytest.approx(plant_with_working_capital(i, f, TAX), rel=1e-10)


@pytest.mark.parametrize("f", INFLATION)
@pytest.mark.parametrize("i", RATES)
def test_working_capital_and_land_before_tax_are_ordinary_flows(screened, i, f):
    g = 1.0 + f
    expected = -150000.0 + sum(35000.0 * g ** y / (1 + i) ** y for y in range(1, 6)) \
        + (15000.0 + 20000.0 + 30000.0) * g ** 5 / (1 + i) ** 5
    # computed independently here: before-tax PW written out year by year, (P/F, i, t) by hand
    assert stored(screened, "W", i, f, column=1) == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("f", INFLATION)
@pytest.mark.parametrize("i", RATES)
def test_land_sold_below_cost_saves_tax_on_the_loss(screened, i, f):
    # source: the independent year-by-year after-tax table above (IRS Pub 946 Table A-1; Sullivan, Wicks &
    # Koelling, from memory)
    assert stored(screened, "B", i, f) == pytest.approx(land_below_cost(i, f, TAX), rel=1e-10)


@pytest.mark.parametrize("f", INFLATION)
@pytest.mark.parametrize("i", RATES)
def test_two_stage_real_investment_depreciated_from_its_own_period(screened, i, f):
    expected = two_stage(i, f, TAX, 40000.0, 2, (1.0 + f) * 1.01)
    # source: the independent year-by-year after-tax table above (IRS Pub 946 Table A-1; Sullivan, Wicks &
    # Koelling, from memory)
    assert stored(screened, "G", i, f) == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("f", INFLATION)
@pytest.mark.parametrize("i", RATES)
def test_nominal_stage_basis_is_its_contract_price(screened, i, f):
    """A nominal-basis stage's basis is its contract price whatever the inflation."""
    expected = two_stage(i, f, TAX, 40000.0, 3, 1.0)
    # source: the independent year-by-year after-tax table above (IRS Pub 946 Table A-1; Sullivan, Wicks &
    # Koelling, from memory)
    assert stored(screened, "N", i, f) == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("f", INFLATION)
def test_escalated_nominal_stage_costs_its_escalated_price(screened, f):
    """A nominal stage with a contractual escalation e costs amount x (1 + e)^k in period k, and
    that is its depreciable basis."""
    expected = two_stage(0.06, f, TAX, 40000.0, 3, 1.02)
    # source: the independent year-by-year after-tax table above (IRS Pub 946 Table A-1; Sullivan, Wicks &
    # Koelling, from memory)
    assert stored(screened, "E", 0.06, f) == pytest.approx(expected, rel=1e-10)


def test_staged_shield_depends_on_inflation_only_through_the_basis(screened):
    """At a fixed real rate the PW of a real-basis stage's shield still falls with inflation (the
    deductions are fixed in nominal money from the service period): the two-stage worth at 0 %
    and 8 % inflation differ exactly as the independent tables do."""
    d_ours = stored(screened, "G", 0.12, 0.08) - stored(screened, "G", 0.12, 0.0)
    d_table = two_stage(0.12, 0.08, TAX, 40000.0, 2, 1.08 * 1.01) - two_stage(0.12, 0.0, TAX, 40000.0, 2, 1.01)
    # source: the independent year-by-year after-tax table above (IRS Pub 946 Table A-1; Sullivan, Wicks &
    # Koelling, from memory)
    assert d_ours == pytest.approx(d_table, rel=1e-9)
