"""Tests of ratescape.evaluate.tax: after-tax line classes against an independent cash-flow table."""
from __future__ import annotations

import doctest

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from ratescape.evaluate import tax as taxmod
from ratescape.evaluate.tax import (
    KIND_MULTIPLIER,
    after_tax_cash_flows_carry_forward,
    after_tax_lines,
    loan_schedule,
    multiplier_values,
    tax_immediate_offset,
)

# IRS Publication 946, Appendix A, Table A-1, 5-year column (half-year convention), typed here
# independently of the module's data file.
MACRS5 = [0.20, 0.32, 0.192, 0.1152, 0.1152, 0.0576]


# ---------------------------------------------------------------- helpers: own discounting

def pw_of_lines(lines, real_rate, inflation, tax_rate):
    """PW (P,) of line classes for ONE scenario, by plain discounting (not the engine's kernel):
    real lines are worth A ((1+f)(1+e))^t then-current, nominal lines A; discount at
    (1+r)(1+f) (exact Fisher); multiplier one / 1 - tau / tau."""
    i = (1 + real_rate) * (1 + inflation) - 1
    mult = {"one": 1.0, "after_tax": 1.0 - tax_rate, "tax": tax_rate}
    total = 0.0
    for (basis, esc, m), amounts in lines.items():
        t = np.arange(amounts.shape[-1])
        growth = ((1 + inflation) * (1 + esc)) ** t if basis == "real" else np.ones_like(t, dtype=float)
        total = total + mult[m] * (amounts * growth / (1 + i) ** t).sum(axis=-1)
    return total


def project_lines(p_first_cost, life, T, benefit, om_cost, om_escalation, salvage, **kw):
    """Engine-side assembly for the test: operating lines relabelled with KIND_MULTIPLIER
    plus the extra lines from after_tax_lines (with the capital lines)."""
    P = len(p_first_cost)
    lines = after_tax_lines(np.asarray(p_first_cost, float), life, T, salvage=salvage,
                            include_capital_lines=True, **kw)
    lines = {k: v.copy() for k, v in lines.items()}
    ben = np.zeros((P, T))
    cst = np.zeros((P, T))
    for p in range(P):
        ben[p, 1:life[p] + 1] = benefit[p]
        cst[p, 1:life[p] + 1] = -om_cost[p]
    key_b = ("real", 0.0, KIND_MULTIPLIER["benefit"])
    lines[key_b] = lines.get(key_b, 0.0) + ben
    lines[("real", om_escalation, KIND_MULTIPLIER["cost"])] = cst
    return lines


def hand_table(first_cost, life, benefit, om_cost, om_escalation, salvage, tau, f, r,
               dep_fractions, loan=None, itc=0.0):
    """Independent year-by-year after-tax cash-flow table in then-current money, plain loops
    (common practice layout: BTCF, depreciation, taxable income, tax, ATCF; see Sullivan,
    Wicks, Koelling, Engineering Economy, after-tax cash-flow table -- from memory)."""
    i = (1 + r) * (1 + f) - 1
    dep = [0.0] * (life + 1)
    accumulated = 0.0
    for k in range(1, life + 1):
        if k <= len(dep_fractions):
            dep[k] = first_cost * dep_fractions[k - 1]
            accumulated += dep[k]
    book_value = first_cost - accumulated
    payments = [0.0] * (life + 1)
    interest = [0.0] * (life + 1)
    if loan:
        L, rate, n = loan
        A = L * rate * (1 + rate) ** n / ((1 + rate) ** n - 1)
        bal = L
        for k in range(1, n + 1):
            interest[k] = bal * rate
            payments[k] = A
            bal = bal + interest[k] - A
    pw = 0.0
    rows = []
    for t in range(life + 1):
        operating = 0.0 if t == 0 else benefit * (1 + f) ** t - om_cost * ((1 + f) * (1 + om_escalation)) ** t
        taxable = operating - dep[t] - interest[t]
        cash = operating - payments[t]
        if t == 0:
            cash += -first_cost + (loan[0] if loan else 0.0)  # investment is capitalised, not expensed
        if t == 1:
            cash += itc * first_cost  # investment tax credit with the first year's return
        if t == life:
            sale = salvage * (1 + f) ** t
            cash += sale
            taxable += sale - book_value  # gain on disposal, taxed as ordinary income
        atcf = cash - tau * taxable
        rows.append(atcf)
        pw += atcf / (1 + i) ** t
    return pw, rows


