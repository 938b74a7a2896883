"""Measures of worth: cross-checks against numpy-financial, identities,
timing conventions, payback conventions, shapes (Hypothesis).

Published / reference values are checked in test_refcases_core.py.
"""
from __future__ import annotations

import doctest

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from ratescape.evaluate import factors as fac
from ratescape.evaluate import measures as m


@pytest.fixture
def rows():
    """Random invented cash-flow rows (P=200, T=12): investment then mixed flows."""
    rng = np.random.default_rng(20240601)
    a = rng.normal(100.0, 400.0, size=(200, 12))
    a[:, 0] = -rng.uniform(500, 3000, size=200)
    return a


# ------------------------------------------------------- present worth --
def test_present_worth_matches_numpy_financial_npv(rows):
    # numpy_financial.npv discounts values[0] at t = 0, as present_worth does
    for rate in (0.0, 0.03, 0.12, -0.2, 1.5):
        expect = np.array([npf.npv(rate, r) for r in rows])
        np.testing.assert_allclose(m.present_worth(rows, rate), expect, rtol=1e-12, atol=1e-9)


def test_present_worth_rate_grid_matches_numpy_financial(rows):
    # rate (K, 1) against rows (P, T) gives a (K, P) scenario-by-project grid;
    # reference: numpy_financial.npv one rate and one row at a time
    rates = np.array([0.0, 0.05, 0.1, 0.25])
    expect = np.array([[npf.npv(r, row) for row in rows] for r in rates])
    got = m.present_worth(rows, rates[:, None])
    assert got.shape == (4, rows.shape[0])
    np.testing.assert_allclose(got, expect, rtol=1e-12, atol=1e-9)


def test_present_worth_rate_per_row(rows):
    rates = np.linspace(0.0, 0.3, rows.shape[0])
    expect = np.array([npf.npv(r, row) for r, row in zip(rates, rows)])
    np.testing.assert_allclose(m.present_worth(rows, rates), expect, rtol=1e-12, atol=1e-9)


def test_timing_conventions():
    # Warnings of ratescape.evaluate.timing: mid = t - 1/2, beginning = t - 1
    # (ASTM E917 conventions; common practice)
    a = np.array([-1000.0, 300, 400, 500])
    i = 0.08
    later = a.copy()
    later[0] = 0.0
    end = m.present_worth(a, i)
    mid = m.present_worth(a, i, timing="mid")
    beg = m.present_worth(a, i, timing="beginning")
    assert mid == pytest.approx(a[0] + (end - a[0]) * 1.08 ** 0.5, rel=1e-14)
    assert beg == pytest.approx(a[0] + (end - a[0]) * 1.08, rel=1e-14)
    with pytest.raises(ValueError, match="timing"):
        m.present_worth(a, i, timing="middle")


def test_periods_per_year_uses_exact_per_period_rate():
    # (1 + i)^(1/m) - 1 per period (refcases README / BRIEF: exact conversion)
    a = np.r_[-5000.0, np.full(24, 230.0)]
    annual = 0.1268250301319698  # = 1.01^12 - 1
    pw_monthly = m.present_worth(a, annual, periods_per_year=12)
    assert pw_monthly == pytest.approx(npf.npv(0.01, a), rel=1e-12)


def test_future_worth():
    a = np.r_[0.0, np.full(10, 100.0)]
    # (F/A, 10%, 10) = 15.9374 (factor tables; numpy_financial.fv cross-check)
    assert m.future_worth(a, 0.10) == pytest.approx(-npf.fv(0.10, 10, 100.0, 0.0), rel=1e-12)
    assert m.future_worth(a, 0.10) == pytest.approx(100 * fac.f_given_a(0.10, 10), rel=1e-13)


def test_annual_worth_identities(rows):
    # AW of a uniform series is the series itself; AW = -pmt(i, n, PW) (numpy_financial.pmt)
    a = np.r_[0.0, np.full(7, 250.0)]
    assert m.annual_worth(a, 0.09) == pytest.approx(250.0, rel=1e-13)
    assert m.annual_worth(a, 0.0) == pytest.approx(250.0, rel=1e-13)
    pw = m.present_worth(rows, 0.07)
    expect = -npf.pmt(0.07, rows.shape[1] - 1, pw)
    np.testing.assert_allclose(m.annual_worth(rows, 0.07), expect, rtol=1e-12)
    with pytest.raises(ValueError, match=r"shape \(1,\)"):
        m.annual_worth([100.0], 0.1)


