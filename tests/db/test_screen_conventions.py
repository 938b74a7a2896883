"""Issue 14, through the real screen: MIRR over each project's own horizon, IRR under every timing
convention, nominal escalation, one profitability index, sensitivity on the run's own basis."""
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from helpers import fetch, load_csv   # tests/ is on sys.path (conftest)
from ratescape import screen_portfolio
from ratescape.evaluate.factors import p_given_a1_geometric
from ratescape.evaluate.measures import present_worth, profitability_index
from ratescape.evaluate.timing import discount_exponents

HEADER = "project_id,period,amount,basis,escalation,kind\n"


def load_flows(tmp_path, name, rows):
    """Load a portfolio given as cash-flow rows (project_id, period, amount, basis, escalation, kind)."""
    folder = tmp_path / name
    folder.mkdir()
    ids = sorted({r[0] for r in rows})
    return load_csv(folder, "project_id,name\n" + "".join(f"{p},{p}\n" for p in ids),
                    HEADER + "".join(",".join(str(x) for x in r) + "\n" for r in rows))


def stream_rows(pid, amounts, basis="real", escalation=0.0, invest_first=True):
    rows = []
    for t, a in enumerate(amounts):
        if a != 0:
            kind = "investment" if (t == 0 and a < 0 and invest_first) else ("benefit" if a > 0 else "cost")
            rows.append((pid, t, a, basis, escalation, kind))
    return rows


# ------------------------------------------------------------------------------------------ MIRR (part 1)

flows = st.lists(st.integers(-500, 500).map(float), min_size=2, max_size=6)


