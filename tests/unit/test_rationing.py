"""Tests for ratescape.decide.rationing (capital rationing as a 0-1 program).

Every optimum is checked against brute-force enumeration of all 2^P
portfolios; the LP bound against scipy.optimize.linprog (reference library).
"""
import itertools

import numpy as np
import pytest
from scipy.optimize import linprog

from ratescape.decide.portfolio_stats import core_portfolio, min_max_regret, selection_share
from ratescape.decide.rationing import STATUS_INFEASIBLE, STATUS_OPTIMAL, ration_capital
from ratescape.decide.rationing_problem import greedy_selection

# Lorie & Savage (1955), "Three problems in rationing capital", Journal of
# Business 28(4), nine-project, two-period problem, as solved by integer and
# linear programming in H. M. Weingartner, Mathematical Programming and the
# Analysis of Capital Budgeting Problems, Prentice-Hall, 1963.
# FROM MEMORY: the present values, the period-1 and period-2 outlays, the
# budgets (50, 20) and the integer optimum (projects 1, 3, 4, 6, 9; worth 70)
# are recalled, not copied from the book. The test below re-derives the
# optimum by brute force over all 2^9 portfolios, so it checks the solver
# on this data, not the recollection. The recalled LP relaxation
# (x6 ~ 0.97, x7 ~ 0.045, worth ~ 70.27) is consistent with the recalled data.
LS_PV = np.array([14.0, 17.0, 17.0, 15.0, 40.0, 12.0, 14.0, 10.0, 12.0])
LS_OUT1 = np.array([12.0, 54.0, 6.0, 6.0, 30.0, 6.0, 48.0, 36.0, 18.0])
LS_OUT2 = np.array([3.0, 7.0, 6.0, 2.0, 35.0, 6.0, 4.0, 3.0, 3.0])
LS_BUDGETS = np.array([50.0, 20.0])


def _all_portfolios(P):
    return np.array(list(itertools.product([False, True], repeat=P)), dtype=bool)


def brute_force(pw_s, inv_k, budget, group=None, mandatory=None, requires=None):
    """Best worth and portfolio by enumeration; (nan, None) if none is feasible."""
    P = pw_s.size
    X = _all_portfolios(P)
    ok = np.all(X.astype(float) @ inv_k.T <= budget + 1e-9, axis=1)
    if group is not None:
        for g in range(len(mandatory)):
            n = X[:, group == g].sum(axis=1)
            ok &= (n == 1) if mandatory[g] else (n <= 1)
    if requires is not None:
        for dep, pre in requires:
            ok &= ~X[:, dep] | X[:, pre]
    if not ok.any():
        return np.nan, None
    vals = np.where(ok, X.astype(float) @ pw_s, -np.inf)
    i = int(np.argmax(vals))
    return vals[i], X[i]


def test_lorie_savage_nine_projects():
    inv = np.vstack([LS_OUT1, LS_OUT2])
    bf_val, bf_x = brute_force(LS_PV, inv, LS_BUDGETS)
    # brute force over 2^9 portfolios; optimum 70 with projects 1, 3, 4, 6, 9 (from memory, Weingartner 1963)
    assert bf_val == 70.0
    assert (np.flatnonzero(bf_x) + 1).tolist() == [1, 3, 4, 6, 9]
    res = ration_capital(LS_PV[:, None], inv, LS_BUDGETS, mip_rel_gap=0.0)
    assert res.status[0] == STATUS_OPTIMAL
    assert res.objective[0] == pytest.approx(bf_val)
    np.testing.assert_array_equal(res.selected[0], bf_x)
    np.testing.assert_allclose(res.budget_used[0], [48.0, 20.0])
    # LP relaxation: cross-check with scipy.optimize.linprog (reference library)
    lp = linprog(-LS_PV, A_ub=inv, b_ub=LS_BUDGETS, bounds=(0, 1), method="highs")
    assert res.lp_bound[0] == pytest.approx(-lp.fun, rel=1e-9)
    assert res.lp_bound[0] == pytest.approx(70.27, abs=0.005)  # from memory (Weingartner 1963)
    assert res.lp_bound[0] >= res.objective[0]
    assert res.greedy_objective[0] <= res.objective[0] + 1e-12
    assert res.mip_gap[0] == pytest.approx(0.0, abs=1e-9)


