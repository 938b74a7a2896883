"""The one table of cash-flow kinds, staged assets and line classes frozen at a service period.

Sources: IRS Publication 946 (2023), Appendix A, Table A-1 (3-year: 33.33, 44.45, 14.81, 7.41 %;
half-year convention in each asset's own first year); the frozen-class factor
((1+e)(1+f))^k / (1+i)^t is written out here term by term (common practice: a cost paid at
period k's price is depreciated as a fixed nominal basis).
"""
import numpy as np
import pytest

from ratescape.evaluate.kernel import LineClass, PointEvaluator, discount_tensor, then_current_streams
from ratescape.evaluate.kinds import KIND_RULES, ROLES, multiplier_for
from ratescape.evaluate.tax import KIND_MULTIPLIER, staged_asset_lines
from ratescape.load.columns import KINDS
from ratescape.run.plan import multiplier_for as plan_multiplier_for

MACRS_3 = [0.3333, 0.4445, 0.1481, 0.0741]


def test_one_kind_table_feeds_loader_tax_and_engine():
    assert KINDS == tuple(KIND_RULES)
    assert KIND_MULTIPLIER == {k: r.after_tax for k, r in KIND_RULES.items()}
    assert plan_multiplier_for is multiplier_for
    assert {"working_capital", "land"} <= set(KINDS)
    assert all(r.role in ROLES for r in KIND_RULES.values())


@pytest.mark.parametrize("kind", ["working_capital", "land"])
def test_working_capital_and_land_are_never_taxed_as_lines(kind):
    assert multiplier_for(kind, {"cost_multiplier", "benefit_multiplier"}, after_tax=True) == "one"
    assert multiplier_for(kind, set(), after_tax=False) == "one"


def test_each_stage_gets_the_half_year_rate_in_its_own_first_year():
    shield, _ = staged_asset_lines([1000.0, 1000.0], [0, 3], [8, 8], 9, method="macrs", recovery_years=3)
    assert shield[0, 1:5] == pytest.approx(1000 * np.array(MACRS_3))
    assert shield[1, 4:8] == pytest.approx(1000 * np.array(MACRS_3))
    assert shield[1, :4].sum() == 0.0


def test_stage_cut_short_by_disposal_writes_off_its_book_value():
    shield, _ = staged_asset_lines([1000.0], [2], [4], 6, method="macrs", recovery_years=3)
    # source: IRS Pub 946 Table A-1, 3-year column, 33.33 % in year 1, remaining book value written off at disposal
    assert shield[0].tolist() == pytest.approx([0, 0, 0, 333.3, 1000 - 333.3, 0])
    assert shield.sum() == pytest.approx(1000.0)          # the whole cost is deducted by disposal


def test_asset_paid_at_the_horizon_is_written_off_at_once():
    shield, credit = staged_asset_lines([500.0], [5], [5], 6, method="macrs", recovery_years=5, itc_rate=0.1)
    assert shield[0].tolist() == [0, 0, 0, 0, 0, 500.0]


def test_frozen_class_factor_and_its_point_and_stream_forms_agree():
    k, e = 3, 0.01
    tau = np.arange(8.0)
    cls = [LineClass("real", e, "one", frozen_at=k)]
    i, f = np.array([0.05, 0.12]), np.array([0.0, 0.06])
    D = discount_tensor(cls, tau, i, f)[0]                      # (T, S)
    for s in range(2):
        g = (1 + e) * (1 + f[s])
        expected = [g ** min(t, k) / (1 + i[s]) ** t for t in range(8)]
        # computed independently: ((1+e)(1+f))^min(t, k) / (1+i)^t term by term (module docstring)
        assert D[:, s] == pytest.approx(expected, rel=1e-13)
    amounts = np.zeros((len(ROLES), 1, 2, 8))
    amounts[2, 0, 0, 4:] = [10.0, 20.0, 30.0, 40.0]
    amounts[2, 0, 1, 1:] = 5.0                                   # amounts before k grow as a real class
    A = amounts.sum(axis=0)
    grid = np.einsum("cpt,cts->ps", A, discount_tensor(cls, tau, i, f))
    point = PointEvaluator(amounts, cls, tau)
    for s in range(2):
        # no outside source: the point evaluator must agree with the grid form (einsum above)
        assert point(i[s], f[s]) == pytest.approx(grid[:, s], rel=1e-12)
        assert point.at_rows([0, 1], i[s], f[s]) == pytest.approx(grid[:, s], rel=1e-12)
    streams = then_current_streams(A, cls, tau, f)              # (F, P, T)
    # computed independently (hand value): the amount is frozen at period k's price ((1+e)(1+f))^k
    assert streams[1, 0, 5] == pytest.approx(20.0 * ((1 + e) * 1.06) ** k)


def test_root_search_on_a_frozen_class_matches_the_grid():
    from ratescape.evaluate.compiled import MOVE_DISCOUNT_RATE
    tau = np.arange(6.0)
    cls = [LineClass("real", 0.0, "one"), LineClass("real", 0.0, "one", frozen_at=2)]
    amounts = np.zeros((len(ROLES), 2, 1, 6))
    amounts[0, 0, 0, 0] = -100.0
    amounts[2, 1, 0, 3:] = 45.0
    point = PointEvaluator(amounts, cls, tau)
    root = point.roots_between(MOVE_DISCOUNT_RATE, [0], [0.0], [1.0], discount_rate=0.1, inflation=0.05)[0]
    # computed independently: the root is checked by the explicit PW sum below, (P/F, i, t) by hand
    assert point(root, 0.05) == pytest.approx(0.0, abs=1e-9)
    g = 1.05 ** 2
    assert -100 + sum(45.0 * g / (1 + root) ** t for t in (3, 4, 5)) == pytest.approx(0.0, abs=1e-9)