BASE = dict(first_cost=100_000.0, benefit=35_000.0, om_cost=5_000.0, om_escalation=0.02,
            salvage=10_000.0, tau=0.25, f=0.04, r=0.06)


@pytest.mark.parametrize("life", [6, 4, 8])
def test_line_classes_match_independent_after_tax_table_macrs(life):
    # Invented demo numbers: cost 100,000, 5-year MACRS (IRS Pub. 946 Table A-1), benefits 35,000
    # a year and O&M 5,000 a year in base-year money (O&M escalating 2 %/yr above inflation),
    # salvage 10,000 base-year money at disposal, tax 25 %, inflation 4 %, real rate 6 %.
    # life 4 sells before MACRS ends (book value 17,280 written off), 8 after it ends.
    b = BASE
    T = 10
    lines = project_lines([b["first_cost"]], [life], T, [b["benefit"]], [b["om_cost"]], b["om_escalation"],
                          b["salvage"], method="macrs", recovery_years=5)
    got = pw_of_lines(lines, b["r"], b["f"], b["tau"])[0]
    want, _ = hand_table(b["first_cost"], life, b["benefit"], b["om_cost"], b["om_escalation"], b["salvage"],
                         b["tau"], b["f"], b["r"], MACRS5)
    assert got == pytest.approx(want, rel=1e-12)


def test_book_value_at_disposal_in_year_4():
    # 5-year MACRS, sold at the end of year 4: BV = 100,000 x (1 - .2 - .32 - .192 - .1152) = 17,280
    # (IRS Pub. 946 Table A-1); the "tax" class holds D_4 + BV_4 = 11,520 + 17,280 at t = 4.
    lines = after_tax_lines([100_000.0], 4, 6, method="macrs", recovery_years=5)
    np.testing.assert_allclose(lines[("nominal", 0.0, "tax")][0], [0, 20_000, 32_000, 19_200, 28_800, 0])


def test_several_methods_and_loan_and_itc_in_one_chunk():
    # Three projects in one call, one depreciation method each (per-project method), with a loan
    # and an investment tax credit; every project checked against the hand table.
    costs = [100_000.0, 80_000.0, 50_000.0]
    life = [5, 6, 4]
    salvage = [10_000.0, 8_000.0, 5_000.0]
    T = 8
    methods = np.array(["macrs", "straight-line", "declining-balance"], dtype=object)
    rec = [5, 6, 4]
    loan = [60_000.0, 0.0, 20_000.0]
    loan_rate, loan_term = 0.08, 4
    itc = 0.10
    lines = project_lines(costs, life, T, [35_000.0, 20_000.0, 18_000.0], [5_000.0, 2_000.0, 1_000.0], 0.02,
                          salvage, method=methods, recovery_years=rec, loan_amount=loan, loan_rate=loan_rate,
                          loan_term=loan_term, itc_rate=itc)
    for tau, f, r in [(0.25, 0.04, 0.06), (0.35, 0.10, 0.03), (0.0, 0.0, 0.05)]:
        got = pw_of_lines(lines, r, f, tau)
        # straight line (cost - S)/N over 6 years; 200 % DB 4 years with switch, salvage 5,000
        sl = [(80_000.0 - 8_000.0) / 6 / 80_000.0] * 6
        db_amounts = [25_000.0, 12_500.0, 6_250.0, 1_250.0]  # BV 50k -> 25k -> 12.5k -> 6.25k -> 5k
        db = [a / 50_000.0 for a in db_amounts]
        for p, fr in enumerate([MACRS5, sl, db]):
            ln = (loan[p], loan_rate, loan_term) if loan[p] else None
            want, _ = hand_table(costs[p], life[p], [35_000.0, 20_000.0, 18_000.0][p],
                                 [5_000.0, 2_000.0, 1_000.0][p], 0.02, salvage[p], tau, f, r, fr, loan=ln, itc=itc)
            assert got[p] == pytest.approx(want, rel=1e-11), (p, tau, f, r)