@settings(max_examples=12, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(own=flows, others=st.lists(st.lists(st.integers(-300, 300).map(float), min_size=7, max_size=12),
                                  min_size=1, max_size=3))
def test_mirr_of_a_project_does_not_change_when_longer_projects_are_added(tmp_path_factory, own, others):
    """Property (issue 14, defect 1): the stored MIRR of project A is the same alone and in a
    portfolio padded to a longer horizon by other projects, and equals numpy-financial's mirr on
    A's own stream (its last non-zero period), annual at the base nominal rate (end of period,
    nominal lines at zero inflation so the then-current stream is the input)."""
    own = [-100.0] + own + [50.0]                       # a sign change and a non-zero last period
    tmp = tmp_path_factory.mktemp("mirr")
    alone = load_flows(tmp, "alone", stream_rows("A", own, basis="nominal"))
    rows = stream_rows("A", own, basis="nominal")
    for k, o in enumerate(others):
        o = list(o) + [1.0]
        rows += stream_rows(f"Z{k}", o, basis="real")
    mixed = load_flows(tmp, "mixed", rows)
    got = []
    for db in (alone, mixed):
        run = screen_portfolio(db, discount_rates="0.06:0.10:3", inflation="0:0.04:3", keep="summary")
        got.append(fetch(db, "SELECT mirr_base FROM project_summary WHERE run_id = ? AND project_id = 'A'", [run])[0][0])
    want = npf.mirr(own, 0.08, 0.08)                    # numpy-financial: finance = reinvest = base rate 8 %
    assert got[0] == pytest.approx(want, rel=1e-12, abs=1e-12)
    assert got[1] == pytest.approx(got[0], rel=1e-12, abs=1e-12)


def test_mirr_after_tax_uses_the_projects_own_horizon(tmp_path):
    """After tax the portfolio gets an extra period for write-offs; a project of horizon 3 whose
    tax lines end at 3 keeps its MIRR whether a 9-period project is loaded or not (defect 1)."""
    a = stream_rows("A", [-100.0, 45.0, 45.0, 45.0])
    b = stream_rows("B", [-100.0] + [20.0] * 9)
    got = []
    for name, rows in (("alone", a), ("with", a + b)):
        db = load_flows(tmp_path, name, rows)
        run = screen_portfolio(db, discount_rates="0.06:0.10:3", inflation="0:0.04:3", after_tax=True,
                               tax_rate=0.25, keep="summary")
        got.append(fetch(db, "SELECT mirr_base FROM project_summary WHERE run_id = ? AND project_id = 'A'", [run])[0][0])
    assert got[0] is not None
    # no outside source: invariance check (A's MIRR may not change when B is added to the portfolio)
    assert got[1] == pytest.approx(got[0], rel=1e-12)


# ------------------------------------------------------------------------------- IRR and timing (part 2)

@pytest.mark.parametrize("timing", ["end", "mid", "beginning"])
@settings(max_examples=8, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(benefits=st.lists(st.integers(20, 80).map(float), min_size=2, max_size=6),
       nominal_part=st.lists(st.integers(-20, 20).map(float), min_size=2, max_size=6),
       escalation=st.sampled_from([0.0, 0.03]))
def test_stored_irr_zeroes_the_stored_present_worth_under_every_timing(tmp_path_factory, timing, benefits,
                                                                     nominal_part, escalation):
    """Property (issue 14, defect 2): under every timing, the stored unique IRR at each inflation
    level is a rate at which ratescape's own present_worth of the then-current stream (same
    exponents) is zero; and the stored results at the grid rates just below and above the IRR
    have the signs the IRR implies (PW > 0 below it, < 0 above, a conventional investment)."""
    tmp = tmp_path_factory.mktemp("irr")
    real = [-150.0] + benefits                                          # one sign change: a unique IRR
    rows = stream_rows("R", real) + stream_rows("M", real, escalation=escalation)
    rows += [("M", t + 1, a, "nominal", escalation, "other") for t, a in enumerate(nominal_part) if a != 0]
    db = load_flows(tmp, "db", rows)
    run = screen_portfolio(db, discount_rates="0:0.3:61", inflation="0:0.06:3", timing=timing)
    irr = fetch(db, "SELECT project_id, inflation, irr_nominal FROM irr_results WHERE run_id = ? AND status = 'unique'",
                [run])
    assert {p for p, _, _ in irr} >= {"R"}
    T = max(len(real), len(nominal_part) + 1)
    tau = discount_exponents(T, timing)
    flows_db = fetch(db, "SELECT project_id, period, amount, basis, escalation FROM cash_flows")
    for pid, f, rate in irr:
        stream = np.zeros(T)
        for p, t, a, basis, e in flows_db:
            if p == pid:      # then-current money with the same exponents the present worth uses
                stream[t] += a * ((1 + f) * (1 + e)) ** tau[t] if basis == "real" else a * (1 + e) ** tau[t]
        scale = np.abs(stream).sum()
        assert abs(present_worth(stream, rate, timing=timing)) <= 1e-9 * scale
        grid = fetch(db, """SELECT sc.discount_rate, r.present_worth FROM results r JOIN scenarios sc
                            ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id
                            WHERE r.run_id = ? AND r.project_id = ? AND sc.inflation = ? ORDER BY 1""", [run, pid, f])
        for i, pw in grid:
            if i < rate - 1e-9 and pw != 0:
                assert pw > 0
            if i > rate + 1e-9 and pw != 0:
                assert pw < 0


def test_mid_period_irr_of_a_real_project_is_not_the_end_of_period_irr(tmp_path):
    """The defect as reported: an all-real project under mid-period timing got the end-of-period
    IRR. Stream -100, +60, +60 (real, no escalation) at inflation 0: the mid-year IRR solves
    -100 + 60 x^-0.5 + 60 x^-1.5 = 0 (x = 1 + i); SciPy's brentq is the independent reference."""
    from scipy.optimize import brentq
    db = load_flows(tmp_path, "db", stream_rows("A", [-100.0, 60.0, 60.0]))
    run = screen_portfolio(db, discount_rates="0.05:0.15:3", inflation="0:0.04:3", timing="mid")
    got = dict(fetch(db, "SELECT inflation, irr_nominal FROM irr_results WHERE run_id = ?", [run]))
    want = brentq(lambda i: -100 + 60 * (1 + i) ** -0.5 + 60 * (1 + i) ** -1.5, 0.0, 1.0, xtol=1e-15)
    assert got[0.0] == pytest.approx(want, rel=1e-10)
    assert got[0.0] != pytest.approx(npf.irr([-100, 60, 60]), rel=1e-3)          # not the end-of-period IRR
    assert got[0.04] == pytest.approx(1.04 * (1 + want) - 1, rel=1e-10)           # exact Fisher
    # the discount-rate switching value (nominal run) is the same rate
    sv = fetch(db, "SELECT switching_value FROM sensitivity WHERE run_id = ? AND input = 'discount_rate'", [run])[0][0]
    assert sv == pytest.approx(1.02 * (1 + want) - 1, rel=1e-8)                  # base inflation 2 %


def test_beginning_of_period_merges_period_zero_and_one(tmp_path):
    """Beginning of period: period 1's flow falls now, beside period 0's. -100 now and +30 in
    period 1 (now) then +40, +40: the IRR is that of -70, 40, 40 (numpy-financial's irr)."""
    db = load_flows(tmp_path, "db", stream_rows("A", [-100.0, 30.0, 40.0, 40.0]))
    run = screen_portfolio(db, discount_rates="0.05:0.15:3", inflation="0:0.04:3", timing="beginning")
    got = dict(fetch(db, "SELECT inflation, irr_nominal FROM irr_results WHERE run_id = ?", [run]))
    assert got[0.0] == pytest.approx(npf.irr([-70, 40, 40]), rel=1e-10)


# ----------------------------------------------------------------------- nominal escalation (part 3)

def test_nominal_escalating_lease_matches_the_geometric_gradient_factor(tmp_path):
    """A nominal lease of 1,000 a year for 10 years escalating 4 % a year by contract: then-current
    payment in year t is 1,000 x 1.04^t, so PW = 1,040 (P/A1, g = 4 %, i, 10), the geometric
    gradient series present-worth factor (Sullivan, Wicks & Koelling, Engineering Economy,
    Pearson, geometric gradient series; A1 = the first payment). The stored PW is the same at
    every inflation level (a contractual rate does not move with general inflation)."""
    rows = [("L", 0, -5000.0, "nominal", 0.0, "investment")]
    rows += [("L", t, 1000.0, "nominal", 0.04, "benefit") for t in range(1, 11)]
    db = load_flows(tmp_path, "db", rows)
    run = screen_portfolio(db, discount_rates="0.05:0.15:3", inflation="0:0.06:4", keep="all")
    got = fetch(db, """SELECT sc.discount_rate, sc.inflation, r.present_worth FROM results r JOIN scenarios sc
                       ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id WHERE r.run_id = ?""", [run])
    assert len(got) == 12
    for i, f, pw in got:
        want = -5000.0 + 1040.0 * p_given_a1_geometric(0.04, i, 10)
        assert pw == pytest.approx(want, rel=1e-12), (i, f)
    # hand value at 10 %: A1 (1 - (1.04/1.10)^10) / (0.10 - 0.04)
    hand = -5000 + 1040 * (1 - (1.04 / 1.10) ** 10) / 0.06
    assert [pw for i, f, pw in got if i == 0.10 and f == 0.0][0] == pytest.approx(hand, rel=1e-12)
    # the IRR at every inflation level is the same nominal rate (numpy-financial on the contract stream)
    irr = fetch(db, "SELECT irr_nominal FROM irr_results WHERE run_id = ?", [run])
    want = npf.irr([-5000.0] + [1000.0 * 1.04 ** t for t in range(1, 11)])
    assert all(r == pytest.approx(want, rel=1e-10) for (r,) in irr)


def test_nominal_escalation_reaches_sensitivity_and_after_tax(tmp_path):
    """The point evaluator (sensitivity) and the after-tax screen see the contractual escalation:
    the sensitivity's base worth equals the stored base PW, and after tax at 25 % the PW of the
    escalating benefit is 0.75 of its before-tax PW (benefit lines carry 1 - t)."""
    rows = [("L", t, 1000.0, "nominal", 0.05, "benefit") for t in range(1, 6)]
    rows += [("L", 0, -4000.0, "nominal", 0.0, "cost")]
    db = load_flows(tmp_path, "db", rows)
    run = screen_portfolio(db, discount_rates="0.08:0.08:1", inflation="0.02:0.02:1", after_tax=True,
                           tax_rate=0.25)
    (pw, before), = fetch(db, "SELECT pw_base, pw_before_tax_base FROM project_summary WHERE run_id = ?", [run])
    benefit = 1000.0 * 1.05 * p_given_a1_geometric(0.05, 0.08, 5)
    # source: geometric-gradient (P/A1, g, i, N) of Newnan, Eschenbach & Lavelle, Engineering Economic Analysis
    # (from memory), as evaluate.factors writes it
    assert before == pytest.approx(benefit - 4000.0, rel=1e-12)
    # computed independently: every line is a taxed benefit or cost, so after tax = (1 - 0.25) x before tax
    assert pw == pytest.approx(0.75 * (benefit - 4000.0), rel=1e-12)
    (wb,), = fetch(db, "SELECT worth_base FROM sensitivity WHERE run_id = ? AND input = 'inflation'", [run])
    # no outside source: the sensitivity's base worth must equal the stored base PW
    assert wb == pytest.approx(pw, rel=1e-12)


# --------------------------------------------------------------------------- profitability index (part 4)

def test_api_and_stored_profitability_index_agree_with_staged_investment(tmp_path):
    """One definition (issue 14, defect 9): PI = PV(every flow other than the investment outlays)
    / PV(investment outlays) = 1 + PW / PV(investment). Investment in periods 0 and 1; the API
    with ``investment=`` gives the stored value; hand value beside it."""
    rows = [("A", 0, -600.0, "nominal", 0.0, "investment"), ("A", 1, -400.0, "nominal", 0.0, "investment")]
    rows += [("A", t, 300.0, "nominal", 0.0, "benefit") for t in range(1, 6)]
    db = load_flows(tmp_path, "db", rows)
    run = screen_portfolio(db, discount_rates="0.10:0.10:1", inflation="0:0:1", keep="all")
    (stored,), = fetch(db, "SELECT profitability_index FROM results WHERE run_id = ?", [run])
    amounts = np.array([-600.0, -100.0, 300.0, 300.0, 300.0, 300.0])
    api = profitability_index(amounts, 0.10, investment=[600.0, 400.0])
    pv_inv = 600 + 400 / 1.1
    hand = sum(300 / 1.1 ** t for t in range(1, 6)) / pv_inv
    assert stored == pytest.approx(hand, rel=1e-12)
    assert api == pytest.approx(stored, rel=1e-12)


# --------------------------------------------------------------------------- sensitivity basis (part 5)

@settings(max_examples=10, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(amounts=st.lists(st.integers(-200, 200).map(float), min_size=2, max_size=8),
       escalation=st.sampled_from([0.0, 0.02, -0.01]),
       timing=st.sampled_from(["end", "mid", "beginning"]))
def test_real_basis_real_only_project_shows_no_sensitivity_to_inflation(tmp_path_factory, amounts, escalation,
                                                                         timing):
    """Property (issue 14, defect 11): on a real-basis run, a project with only real lines and no
    tax is worth the same at the low and high inflation of the tornado as at base, its spider is
    flat in inflation, and it has no inflation switching value, as the grid itself shows."""
    amounts = [-300.0] + amounts
    tmp = tmp_path_factory.mktemp("sens")
    db = load_flows(tmp, "db", stream_rows("A", amounts, escalation=escalation))
    run = screen_portfolio(db, discount_rates="0.02:0.06:3", inflation="0:0.08:3", discount_basis="real",
                           timing=timing)
    (wb, lo, hi, sv, status), = fetch(db, """SELECT worth_base, worth_low, worth_high, switching_value,
                                             switching_status FROM sensitivity WHERE run_id = ? AND input = 'inflation'""",
                                       [run])
    scale = sum(abs(a) for a in amounts)
    # computed independently: real lines on a real-rate axis are worth the same at every inflation (Fisher 1930;
    # common practice), so the value must equal the base worth
    assert lo == pytest.approx(wb, abs=1e-9 * scale) and hi == pytest.approx(wb, abs=1e-9 * scale)
    spider = fetch(db, "SELECT present_worth FROM spider WHERE run_id = ? AND input = 'inflation'", [run])
    # computed independently: real lines on a real-rate axis are worth the same at every inflation (Fisher 1930;
    # common practice), so the value must equal the base worth
    assert all(pw == pytest.approx(wb, abs=1e-9 * scale) for (pw,) in spider)
    if abs(wb) > 1e-6 * scale:
        assert sv is None
    grid = fetch(db, """SELECT min(r.present_worth), max(r.present_worth) FROM results r JOIN scenarios sc
                        ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id
                        WHERE r.run_id = ? AND sc.real_rate = 0.04""", [run])[0]
    # computed independently: real lines on a real-rate axis are worth the same at every inflation (Fisher 1930;
    # common practice), so the value must equal the base worth
    assert grid[0] == pytest.approx(wb, abs=1e-9 * scale) and grid[1] == pytest.approx(wb, abs=1e-9 * scale)


def test_real_basis_discount_rate_range_and_switching_value_are_real(tmp_path):
    """On a real-basis run the discount-rate tornado range is the real axis asked for (2 %..6 %),
    not the nominal rates the grid implies, and the discount-rate switching value is the real IRR
    (numpy-financial's irr of the real stream); the switching-values query names the basis."""
    from ratescape.query import run_query
    db = load_flows(tmp_path, "db", stream_rows("A", [-100.0, 30.0, 40.0, 50.0]))
    run = screen_portfolio(db, discount_rates="0.02:0.06:3", inflation="0:0.08:3", discount_basis="real")
    (base, low, high, sv), = fetch(db, """SELECT base_value, low_value, high_value, switching_value FROM sensitivity
                                         WHERE run_id = ? AND input = 'discount_rate'""", [run])
    assert (base, low, high) == pytest.approx((0.04, 0.02, 0.06))
    assert sv == pytest.approx(npf.irr([-100, 30, 40, 50]), rel=1e-8)
    frame = run_query(db, "switching-values", {"input": "discount_rate"})
    assert frame["discount_basis"].to_list() == ["real"]
    assert frame["input_label"].to_list() == ["real discount rate"]


def test_report_names_the_real_basis(tmp_path):
    """The report of a real-basis run describes its base scenario and its sensitivity inputs in
    real rates (defect 11: a real-basis run is not described in nominal rates)."""
    from ratescape.report.chart_style import discount_rate_label, sensitivity_input_label
    from ratescape.report.publish import write_report
    assert discount_rate_label("real") == "real discount rate"
    assert sensitivity_input_label("inflation", "real") == "inflation (real discount rate held)"
    assert sensitivity_input_label("discount_rate", "nominal") == "nominal discount rate"
    db = load_flows(tmp_path, "db", stream_rows("A", [-100.0, 30.0, 40.0, 50.0]))
    run = screen_portfolio(db, discount_rates="0.02:0.06:3", inflation="0:0.08:3", discount_basis="real")
    page = write_report(db, tmp_path / "r.html", run, projects=["A"]).read_text()
    assert "real discount rate 4.00% (nominal 8.16%), inflation 4.00%" in page
    assert "real discount rate held" in page and "nominal discount rate" not in page


def test_run_notes_state_the_conventions(tmp_path):
    """A mid-period, real-basis run over a nominal escalating line states each convention once, in
    run_notes (timing and tax placement, the sensitivity's basis, contractual escalation)."""
    rows = stream_rows("A", [-100.0, 30.0, 40.0, 50.0]) + [("A", 2, 10.0, "nominal", 0.03, "benefit")]
    db = load_flows(tmp_path, "db", rows)
    run = screen_portfolio(db, discount_rates="0.02:0.06:3", inflation="0:0.08:3", discount_basis="real",
                           timing="mid")
    notes = dict(fetch(db, "SELECT topic, note FROM run_notes WHERE run_id = ?", [run]))
    assert set(notes) == {"timing", "discount_basis", "escalation"}
    assert "not at year end" in notes["timing"] and "real IRR" in notes["discount_basis"]
    end = screen_portfolio(db, discount_rates="0.02:0.06:3", inflation="0:0.08:3")
    assert set(dict(fetch(db, "SELECT topic, note FROM run_notes WHERE run_id = ?", [end]))) == {"escalation"}


@pytest.mark.parametrize("timing", ["mid", "beginning"])
def test_after_tax_irr_equals_the_discount_rate_switching_value(tmp_path, timing):
    """After tax (25 %, straight line) under mid/beginning timing, the stored IRR at the base
    inflation is the discount-rate switching value the point evaluator finds on the same after-tax
    lines (IRR, acceptance and switching value agree), and the stored results change sign there."""
    rows = stream_rows("A", [-1000.0] + [260.0] * 6)
    db = load_flows(tmp_path, "db", rows)
    run = screen_portfolio(db, discount_rates="0:0.2:41", inflation="0:0.04:3", after_tax=True, tax_rate=0.25,
                           timing=timing)
    irr = dict(fetch(db, "SELECT inflation, irr_nominal FROM irr_results WHERE run_id = ?", [run]))
    (sv,), = fetch(db, "SELECT switching_value FROM sensitivity WHERE run_id = ? AND input = 'discount_rate'", [run])
    # no outside source: the discount-rate switching value is the IRR by definition (common practice)
    assert sv == pytest.approx(irr[0.02], rel=1e-8)
    grid = fetch(db, """SELECT sc.discount_rate, r.present_worth FROM results r JOIN scenarios sc
                        ON sc.run_id = r.run_id AND sc.scenario_id = r.scenario_id
                        WHERE r.run_id = ? AND sc.inflation = 0.02 ORDER BY 1""", [run])
    assert all((pw > 0) == (i < irr[0.02]) for i, pw in grid)


def test_mirr_with_quarterly_periods(tmp_path):
    """Four periods a year: the stored MIRR is numpy-financial's mirr at the quarterly rate
    (1.08)^(1/4) - 1 on the project's own stream, annualised as (1 + x)^4 - 1."""
    own = [-100.0, 20.0, 30.0, 40.0, 35.0]
    rows = stream_rows("A", own, basis="nominal") + stream_rows("B", [-50.0] + [5.0] * 15, basis="nominal")
    db = load_flows(tmp_path, "db", rows)
    run = screen_portfolio(db, discount_rates="0.06:0.10:3", inflation="0:0.04:3", periods_per_year=4)
    (got,), = fetch(db, "SELECT mirr_base FROM project_summary WHERE run_id = ? AND project_id = 'A'", [run])
    q = 1.08 ** 0.25 - 1
    assert got == pytest.approx((1 + npf.mirr(own, q, q)) ** 4 - 1, rel=1e-12)