def _random_problem(rng, P, S, K=1, B=2, G=2, R=2):
    pw = rng.normal(5.0, 8.0, size=(P, S)).round(2)
    inv = rng.uniform(0.0, 10.0, size=(K, B, P)).round(1)
    budgets = inv.sum(axis=2).mean(axis=0) * rng.uniform(0.2, 0.6, size=B)
    group = np.full(P, -1)
    members = rng.choice(P, size=2 * G, replace=False)
    group[members] = np.repeat(np.arange(G), 2)
    mandatory = rng.random(G) < 0.5
    free = np.setdiff1d(np.arange(P), members)
    pairs = []
    for _ in range(R):
        dep, pre = rng.choice(free, size=2, replace=False)
        pairs.append((int(dep), int(pre)))
    cls = rng.integers(0, K, size=S)
    return pw, inv, budgets, group, mandatory, np.array(pairs), cls


@pytest.mark.parametrize("seed", range(12))
def test_random_problems_against_brute_force(seed):
    rng = np.random.default_rng(seed)
    P, S, K = 9, 3, 2
    pw, inv, budgets, group, mandatory, req, cls = _random_problem(rng, P, S, K=K)
    res = ration_capital(pw, inv, budgets, scenario_class=cls, group_index=group,
                         group_mandatory=mandatory, requires=req, mip_rel_gap=0.0)
    for s in range(S):
        bf_val, bf_x = brute_force(pw[:, s], inv[cls[s]], budgets, group, mandatory, req)
        if bf_x is None:
            assert res.status[s] == STATUS_INFEASIBLE
            assert np.isnan(res.objective[s]) and not res.selected[s].any()
            continue
        assert res.status[s] == STATUS_OPTIMAL
        assert res.objective[s] == pytest.approx(bf_val, abs=1e-9)
        x = res.selected[s]
        assert res.objective[s] == pytest.approx(pw[x, s].sum())
        np.testing.assert_allclose(res.budget_used[s], inv[cls[s]] @ x)
        assert res.lp_bound[s] >= res.objective[s] - 1e-9
        if np.isfinite(res.greedy_objective[s]):
            g = res.greedy_selected[s]
            assert res.greedy_objective[s] <= res.objective[s] + 1e-9
            assert np.all(inv[cls[s]] @ g <= budgets + 1e-9)
            for dep, pre in req:
                assert not g[dep] or g[pre]


def test_default_gap_is_honoured_on_larger_problem():
    rng = np.random.default_rng(7)
    P, S = 60, 4
    pw, inv, budgets, group, mandatory, req, cls = _random_problem(rng, P, S, K=1, G=5, R=5)
    res = ration_capital(pw, inv[0], budgets, group_index=group, group_mandatory=mandatory, requires=req)
    exact = ration_capital(pw, inv[0], budgets, group_index=group, group_mandatory=mandatory, requires=req,
                           mip_rel_gap=0.0)
    ok = res.status == STATUS_OPTIMAL
    assert ok.any()
    # objective within the documented 1e-3 tolerance of the exact optimum, and never above it
    assert np.all(res.objective[ok] <= exact.objective[ok] + 1e-9)
    assert np.all(exact.objective[ok] - res.objective[ok] <= 1e-3 * np.abs(res.objective[ok]) + 1e-9)
    assert np.all(res.mip_gap[ok] <= 1e-3 + 1e-12)


def test_identical_scenarios_are_solved_once():
    inv = np.vstack([LS_OUT1, LS_OUT2])
    pw = np.c_[LS_PV, LS_PV * 1.1, LS_PV, LS_PV * 1.1]
    res = ration_capital(pw, inv, LS_BUDGETS, mip_rel_gap=0.0)
    assert res.solved_as.tolist() == [0, 1, 0, 1]
    assert res.solve_seconds[2] == 0.0 and res.solve_seconds[3] == 0.0
    np.testing.assert_array_equal(res.selected[0], res.selected[2])
    off = ration_capital(pw, inv, LS_BUDGETS, mip_rel_gap=0.0, reuse_identical=False)
    assert off.solved_as.tolist() == [0, 1, 2, 3]
    np.testing.assert_allclose(off.objective, res.objective)