def test_without_tax_present_worth_does_not_depend_on_inflation():
    # BRIEF/common practice: only real lines, no tax, no differential escalation -> PW independent
    # of inflation. Here tau = 0 silences the nominal depreciation lines.
    lines = after_tax_lines([100_000.0], 6, 8, include_capital_lines=True)
    lines[("real", 0.0, "after_tax")] = lines[("real", 0.0, "after_tax")] + np.r_[0, [30_000.0] * 6, 0]
    pws = [pw_of_lines(lines, 0.06, f, 0.0)[0] for f in (0.0, 0.03, 0.1, 0.25)]
    np.testing.assert_allclose(pws, pws[0], rtol=1e-12)


def _project_example():
    lines = after_tax_lines([100_000.0], 6, 8, method="macrs", recovery_years=5, salvage=10_000.0,
                            include_capital_lines=True)
    lines[("real", 0.0, "after_tax")] = lines[("real", 0.0, "after_tax")] + np.r_[0, [30_000.0] * 6, 0]
    return lines


def test_real_and_nominal_analyses_agree():
    # Exact Fisher: deflating every then-current amount by (1+f)^t and discounting at the real
    # rate r gives the same PW as discounting then-current amounts at i = (1+r)(1+f) - 1
    # (common practice; Sullivan et al., "Price Changes", from memory).
    lines = _project_example()
    tau, r = 0.3, 0.05
    for f in (0.0, 0.02, 0.07):
        nominal_pw = pw_of_lines(lines, r, f, tau)[0]
        real_pw = 0.0
        mult = {"one": 1.0, "after_tax": 1 - tau, "tax": tau}
        for (basis, esc, m), a in lines.items():
            t = np.arange(a.shape[-1])
            then_current = a * (((1 + f) * (1 + esc)) ** t if basis == "real" else 1.0)
            real_pw += mult[m] * (then_current / (1 + f) ** t / (1 + r) ** t).sum()
        assert real_pw == pytest.approx(nominal_pw, rel=1e-12)


def test_zero_inflation_naive_real_analysis_is_exact_and_inflation_erodes_the_shield():
    # With f = 0 treating depreciation as constant money (a "real" line) changes nothing; with
    # f > 0 the correct analysis (depreciation nominal) gives a lower PW, falling as f rises,
    # because the depreciation tax shield is fixed in nominal money (common practice).
    lines = _project_example()
    naive = {(("real" if k == ("nominal", 0.0, "tax") else k[0]),) + k[1:]: v for k, v in lines.items()}
    tau, r = 0.25, 0.06
    assert pw_of_lines(lines, r, 0.0, tau)[0] == pytest.approx(pw_of_lines(naive, r, 0.0, tau)[0], rel=1e-12)
    pws = [pw_of_lines(lines, r, f, tau)[0] for f in (0.0, 0.02, 0.04, 0.08, 0.15)]
    assert all(a > b for a, b in zip(pws, pws[1:]))
    for f in (0.02, 0.08):
        assert pw_of_lines(lines, r, f, tau)[0] < pw_of_lines(naive, r, f, tau)[0]
    # the loss equals tau x (PW of depreciation at f = 0 - PW at f)
    dep = lines[("nominal", 0.0, "tax")][0]
    t = np.arange(dep.size)
    loss = tau * ((dep / 1.06 ** t).sum() - (dep / (1.06 * 1.08) ** t).sum())
    assert pws[0] - pw_of_lines(lines, r, 0.08, tau)[0] == pytest.approx(loss, rel=1e-10)


