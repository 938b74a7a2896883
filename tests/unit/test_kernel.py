"""The engine's kernel: discount tensors and present worth as a matrix product."""
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings, strategies as st

from ratescape import present_worth_grid
from ratescape.evaluate.kernel import (LineClass, capital_recovery_factor, discount_tensor, present_worth_classes,
                                       then_current_streams)
from ratescape.evaluate.timing import discount_exponents


def _grid_pw(classes, amounts, i, f, timing="end", m=1.0, multipliers=None):
    tau = discount_exponents(amounts.shape[-1], timing, m)
    return present_worth_classes(amounts, discount_tensor(classes, tau, i, f, multipliers))


def test_present_worth_grid_matches_numpy_financial_npv():
    # reference library: numpy-financial npv discounts values[0] at t = 0 (see refcases README)
    rng = np.random.default_rng(1)
    A = rng.normal(size=(30, 12)) * 1000
    rates = np.linspace(-0.5, 0.6, 23)
    got = present_worth_grid(A, rates)
    want = np.array([[npf.npv(r, row) for r in rates] for row in A])
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-9)


def test_present_worth_grid_refcase_npf_docstring():
    # refcases npv-npf-docstring-8pct (numpy-financial npv docstring example): 3065.2226681795255
    got = present_worth_grid([[-40000, 5000, 8000, 12000, 30000]], [0.08])[0, 0]
    assert abs(got - 3065.2226681795255) <= 1e-9 * 3065.22


def test_present_worth_grid_rejects_bad_shapes_and_rates():
    with pytest.raises(ValueError, match=r"\(P, T\)"):
        present_worth_grid(np.ones(3), [0.1])
    with pytest.raises(ValueError, match="> -1"):
        present_worth_grid(np.ones((2, 3)), [-1.0])


def test_real_lines_without_escalation_do_not_depend_on_inflation_at_fixed_real_rate():
    # BRIEF section 3 (common practice): constant-money flows discounted at the real rate, or
    # then-current flows at the Fisher nominal rate, give the same PW, whatever the inflation.
    rng = np.random.default_rng(2)
    A = rng.normal(size=(1, 40, 25)) * 1e5
    r = np.full(7, 0.05)
    f = np.linspace(0.0, 0.12, 7)
    i = (1 + r) * (1 + f) - 1
    pw = _grid_pw([LineClass("real", 0.0)], A, i, f)
    np.testing.assert_allclose(pw, pw[:, :1].repeat(7, axis=1), rtol=1e-11)


def test_nominal_lines_lose_worth_with_inflation_at_fixed_real_rate():
    # common practice: a fixed then-current payment stream is worth less in real terms when prices rise
    A = np.zeros((1, 1, 11))
    A[0, 0, 1:] = 100.0
    f = np.array([0.0, 0.02, 0.05, 0.10])
    i = (1.05) * (1 + f) - 1
    pw = _grid_pw([LineClass("nominal", 0.0)], A, i, f)[0]
    assert np.all(np.diff(pw) < 0)
    # at zero inflation nominal and real bases agree: P/A(5 %, 10) = 7.7217 (Sullivan et al. table, i = 5 %)
    assert abs(pw[0] / 100.0 - 7.7217) < 5e-5


def test_positive_escalation_raises_benefit_worth_and_depends_on_escalation_not_inflation():
    A = np.zeros((1, 1, 21))
    A[0, 0, 1:] = 50.0
    f = np.array([0.0, 0.04])
    i = 1.06 * (1 + f) - 1
    flat = _grid_pw([LineClass("real", 0.0)], A, i, f)[0]
    esc = _grid_pw([LineClass("real", 0.02)], A, i, f)[0]
    assert np.all(esc > flat)
    # with only real lines, escalation alone does not bring inflation in (fixed real rate)
    np.testing.assert_allclose(esc[0], esc[1], rtol=1e-12)


def test_geometric_gradient_closed_form():
    # escalating series of A1 = A(1+e) from year 1: PW = A1 * (1 - ((1+e)/(1+i))^n) / (i - e)
    # (geometric-gradient P/A1 factor, any engineering-economy text; refcases geo-* cases use it)
    A = np.zeros((1, 1, 11))
    A[0, 0, 1:] = 1000.0
    e, r = 0.03, 0.07
    pw = _grid_pw([LineClass("real", e)], A, np.array([r]), np.array([0.0]))[0, 0]
    A1 = 1000.0 * (1 + e)
    want = A1 * (1 - ((1 + e) / (1 + r)) ** 10) / (r - e)
    assert abs(pw - want) < 1e-9 * want