def test_capital_recovery_identities():
    # CR = (P-S)(A/P) + S i = P(A/P) - S(A/F)   (Newnan et al., annual worth)
    P, S, i, n = 80000.0, 15000.0, 0.09, 12
    alt = P * fac.a_given_p(i, n) - S * fac.a_given_f(i, n)
    assert m.capital_recovery_cost(P, S, i, n) == pytest.approx(alt, rel=1e-13)
    # i = 0 limit: straight (P - S)/n
    assert m.capital_recovery_cost(P, S, 0.0, n) == pytest.approx((P - S) / n, rel=1e-15)
    out = m.capital_recovery_cost([P, 2 * P], S, [[0.05], [0.1]], n)
    assert out.shape == (2, 2)


# ----------------------------------------------------------- ratios -----
@settings(max_examples=100, deadline=None)
@given(st.floats(1e3, 1e6), st.floats(0, 5e5), st.floats(0, 1e5), st.floats(0.0, 0.3),
       st.integers(1, 30))
def test_benefit_cost_conventions_agree_on_acceptance(inv, ben, om, i, n):
    # both ratios exceed 1 exactly when PW(B) - PW(O&M) - PW(I) > 0 (common practice)
    b = np.r_[0.0, np.full(n, ben)]
    c = np.r_[0.0, np.full(n, om)]
    conv = m.benefit_cost_ratio(b, c, [inv], i)
    mod = m.benefit_cost_ratio(b, c, [inv], i, modified=True)
    net = m.present_worth(b - c - np.r_[inv, np.zeros(n)], i)
    if abs(net) > 1e-6 * inv:
        assert (conv > 1) == (mod > 1) == (net > 0)


def test_benefit_cost_ratio_without_a_positive_denominator_is_not_defined():
    # common practice: a ratio of benefits to costs needs costs to divide by. A sale (proceeds,
    # no investment) has no modified ratio; costs that net to an inflow leave the conventional
    # ratio undefined too: NaN, never infinity or a negative ratio
    sale = m.benefit_cost_ratio([0.0], [-9000.0], [0.0], 0.08, modified=True)
    assert np.isnan(sale)
    assert np.isnan(m.benefit_cost_ratio([0.0], [-9000.0], [0.0], 0.08))
    both = m.benefit_cost_ratio([[0.0, 50.0], [0.0, 50.0]], [[0.0, -300.0], [0.0, 10.0]], [[100.0], [100.0]], 0.1)
    assert np.isnan(both[0]) and both[1] == pytest.approx((50 / 1.1) / (100 + 10 / 1.1), rel=1e-14)
    # a positive denominator keeps the published convention (Blank & Tarquin, B/C analysis)
    assert m.benefit_cost_ratio([0.0, 50.0], [0.0, -30.0], [100.0], 0.1, modified=True) == pytest.approx(
        (80 / 1.1) / 100, rel=1e-14)


def test_profitability_index(rows):
    pw = m.present_worth(rows, 0.1)
    pi = m.profitability_index(rows, 0.1)
    # PI = 1 + PW / I with I = -A_0 (convention documented in the function)
    np.testing.assert_allclose(pi, 1 + pw / -rows[:, 0], rtol=1e-12)
    assert ((pi > 1) == (pw > 0)).all()
    assert np.isnan(m.profitability_index([100.0, 50.0], 0.1))


# ---------------------------------------------------------- payback -----
def test_payback_conventions():
    a = np.array([
        [-1000, 300, 400, 500, 200],    # refcase discounted-payback-10pct
        [-1000, 100, 100, 100, 100],    # never
        [500, 100, 0, 0, 0],            # nothing to recover
        [0, -100, 50, 80, 0],           # investment at t = 1
        [-100, 150, -100, 10, 100],     # recovers, falls back, recovers again
    ], dtype=float)
    got = m.payback_period(a)
    np.testing.assert_allclose(got[[0, 2, 3]], [2.6, 0.0, 2 + 50 / 80], rtol=1e-14)
    assert np.isnan(got[1])
    # last recovery: cumulative -100, 50, -50, -40, 60 -> between t = 3 and 4
    assert got[4] == pytest.approx(3 + 40 / 100)
    whole = m.payback_period(a, interpolate=False)
    finite = ~np.isnan(got)
    np.testing.assert_array_equal(whole[finite], np.ceil(got[finite]))