def test_negative_worth_only_when_forced():
    # project 0: pw -2, prerequisite of project 1 (pw 10); project 2: pw -1, nothing needs it;
    # project 3 (pw -5) and 4 (pw -3) form a mandatory group.
    pw = np.array([[-2.0], [10.0], [-1.0], [-5.0], [-3.0]])
    inv = np.ones((1, 5))
    res = ration_capital(pw, inv, [10.0], group_index=[-1, -1, -1, 0, 0], group_mandatory=[True],
                         requires=[(1, 0)], mip_rel_gap=0.0)
    assert res.selected[0].tolist() == [True, True, False, False, True]
    assert res.objective[0] == pytest.approx(5.0)
    # dependent not worth its prerequisite: neither is selected
    pw2 = np.array([[-20.0], [10.0], [3.0]])
    res2 = ration_capital(pw2, np.ones((1, 3)), [10.0], requires=[(1, 0)], mip_rel_gap=0.0)
    assert res2.selected[0].tolist() == [False, False, True]


def test_greedy_rule_documented_behaviour():
    # PI order: 1 (10/1), 0 (6/2), 2 (3/3). Project 1 requires project 2, which comes later:
    # greedy skips 1 and does not revisit it.
    pw = np.array([[6.0], [10.0], [3.0]])
    inv = np.array([[2.0, 1.0, 3.0]])
    sel, obj = greedy_selection(pw, inv, [10.0], requires=[(1, 2)])
    assert sel[0].tolist() == [True, False, True] and obj[0] == 9.0
    res = ration_capital(pw, inv, [10.0], requires=[(1, 2)], mip_rel_gap=0.0)
    assert res.objective[0] == 19.0
    # mandatory group left empty by the pass (all members pw <= 0) is filled by highest PI that fits
    sel, obj = greedy_selection([[5.0], [-1.0], [-4.0]], [[1.0, 1.0, 1.0]], [2.0],
                                group_index=[-1, 0, 0], group_mandatory=[True])
    assert sel[0].tolist() == [True, True, False] and obj[0] == 4.0
    # no member fits: greedy infeasible
    sel, obj = greedy_selection([[5.0], [-1.0]], [[1.0, 5.0]], [2.0], group_index=[-1, 0],
                                group_mandatory=[True])
    assert not sel.any() and np.isnan(obj[0])


def test_cost_classes_and_min_max_regret():
    # two scenarios, two cost classes: in class 1 project 0 costs more (then-current money)
    pw = np.array([[10.0, 9.0], [6.0, 8.0], [5.0, 7.0]])
    inv = np.array([[[4.0, 3.0, 3.0]], [[6.0, 3.0, 3.0]]])
    res = ration_capital(pw, inv, [7.0], scenario_class=[0, 1], mip_rel_gap=0.0)
    assert res.selected.tolist() == [[True, True, False], [False, True, True]]
    for s in range(2):
        assert res.objective[s] == brute_force(pw[:, s], inv[[0, 1][s]], np.array([7.0]))[0]
    rg = min_max_regret(pw, res.selected, res.objective, inv, [7.0], scenario_class=[0, 1])
    # portfolio {0, 1} overspends in class 1 (6 + 3 > 7): excluded and flagged
    k01 = [i for i, p in enumerate(rg.portfolios) if p.tolist() == [True, True, False]][0]
    k12 = 1 - k01
    assert rg.feasible[k01].tolist() == [True, False]
    assert np.isinf(rg.max_regret[k01])
    assert rg.max_regret_where_feasible[k01] == 0.0
    assert rg.best == k12
    assert rg.max_regret[k12] == pytest.approx(16.0 - 11.0)
    assert rg.best_selected.tolist() == [False, True, True]


def test_min_max_regret_none_feasible_everywhere():
    pw = np.array([[10.0, 1.0], [1.0, 10.0]])
    sel = np.array([[True, False], [False, True]])
    inv = np.array([[[1.0, 9.0]], [[9.0, 1.0]]])
    rg = min_max_regret(pw, sel, [10.0, 10.0], inv, [2.0], scenario_class=[0, 1])
    assert rg.best == -1 and not rg.best_selected.any()