def test_multiple_classes_sum_and_multipliers_apply_per_scenario():
    rng = np.random.default_rng(3)
    A = rng.normal(size=(3, 5, 8))
    classes = [LineClass("real", 0.0), LineClass("nominal", 0.0, "tax"), LineClass("real", 0.01, "after_tax")]
    i = np.array([0.05, 0.08, 0.12])
    f = np.array([0.01, 0.02, 0.03])
    tax = np.array([0.2, 0.3, 0.4])
    got = _grid_pw(classes, A, i, f, multipliers={"tax": tax, "after_tax": 1 - tax})
    tau = np.arange(8.0)
    want = np.zeros((5, 3))
    for s in range(3):
        v0 = ((1 + f[s]) / (1 + i[s])) ** tau
        v1 = tax[s] / (1 + i[s]) ** tau
        v2 = (1 - tax[s]) * (1.01 * (1 + f[s]) / (1 + i[s])) ** tau
        want[:, s] = A[0] @ v0 + A[1] @ v1 + A[2] @ v2
    np.testing.assert_allclose(got, want, rtol=1e-12)


def test_timing_conventions_and_period_length():
    # mid-period: each flow t >= 1 discounted t - 1/2 years (ASTM E917 mid-year convention, common practice)
    A = np.array([[0.0, 100.0, 100.0]])
    mid = present_worth_grid(A, [0.1], timing="mid")[0, 0]
    assert abs(mid - (100 / 1.1 ** 0.5 + 100 / 1.1 ** 1.5)) < 1e-10
    beg = present_worth_grid(A, [0.1], timing="beginning")[0, 0]
    assert abs(beg - (100 + 100 / 1.1)) < 1e-10
    # monthly periods: annual 12.682503 % is exactly 1 % a month, (1 + i)^(1/12) - 1 (common practice)
    annual = 1.01 ** 12 - 1
    monthly = np.zeros((1, 13))
    monthly[0, 12] = 100.0
    got = present_worth_grid(monthly, [annual], periods_per_year=12)[0, 0]
    assert abs(got - 100 / 1.01 ** 12) < 1e-10


def test_then_current_streams_grow_real_lines_only():
    A = np.zeros((2, 1, 3))
    A[0, 0] = [-100, 50, 50]      # real
    A[1, 0] = [0, 10, 10]         # nominal
    s = then_current_streams(A, [LineClass("real"), LineClass("nominal")], np.arange(3.0), [0.0, 0.1])
    np.testing.assert_allclose(s[0, 0], [-100, 60, 60])
    np.testing.assert_allclose(s[1, 0], [-100, 55 + 10, 60.5 + 10])


@pytest.mark.parametrize("i,n,table", [(0.10, 5, 0.2638), (0.05, 10, 0.1295), (0.0, 4, 0.25)])
def test_capital_recovery_factor_table_values(i, n, table):
    # A/P factors from Sullivan, Wicks & Koelling, Engineering Economy, Appendix C tables (4 decimals;
    # refcases factor-AP-i10pct-n5 for i = 10 %; the 5 % value and the i = 0 limit 1/n are from memory / common practice)
    assert abs(capital_recovery_factor(i, n) - table) <= 5e-5


@settings(max_examples=60, deadline=None)
@given(P=st.integers(1, 6), T=st.integers(1, 9), S=st.integers(1, 5),
       rate=st.floats(-0.5, 2.0), seed=st.integers(0, 10_000))
def test_kernel_shapes_and_linearity(P, T, S, rate, seed):
    rng = np.random.default_rng(seed)
    A = rng.normal(size=(P, T))
    B = rng.normal(size=(P, T))
    rates = np.full(S, rate) + np.linspace(0, 0.1, S)
    pa, pb, pab = (present_worth_grid(x, rates) for x in (A, B, A + 2 * B))
    assert pa.shape == (P, S)
    np.testing.assert_allclose(pab, pa + 2 * pb, rtol=1e-9, atol=1e-9)
