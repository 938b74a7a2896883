"""Equal-service comparison of alternatives of unequal lives (pure functions).

Sources: L. T. Blank, A. J. Tarquin, Engineering Economy, 7th ed., McGraw-Hill, 2012, the
"National Homebuilders" vendors (from memory: A 15,000 / 3,500 a year / salvage 1,000 / 6 years,
B 18,000 / 3,100 / 2,000 / 9 years, 15 %; AW A = -7,349, B = -6,753); numpy-financial's npv and
pmt computed independently; straight-line book value (common practice).
"""
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given
from hypothesis import strategies as st

from ratescape.decide.alternatives import preferred_alternative
from ratescape.decide.equal_service import (
    annual_worth,
    cut_at_study_period,
    lives_differ,
    straight_line_terminal_value,
)

VA = np.array([-15000.0] + [-3500.0] * 5 + [-2500.0])
VB = np.array([-18000.0] + [-3100.0] * 8 + [-1100.0])


def test_annual_worth_of_the_textbook_vendors():
    pw = np.array([[npf.npv(0.15, VA)], [npf.npv(0.15, VB)]])
    aw = annual_worth(pw, [6, 9], [0.15])
    assert aw[:, 0] == pytest.approx([-7349, -6753], abs=1)                       # Blank & Tarquin
    assert aw[:, 0] == pytest.approx([-npf.pmt(0.15, 6, pw[0, 0]), -npf.pmt(0.15, 9, pw[1, 0])], rel=1e-12)
    assert preferred_alternative(aw, do_nothing=False).best.tolist() == [1]      # vendor B
    assert preferred_alternative(pw, do_nothing=False).best.tolist() == [0]      # own-life PW: the error


def test_annual_worth_at_zero_rate_is_the_average():
    pw = np.array([[VA.sum()], [VB.sum()]])              # PW at 0 % is the plain sum
    # computed independently: (A/P, 0, N) = 1/N, AW at 0 % = total / life (Blank & Tarquin, from memory)
    assert annual_worth(pw, [6, 9], [0.0])[:, 0] == pytest.approx([VA.sum() / 6, VB.sum() / 9], rel=1e-12)


def test_annual_worth_refuses_bad_shapes_and_lives():
    with pytest.raises(ValueError, match="pw must be"):
        annual_worth(np.zeros((2, 3)), [1, 2], [0.1, 0.1])
    with pytest.raises(ValueError, match="years must be positive"):
        annual_worth(np.zeros((2, 1)), [0, 2], [0.1])


def test_straight_line_terminal_value():
    # 18,000 - (18,000 - 2,000) x 6/9 (straight-line book value); no salvage: I (N - T) / N
    # source: straight-line book value B_t = I - (I - S) t / N (Sullivan, Wicks & Koelling, from memory)
    assert straight_line_terminal_value([18000, 1600, 15000], [2000, 0, 1000], [9, 10, 6], 6) == pytest.approx(
        [7333.333333, 1600 * 4 / 10, 0.0])


def test_cut_at_study_period_drops_or_moves_later_flows():
    a = np.arange(1.0, 11.0).reshape(2, 1, 5)
    out = cut_at_study_period(a, 2, collapse=[False, True])
    assert out.tolist() == [[[1, 2, 3, 0, 0]], [[6, 7, 8 + 9 + 10, 0, 0]]]
    assert cut_at_study_period(a, 4).tolist() == a.tolist()       # T at or past the last period: unchanged


def test_lives_differ():
    assert lives_differ([6, 9]) and not lives_differ([7, 7]) and not lives_differ([4])


@given(st.integers(2, 4), st.integers(1, 12), st.floats(-0.05, 0.4), st.integers(0, 2 ** 31 - 1))
def test_equal_lives_decide_the_same_under_every_basis(n_alt, life, rate, seed):
    """Property: with equal lives, PW, AW and a study period at the common life give one decision."""
    rng = np.random.default_rng(seed)
    flows = rng.normal(0, 100, size=(n_alt, life + 1))
    flows[:, 0] -= 300
    pw = np.array([[npf.npv(rate, f)] for f in flows])
    aw = annual_worth(pw, np.full(n_alt, life), [rate])
    cut = cut_at_study_period(flows[None], life)[0]
    sp = np.array([[npf.npv(rate, f)] for f in cut])
    for optional in (True, False):
        by_pw = preferred_alternative(pw, do_nothing=optional).best.tolist()
        assert preferred_alternative(aw, do_nothing=optional).best.tolist() == by_pw
        assert preferred_alternative(sp, do_nothing=optional).best.tolist() == by_pw