def test_fixed_rate_loan_gains_value_with_inflation():
    # A loan at a fixed nominal rate: its PW to the borrower (inflow L, level payments, tau x
    # interest) rises with inflation at a fixed real rate (common practice: debt repaid in cheaper
    # money). Identity: with no tax and discounting at the loan rate itself, PW = 0.
    lines = after_tax_lines([0.0], 1, 12, loan_amount=50_000.0, loan_rate=0.07, loan_term=10)
    r, tau = 0.03, 0.3
    pws = [pw_of_lines(lines, r, f, tau)[0] for f in (0.0, 0.02, 0.05, 0.1, 0.2)]
    assert all(a < b for a, b in zip(pws, pws[1:]))
    f_at_loan_rate = 1.07 / 1.03 - 1
    # the asset costs 0, so the "tax" class holds only the loan interest here
    assert pw_of_lines(lines, r, f_at_loan_rate, 0.0)[0] == pytest.approx(0.0, abs=1e-7)
    assert pw_of_lines(lines, r, f_at_loan_rate, tau)[0] > 0  # interest shield


def test_loan_schedule_matches_numpy_financial():
    # Cross-check with numpy-financial pmt / ipmt (reference library).
    L = np.array([50_000.0, 12_000.0, 1_000.0])
    rate = np.array([0.07, 0.0, 0.12])
    term = np.array([10, 4, 1])
    pay, intr = loan_schedule(L, rate, term, 12)
    for p in range(3):
        n = term[p]
        with np.errstate(divide="ignore", invalid="ignore"):  # npf at rate 0 divides by zero internally
            want_pay = -npf.pmt(rate[p], n, L[p])
            want_int = -npf.ipmt(rate[p], np.arange(1, n + 1), n, L[p])
        np.testing.assert_allclose(pay[p, 1:n + 1], want_pay, rtol=1e-12)
        np.testing.assert_allclose(intr[p, 1:n + 1], want_int, rtol=1e-10, atol=1e-9)
        assert np.all(pay[p, n + 1:] == 0) and pay[p, 0] == 0
        # principal repaid = L
        assert (pay[p] - intr[p]).sum() == pytest.approx(L[p], rel=1e-12)


def test_multiplier_values_and_kind_map():
    m = multiplier_values(np.array([0.0, 0.21, 0.4]))
    np.testing.assert_allclose(m["one"], 1.0)
    np.testing.assert_allclose(m["after_tax"] + m["tax"], 1.0)
    assert multiplier_values(0.25) == {"one": 1.0, "after_tax": 0.75, "tax": 0.25}
    assert KIND_MULTIPLIER["investment"] == "one"
    assert {KIND_MULTIPLIER[k] for k in ("benefit", "cost", "other", "salvage")} == {"after_tax"}
    with pytest.raises(ValueError, match="tax_rate"):
        multiplier_values([0.2, 1.0])


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"first_cost": [[1.0]]}, r"first_cost must have shape \(P,\)"),
        ({"life": 9}, "life must be <="),
        ({"life": [1, 2, 3]}, r"shape \(P,\)"),
        ({"loan_amount": 5.0}, "loan_term"),
        ({"method": ["macrs"]}, "method"),
        ({"itc_rate": 1.5}, "itc_rate"),
        ({"itc_period": 9}, "itc_period"),
        ({"life": 2.5}, "whole numbers"),
    ],
)
def test_after_tax_lines_validation(kwargs, match):
    args = dict(first_cost=[100.0, 200.0], life=3, n_periods=9)
    args.update(kwargs)
    with pytest.raises(ValueError, match=match):
        after_tax_lines(args.pop("first_cost"), args.pop("life"), args.pop("n_periods"), **args)


def test_itc_period_zero_and_basis_reduction():
    # ITC of 10 % at t = 0, half of it reducing the depreciable basis (a historical US rule, from
    # memory): depreciation on 95,000; credit 10,000 in the nominal "one" class at t = 0.
    lines = after_tax_lines([100_000.0], 6, 8, recovery_years=5, itc_rate=0.1, itc_period=0, itc_basis_reduction=0.5)
    assert lines[("nominal", 0.0, "one")][0, 0] == pytest.approx(10_000.0)
    assert lines[("nominal", 0.0, "tax")][0].sum() == pytest.approx(95_000.0)


