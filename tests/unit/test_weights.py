"""Tests for ratescape.decide.weights.

Cross-checks against scipy.stats (reference library): norm.cdf, triang.cdf,
uniform.cdf differences over the cells between grid midpoints.
"""
import numpy as np
import pytest
from scipy import stats

from ratescape.decide.weights import (
    axis_weights,
    discrete_weights,
    expected_present_worth,
    normal_weights,
    probability_of_acceptance,
    scenario_weights,
    triangular_weights,
    uniform_weights,
    weighted_selection_share,
)

GRID = np.linspace(0.0, 0.08, 9)  # inflation axis, fraction per year (invented grid)


def _cells(grid):
    mids = (grid[1:] + grid[:-1]) / 2
    return np.r_[-np.inf, mids, np.inf]


def test_normal_matches_scipy_norm_cdf_differences():
    # reference library: scipy.stats.norm.cdf
    w = normal_weights(GRID, 0.03, 0.015)
    ref = np.diff(stats.norm.cdf(_cells(GRID), loc=0.03, scale=0.015))
    assert w.sum() == pytest.approx(1.0, abs=1e-14)
    np.testing.assert_allclose(w, ref, rtol=1e-12, atol=1e-15)
    # tails folded: the end points carry the mass beyond the grid
    assert w[0] == pytest.approx(stats.norm.cdf(0.005, 0.03, 0.015))


def test_normal_truncate_drops_tails_and_renormalises():
    w = normal_weights(GRID, 0.03, 0.015, tails="truncate")
    h = (GRID[1] - GRID[0]) / 2
    edges = np.r_[GRID[0] - h, (GRID[1:] + GRID[:-1]) / 2, GRID[-1] + h]
    ref = np.diff(stats.norm.cdf(edges, 0.03, 0.015))
    np.testing.assert_allclose(w, ref / ref.sum(), rtol=1e-12)


def test_unsorted_grid_keeps_grid_order():
    perm = np.array([3, 0, 8, 1, 2, 7, 4, 6, 5])
    w_sorted = normal_weights(GRID, 0.04, 0.02)
    np.testing.assert_allclose(normal_weights(GRID[perm], 0.04, 0.02), w_sorted[perm], rtol=1e-13)


@pytest.mark.parametrize("low,mode,high", [(0.0, 0.02, 0.08), (0.01, 0.01, 0.06), (-0.02, 0.05, 0.05)])
def test_triangular_matches_scipy_triang(low, mode, high):
    # reference library: scipy.stats.triang with c = (mode - low) / (high - low)
    w = triangular_weights(GRID, low, mode, high)
    d = stats.triang(c=(mode - low) / (high - low), loc=low, scale=high - low)
    ref = np.diff(d.cdf(_cells(GRID)))
    np.testing.assert_allclose(w, ref / ref.sum(), rtol=1e-12, atol=1e-15)
    assert w.sum() == pytest.approx(1.0)


def test_uniform_matches_scipy_uniform():
    # reference library: scipy.stats.uniform
    w = uniform_weights(GRID, 0.012, 0.05)
    ref = np.diff(stats.uniform(loc=0.012, scale=0.038).cdf(_cells(GRID)))
    np.testing.assert_allclose(w, ref, rtol=1e-12, atol=1e-15)
    assert w[GRID > 0.06].sum() == 0.0


def test_axis_weights_dispatch_and_errors():
    spec = {"distribution": "triangular", "low": 0.0, "mode": 0.03, "high": 0.08}
    np.testing.assert_allclose(axis_weights(GRID, spec), triangular_weights(GRID, 0.0, 0.03, 0.08))
    np.testing.assert_allclose(axis_weights([1.0, 2.0], [1.0, 3.0]), [0.25, 0.75])
    with pytest.raises(ValueError, match="missing"):
        axis_weights(GRID, {"distribution": "normal", "mean": 0.0})
    with pytest.raises(ValueError, match="one of"):
        axis_weights(GRID, {"distribution": "lognormal"})
    with pytest.raises(ValueError, match="shape"):
        discrete_weights(GRID, [1.0, 2.0])
    with pytest.raises(ValueError, match="sd > 0"):
        normal_weights(GRID, 0.0, 0.0)
    with pytest.raises(ValueError, match="no probability"):
        uniform_weights(GRID, 1.0, 2.0, tails="truncate")


def test_scenario_weights_product_and_index():
    wa = np.array([0.2, 0.3, 0.5])
    wb = np.array([0.6, 0.4])
    w = scenario_weights([wa, wb])  # C order, first axis slowest
    np.testing.assert_allclose(w, np.outer(wa, wb).ravel())
    idx = np.array([[2, 0, 1], [1, 1, 0]])
    w2 = scenario_weights([wa, wb], idx)
    ref = np.array([0.5 * 0.4, 0.2 * 0.4, 0.3 * 0.6])
    np.testing.assert_allclose(w2, ref / ref.sum())
    with pytest.raises(ValueError, match="axis_index"):
        scenario_weights([wa, wb], np.array([[0, 1]]))


def test_acceptance_expected_worth_selection():
    pw = np.array([[100.0, -50.0, 0.0, 20.0], [-1.0, -2.0, -3.0, 4.0]])
    w = np.array([1.0, 1.0, 1.0, 1.0])
    # pw >= 0 counts as accepted (common practice: PW = 0 earns exactly the MARR)
    np.testing.assert_allclose(probability_of_acceptance(pw, w), [0.75, 0.25])
    np.testing.assert_allclose(expected_present_worth(pw, [0.5, 0.5, 0.0, 0.0]), [25.0, -1.5])
    np.testing.assert_allclose(expected_present_worth(pw, w), pw.mean(axis=1))
    sel = np.array([[True, False], [False, False], [True, True], [True, False]])
    np.testing.assert_allclose(weighted_selection_share(sel, [0.1, 0.2, 0.3, 0.4]), [0.8, 0.3])
    with pytest.raises(ValueError, match=r"\(S,\) = \(4,\)"):
        expected_present_worth(pw, [1.0, 2.0])
    with pytest.raises(ValueError, match="non-negative"):
        probability_of_acceptance(pw, [1.0, -1.0, 1.0, 1.0])


def test_scenario_weights_from_spec_duck_typed():
    from types import SimpleNamespace as NS

    from ratescape.decide.weights import scenario_weights_from_spec

    rates = [0.04, 0.06, 0.08]
    infl = [0.0, 0.02]
    spec = NS(axes=[NS(name="discount_rate", values=rates), NS(name="inflation", values=infl)],
              weights={"discount_rates": [1, 2, 1], "inflation": {"distribution": "uniform", "low": -0.01,
                                                                   "high": 0.01}})
    # scenarios in an arbitrary order
    R, F = np.meshgrid(rates, infl, indexing="ij")
    perm = np.array([5, 0, 3, 1, 4, 2])
    table = NS(columns={"discount_rate": R.ravel()[perm], "inflation": F.ravel()[perm]})
    w = scenario_weights_from_spec(spec, table)
    wr = np.array([0.25, 0.5, 0.25])
    wf = uniform_weights(infl, -0.01, 0.01)
    np.testing.assert_allclose(w, np.outer(wr, wf).ravel()[perm])
    spec.weights = {"tax_rate": [1.0]}
    with pytest.raises(ValueError, match="unknown axis"):
        scenario_weights_from_spec(spec, table)
