"""Compound-interest and life-cycle-cost factors: identities, limits, exact
oracle, numpy-financial cross-checks, shapes (Hypothesis).

Published table values are checked in test_refcases_core.py.
"""
from __future__ import annotations

import doctest
from fractions import Fraction

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from ratescape.evaluate import factors as fac

ALL = ["F/P", "P/F", "F/A", "P/A", "A/F", "A/P", "P/G", "A/G"]


# ------------------------------------------------ exact Fraction oracle --
# The closed forms (common practice; Sullivan, Wicks & Koelling, Engineering
# Economy, Pearson) evaluated in exact rational arithmetic.
def _exact(name, i, n):
    i = Fraction(i)
    v = (1 + i) ** n
    return {
        "F/P": v,
        "P/F": 1 / v,
        "F/A": (v - 1) / i,
        "P/A": (v - 1) / (i * v),
        "A/F": i / (v - 1),
        "A/P": i * v / (v - 1),
        "P/G": (v - 1 - n * i) / (i * i * v),
        "A/G": 1 / i - Fraction(n) / (v - 1),
    }[name]


@pytest.mark.parametrize("name", ALL)
@pytest.mark.parametrize("i", [1e-12, -1e-12, 1e-9, 1e-6, 0.005, 0.07, 0.25, 1.5, -0.3, -0.75])
@pytest.mark.parametrize("n", [1, 2, 7, 40, 100])
def test_factor_against_exact_fraction_oracle(name, i, n):
    exact = _exact(name, i, n)
    got = fac.interest_factor(name, i, n)
    if exact == 0:
        assert abs(got) < 1e-12
    else:
        rel = abs((Fraction(got) - exact) / exact)
        # a few units in the last place even for i = 1e-12, where the naive
        # formulas lose all digits to cancellation
        assert rel < 2e-14, (name, i, n, float(rel))


def test_geometric_gradient_against_exact_fraction_oracle():
    # sum_{t=1..n} (1+g)^(t-1) / (1+i)^t in exact arithmetic (definition)
    for g, i, n in [(0.07, 0.12, 10), (0.1, 0.1, 10), (0.1 + 1e-12, 0.1, 30), (-0.05, 0.1, 5),
                    (0.12, 0.08, 25), (1e-13, 0.0, 20)]:
        G, I = Fraction(g), Fraction(i)
        exact = sum((1 + G) ** (t - 1) / (1 + I) ** t for t in range(1, n + 1))
        got = fac.p_given_a1_geometric(g, i, n)
        assert abs((Fraction(got) - exact) / exact) < 2e-14, (g, i, n)


# ----------------------------------------------------------- limits ------
# i -> 0 limits by L'Hopital (common practice; listed in the refcases README
# source "Limit i->0 of the standard formulas").
@pytest.mark.parametrize("n", [1, 2, 5, 10, 40, 100])
def test_zero_rate_limits_are_exact(n):
    assert fac.f_given_p(0.0, n) == 1.0
    assert fac.p_given_f(0.0, n) == 1.0
    assert fac.p_given_a(0.0, n) == n
    assert fac.f_given_a(0.0, n) == n
    assert fac.a_given_p(0.0, n) == 1.0 / n
    assert fac.a_given_f(0.0, n) == 1.0 / n
    assert fac.p_given_g(0.0, n) == n * (n - 1) / 2
    assert fac.a_given_g(0.0, n) == (n - 1) / 2


@pytest.mark.parametrize("name", ALL)
def test_factors_continuous_through_zero_rate(name):
    n = 25
    at0 = fac.interest_factor(name, 0.0, n)
    for eps in (1e-14, 1e-12, 1e-10, -1e-12):
        near = fac.interest_factor(name, eps, n)
        # the factors change by O(n |i|) relative near i = 0; no jump, no NaN
        assert abs(near - at0) <= (n * n * abs(eps) + 1e-15) * abs(at0), (name, eps, near, at0)


@pytest.mark.parametrize("i", [0.0, 0.03, 0.1, -0.2, 1.0])
@pytest.mark.parametrize("n", [1, 10, 50])
def test_geometric_gradient_g_equals_i_limit(i, n):
    # (P/A1, g=i, i, n) = n/(1+i) (Blank & Tarquin; refcases geo-g-eq-i-*)
    assert fac.p_given_a1_geometric(i, i, n) == pytest.approx(n / (1 + i), rel=1e-15)
    for d in (1e-13, -1e-13, 1e-9):
        assert fac.p_given_a1_geometric(i + d, i, n) == pytest.approx(n / (1 + i), rel=1e-7)


def test_upv_star_e_equals_d_is_exactly_n():
    # NIST Handbook 135: UPV* = n when e = d
    assert fac.upv_star(0.03, 0.03, 20) == 20.0
    np.testing.assert_array_equal(fac.upv_star([0.0, 0.05], [0.0, 0.05], 7), [7.0, 7.0])


# ---------------------------------------------------------- identities ---
rates = st.floats(-0.9, 2.0, allow_nan=False).filter(lambda x: abs(x) > 1e-300 or x == 0)
periods = st.integers(1, 120)