def test_discounted_payback_properties(rows):
    simple = m.payback_period(rows)
    np.testing.assert_allclose(m.discounted_payback_period(rows, 0.0), simple, equal_nan=True)
    disc = m.discounted_payback_period(rows, 0.08)
    both = ~np.isnan(simple) & ~np.isnan(disc)
    assert both.sum() > 10
    # discounting only delays recovery of a conventional investment (common practice)
    conv = both & (rows[:, 1:] >= 0).all(axis=1)
    assert (disc[conv] >= simple[conv] - 1e-12).all()
    # vectorised over rows and rates equals one row at a time
    rates = np.array([0.02, 0.15])[:, None]
    grid = m.discounted_payback_period(rows[:5], rates)
    for k in range(2):
        for p in range(5):
            one = m.discounted_payback_period(rows[p], float(rates[k, 0]))
            np.testing.assert_equal(grid[k, p], one)


# ------------------------------------------------------------- MIRR ------
def test_mirr_matches_numpy_financial(rows):
    for f, r in [(0.1, 0.12), (0.05, 0.05), (0.2, 0.0)]:
        expect = np.array([npf.mirr(row, f, r) for row in rows])
        np.testing.assert_allclose(m.mirr(rows, f, r), expect, rtol=1e-12)
    assert np.isnan(m.mirr([100.0, 50.0], 0.1, 0.1))  # npf.mirr gives nan too
    assert np.isnan(npf.mirr([100.0, 50.0], 0.1, 0.1))


def test_mirr_of_conventional_stream_equals_irr_when_rates_equal_irr():
    # with finance = reinvest = IRR, MIRR = IRR (common practice)
    a = [-10000, 3000, 3000, 3000, 3000, 3000]
    r = npf.irr(a)
    assert m.mirr(a, r, r) == pytest.approx(r, rel=1e-12)


# -------------------------------------------------- shapes (Hypothesis) --
@settings(max_examples=80, deadline=None)
@given(hnp.arrays(float, hnp.array_shapes(min_dims=1, max_dims=3, max_side=5),
                  elements=st.floats(-1e4, 1e4)), st.data())
def test_shapes_broadcast(amounts, data):
    lead = amounts.shape[:-1]
    rshape = data.draw(hnp.broadcastable_shapes(lead, max_dims=3, max_side=5))
    rate = data.draw(hnp.arrays(float, rshape, elements=st.floats(-0.5, 2.0)))
    expect_shape = np.broadcast_shapes(rshape, lead)
    pw = m.present_worth(amounts, rate)
    assert np.shape(pw) == expect_shape
    if expect_shape == ():
        assert type(pw) is float
    # value: explicit discounting
    t = np.arange(amounts.shape[-1])
    ref = (amounts * (1 + rate[..., None]) ** -t).sum(axis=-1)
    np.testing.assert_allclose(pw, ref, rtol=1e-10, atol=1e-6)
    for fn in (m.future_worth, m.discounted_payback_period, m.profitability_index):
        assert np.shape(fn(amounts, rate)) == expect_shape
    assert np.shape(m.payback_period(amounts)) == lead
    if amounts.shape[-1] >= 2:
        assert np.shape(m.annual_worth(amounts, rate)) == expect_shape
        assert np.shape(m.mirr(amounts, rate, rate)) == expect_shape


def test_scalar_in_scalar_out():
    a = [-100.0, 60.0, 60.0]
    for out in (m.present_worth(a, 0.1), m.future_worth(a, 0.1), m.annual_worth(a, 0.1),
                m.profitability_index(a, 0.1), m.payback_period(a),
                m.discounted_payback_period(a, 0.1), m.mirr(a, 0.1, 0.1),
                m.capital_recovery_cost(100, 10, 0.1, 3),
                m.benefit_cost_ratio([0, 60, 60], [0, 5, 5], [100], 0.1)):
        assert type(out) is float


def test_wrong_shapes_raise_naming_the_shape():
    with pytest.raises(ValueError, match=r"shape \(\)"):
        m.present_worth(5.0, 0.1)
    with pytest.raises(ValueError, match=r"\(3,\).*\(4, 6\)"):
        m.present_worth(np.zeros((4, 6)), np.full(3, 0.1))
    with pytest.raises(ValueError, match=r"\(3,\)"):
        m.mirr(np.zeros((4, 6)), np.full(3, 0.1), 0.1)
    with pytest.raises(ValueError, match="leading axes"):
        m.benefit_cost_ratio(np.zeros((2, 3)), np.zeros((3, 3)), [1.0], 0.1)
    with pytest.raises(ValueError, match="greater than -1"):
        m.present_worth([1.0, 2.0], -1.0)


def test_docstring_examples():
    result = doctest.testmod(m)
    assert result.attempted > 8 and result.failed == 0