# ---------------------------------------------------------------- carry-forward

def _carry_forward_loop(x, tau, limit=1.0):
    """Reference: scalar plain-Python loop of the carry-forward rule."""
    carry, out = 0.0, []
    for income in x:
        used = min(carry, limit * max(income, 0.0))
        out.append(tau * max(income - used, 0.0))
        carry = carry - used + max(-income, 0.0)
    return out


def test_carry_forward_hand_example():
    # Loss of 100 then incomes 60, 60 at 25 %: years 1-2 absorb the loss, tax 0, 0, 5.
    got = after_tax_cash_flows_carry_forward(np.array([[[-100.0, 60.0, 60.0]]]), np.array([0.25]))
    np.testing.assert_allclose(got, [[[0.0, 0.0, 5.0]]])
    # 80 % limitation: loss 100, income 100 -> offset 80, tax 0.25 x 20 = 5, then 20 left.
    got = after_tax_cash_flows_carry_forward(np.array([[[-100.0, 100.0, 100.0]]]), np.array([0.25]),
                                             offset_limit=0.8)
    np.testing.assert_allclose(got, [[[0.0, 5.0, 20.0]]])


@settings(max_examples=100, deadline=None)
@given(
    x=hnp.arrays(float, hnp.array_shapes(min_dims=3, max_dims=3, max_side=6),
                 elements=st.floats(min_value=-1e6, max_value=1e6)),
    data=st.data(),
)
def test_carry_forward_properties(x, data):
    S = x.shape[1]
    tau = np.array(data.draw(st.lists(st.floats(0.0, 0.6), min_size=S, max_size=S)))
    limit = data.draw(st.sampled_from([1.0, 0.8]))
    paid = after_tax_cash_flows_carry_forward(x, tau, offset_limit=limit)
    immediate = tax_immediate_offset(x, tau)
    assert paid.shape == x.shape
    assert np.all(paid >= 0)  # tax paid is never negative with carry-forward
    tol = 1e-6 * (1 + np.abs(x).sum())
    # cumulative tax paid is never below the immediate-offset cumulative, hence total and PW too
    assert np.all(np.cumsum(paid, -1) >= np.cumsum(immediate, -1) - tol)
    assert np.all(paid.sum(-1) >= immediate.sum(-1) - tol)
    d = 1.07 ** -np.arange(x.shape[2])
    assert np.all(paid @ d >= immediate @ d - tol)
    # equal when no year has a loss
    pos = np.abs(x)
    np.testing.assert_allclose(after_tax_cash_flows_carry_forward(pos, tau), tax_immediate_offset(pos, tau),
                               atol=1e-9)
    # agrees with the scalar reference loop
    for p in range(x.shape[0]):
        for s in range(S):
            np.testing.assert_allclose(paid[p, s], _carry_forward_loop(x[p, s], tau[s], limit), rtol=1e-12,
                                       atol=1e-9)


def test_carry_forward_shapes_raise():
    with pytest.raises(ValueError, match=r"\(P, S, T\)"):
        after_tax_cash_flows_carry_forward(np.zeros((2, 3)), np.zeros(3))
    with pytest.raises(ValueError, match=r"\(S,\) = \(3,\)"):
        after_tax_cash_flows_carry_forward(np.zeros((2, 3, 4)), np.zeros(2))
    with pytest.raises(ValueError, match="offset_limit"):
        after_tax_cash_flows_carry_forward(np.zeros((2, 3, 4)), np.zeros(3), offset_limit=0.0)


# ---------------------------------------------------------------- docs and purity

def test_doctests():
    result = doctest.testmod(taxmod, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0

# (purity of this module: tests/test_architecture.py covers every module of evaluate/ and decide/)