@settings(max_examples=200, deadline=None)
@given(rates, periods)
def test_factor_identities(i, n):
    # common practice identities of the factor tables
    assert fac.f_given_p(i, n) * fac.p_given_f(i, n) == pytest.approx(1.0, rel=1e-13)
    assert fac.a_given_p(i, n) == pytest.approx(fac.a_given_f(i, n) + i, rel=1e-11, abs=1e-13)
    assert fac.p_given_a(i, n) == pytest.approx(fac.f_given_a(i, n) * fac.p_given_f(i, n),
                                                rel=1e-11)
    assert fac.a_given_g(i, n) == pytest.approx(fac.p_given_g(i, n) * fac.a_given_p(i, n),
                                                rel=1e-11, abs=1e-13)
    # g = 0 geometric gradient is the uniform series
    assert fac.p_given_a1_geometric(0.0, i, n) == pytest.approx(fac.p_given_a(i, n), rel=1e-12)
    # UPV* = (1+e) (P/A1, g=e, i=d, n) (refcase nist-upvstar-vs-geometric-gradient)
    assert fac.upv_star(i, 0.02, n) == pytest.approx(1.02 * fac.p_given_a1_geometric(0.02, i, n),
                                                     rel=1e-12)


@settings(max_examples=100, deadline=None)
@given(st.floats(0.001, 0.5), st.integers(1, 60))
def test_factors_match_explicit_sums(i, n):
    # definitions as sums of end-of-period amounts (common practice)
    t = np.arange(1, n + 1)
    v = (1 + i) ** -t
    assert fac.p_given_a(i, n) == pytest.approx(v.sum(), rel=1e-12)
    assert fac.p_given_g(i, n) == pytest.approx(((t - 1) * v).sum(), rel=1e-12, abs=1e-12)


# ------------------------------------------- numpy-financial cross-check --
@settings(max_examples=100, deadline=None)
@given(st.floats(0.0001, 0.4), st.integers(1, 80))
def test_against_numpy_financial(i, n):
    # numpy_financial.pmt / pv / fv with end-of-period payments
    assert fac.a_given_p(i, n) == pytest.approx(-npf.pmt(i, n, 1.0), rel=1e-12)
    assert fac.p_given_a(i, n) == pytest.approx(-npf.pv(i, n, 1.0), rel=1e-12)
    assert fac.f_given_a(i, n) == pytest.approx(-npf.fv(i, n, 1.0, 0.0), rel=1e-12)
    assert fac.a_given_f(i, n) == pytest.approx(-npf.pmt(i, n, 0.0, 1.0), rel=1e-12)
    assert fac.p_given_f(i, n) == pytest.approx(-npf.pv(i, n, 0.0, 1.0), rel=1e-12)


# ----------------------------------------------------- shapes (Hypothesis) --
@settings(max_examples=60, deadline=None)
@given(
    hnp.arrays(float, hnp.array_shapes(max_dims=3, max_side=4), elements=st.floats(-0.5, 1.0)),
    st.data(),
)
def test_broadcasting_shapes(i, data):
    n_shape = data.draw(hnp.broadcastable_shapes(i.shape, max_dims=3, max_side=4))
    n = data.draw(hnp.arrays(float, n_shape, elements=st.floats(1.0, 50.0)))
    expect = np.broadcast_shapes(i.shape, n.shape)
    for name in ALL:
        out = fac.interest_factor(name, i, n)
        assert np.shape(out) == expect
        assert np.all(np.isfinite(out))
        # elementwise equals scalar calls
        ib, nb = np.broadcast_arrays(i, n)
        if ib.size:
            k = data.draw(st.integers(0, ib.size - 1))
            scalar = fac.interest_factor(name, float(ib.flat[k]), float(nb.flat[k]))
            assert np.asarray(out).flat[k] == pytest.approx(scalar, rel=1e-15)


@pytest.mark.parametrize("fn", [fac.f_given_p, fac.p_given_f, fac.f_given_a, fac.p_given_a,
                                fac.a_given_f, fac.a_given_p, fac.p_given_g, fac.a_given_g,
                                fac.spv, fac.upv])
def test_scalar_in_scalar_out(fn):
    out = fn(0.05, 10)
    assert type(out) is float
    assert isinstance(fn(np.array([0.05]), 10), np.ndarray)
    assert type(fac.upv_star(0.03, 0.01, 10)) is float
    assert type(fac.p_given_a1_geometric(0.01, 0.03, 10)) is float


def test_incompatible_shapes_raise():
    with pytest.raises(ValueError):
        fac.p_given_a(np.zeros(3) + 0.1, np.arange(1, 5))


@pytest.mark.parametrize("bad", [-1.0, -1.5, np.nan, np.inf])
def test_rate_must_exceed_minus_one(bad):
    with pytest.raises(ValueError, match="i must be"):
        fac.p_given_a(bad, 10)
    with pytest.raises(ValueError, match="g must be"):
        fac.p_given_a1_geometric(bad, 0.1, 10)
    with pytest.raises(ValueError, match="d must be"):
        fac.spv(bad, 3)


def test_period_validation():
    with pytest.raises(ValueError, match="n must be"):
        fac.p_given_a(0.1, -1)
    with pytest.raises(ValueError, match="n must be"):
        fac.a_given_p(0.1, 0)  # capital recovery over zero periods is undefined
    assert fac.p_given_a(0.1, 0) == 0.0
    assert fac.f_given_p(0.1, 0) == 1.0


def test_dispatcher_names():
    assert fac.interest_factor(" a/p ", 0.1, 5) == fac.a_given_p(0.1, 5)
    assert fac.interest_factor("P/A1", 0.1, 5, g=0.02) == fac.p_given_a1_geometric(0.02, 0.1, 5)
    with pytest.raises(ValueError, match="unknown factor"):
        fac.interest_factor("X/Y", 0.1, 5)
    with pytest.raises(ValueError, match="needs the growth rate"):
        fac.interest_factor("P/A1", 0.1, 5)
    with pytest.raises(ValueError, match="only to the geometric"):
        fac.interest_factor("P/A", 0.1, 5, g=0.1)


def test_docstring_examples():
    result = doctest.testmod(fac)
    assert result.attempted > 10 and result.failed == 0