def test_selection_share_and_core():
    sel = np.array([[True, True, False], [True, False, False], [True, True, True], [False, True, False]])
    np.testing.assert_allclose(selection_share(sel), [0.75, 0.75, 0.25])
    np.testing.assert_allclose(selection_share(sel, [0.0, 0.0, 0.0, 1.0]), [0.0, 1.0, 0.0])
    assert core_portfolio(sel, 0.75).tolist() == [True, True, False]
    assert core_portfolio(sel, 1.0).tolist() == [False, False, False]


def test_validation_errors_name_shapes():
    inv = np.vstack([LS_OUT1, LS_OUT2])
    with pytest.raises(ValueError, match=r"\(B, P\)"):
        ration_capital(LS_PV[:, None], inv[:, :5], LS_BUDGETS)
    with pytest.raises(ValueError, match="budgets"):
        ration_capital(LS_PV[:, None], inv, [1.0, 2.0, 3.0])
    with pytest.raises(ValueError, match="scenario_class"):
        ration_capital(LS_PV[:, None], np.stack([inv, inv]), LS_BUDGETS)
    with pytest.raises(ValueError, match="requires"):
        ration_capital(LS_PV[:, None], inv, LS_BUDGETS, requires=[(0, 0)])
    with pytest.raises(ValueError, match="group_index"):
        ration_capital(LS_PV[:, None], inv, LS_BUDGETS, group_index=[0, 1])


@pytest.mark.parametrize("seed", range(4))
def test_blocks_on_two_processes_match_brute_force_and_one_process(seed):
    """Issue 16 part 2: scenarios solved in blocks, side by side on two processes, give the same
    selections as one process, and every objective is within the stated gap of the brute-force
    optimum (enumeration of all 2^P portfolios), the stored gap saying so."""
    rng = np.random.default_rng(100 + seed)
    P, S, K = 10, 12, 3
    pw, inv, budgets, group, mandatory, req, cls = _random_problem(rng, P, S, K=K)
    kw = dict(scenario_class=cls, group_index=group, group_mandatory=mandatory, requires=req)
    one = ration_capital(pw, inv, budgets, processes=1, block_size=5, **kw)
    two = ration_capital(pw, inv, budgets, processes=2, block_size=5, **kw)
    whole = ration_capital(pw, inv, budgets, processes=1, block_size=S, **kw)   # one block, as before
    np.testing.assert_array_equal(one.selected, two.selected)
    np.testing.assert_array_equal(one.status, two.status)
    np.testing.assert_array_equal(one.mip_gap, two.mip_gap)
    for s in range(S):
        bf_val, bf_x = brute_force(pw[:, s], inv[cls[s]], budgets, group, mandatory, req)
        if bf_x is None:
            assert one.status[s] == STATUS_INFEASIBLE == whole.status[s]
            continue
        for res in (one, whole):
            assert res.status[s] == STATUS_OPTIMAL
            assert res.objective[s] <= bf_val + 1e-9
            assert bf_val - res.objective[s] <= 1e-3 * abs(res.objective[s]) + 1e-9
            assert 0 <= res.mip_gap[s] <= 1e-3 + 1e-15
            assert res.lp_bound[s] >= bf_val - 1e-9        # the LP bound bounds the true optimum
        assert one.objective[s] == pytest.approx(whole.objective[s], rel=1e-3, abs=1e-9)


def test_stored_gap_holds_when_the_solver_gap_is_on_a_reduced_objective():
    """The gap stored for every scenario is at most mip_rel_gap of that scenario's objective, also
    after reduced-cost fixing (the solver then measures its gap on the objective of the free
    projects only); the exact optimum (mip_rel_gap=0) bounds every objective from above."""
    rng = np.random.default_rng(7)
    P, S = 60, 4
    pw, inv, budgets, group, mandatory, req, cls = _random_problem(rng, P, S, K=1, G=5, R=5)
    kw = dict(group_index=group, group_mandatory=mandatory, requires=req)
    res = ration_capital(pw, inv[0], budgets, **kw)
    exact = ration_capital(pw, inv[0], budgets, mip_rel_gap=0.0, **kw)
    ok = res.status == STATUS_OPTIMAL
    assert ok.all()
    assert np.all(res.mip_gap <= 1e-3)
    assert np.all(exact.objective - res.objective <= res.mip_gap * np.abs(res.objective) + 1e-9)
