"""What the optimal portfolios say across scenarios: selection shares, the core portfolio, and
the minimax-regret portfolio.

References
----------
L. J. Savage, "The theory of statistical decision", Journal of the American Statistical
Association 46(253), 1951, pp. 55-67 (minimax regret).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ratescape.decide.rationing_problem import FEASIBILITY_TOL, validate_problem
from ratescape.decide.weights import weighted_selection_share


@dataclass(frozen=True)
class RegretResult:
    """Min-max-regret choice among the distinct per-scenario optimal portfolios.

    Attributes
    ----------
    portfolios : ndarray of bool, shape (K, P)
        The distinct optimal portfolios.
    optimal_in : ndarray of int, shape (K,)
        Number of scenarios in which each was the optimum.
    feasible : ndarray of bool, shape (K, S)
        Whether the portfolio fits every budget of scenario s.
    regret : ndarray, shape (K, S) [currency]
        objective_s - pw[:, s] @ x_k; NaN where infeasible or where the
        scenario itself had no optimum.
    max_regret : ndarray, shape (K,) [currency]
        Largest regret; +inf for portfolios infeasible in some scenario.
    max_regret_where_feasible : ndarray, shape (K,) [currency]
        Largest regret over the scenarios where the portfolio is feasible.
    best : int
        Index into ``portfolios`` of the min-max-regret portfolio among those
        feasible in every scenario; -1 if there is none.
    best_selected : ndarray of bool, shape (P,)
        That portfolio (all False when ``best == -1``).
    """

    portfolios: np.ndarray
    optimal_in: np.ndarray
    feasible: np.ndarray
    regret: np.ndarray
    max_regret: np.ndarray
    max_regret_where_feasible: np.ndarray
    best: int
    best_selected: np.ndarray


def _as_selected(selected):
    sel = np.asarray(selected)
    if sel.ndim != 2:
        raise ValueError(f"selected must have shape (S, P), got shape {sel.shape}")
    return sel.astype(bool)


def selection_share(selected, weights=None):
    """Share of scenarios in which each project is in the optimal portfolio.

    Parameters
    ----------
    selected : array_like of bool, shape (S, P)
        ``RationingResult.selected``.
    weights : array_like, shape (S,), optional
        Scenario weights (the user's judgement, not a forecast; see
        :mod:`ratescape.decide.weights`), normalised to sum to 1; the result
        is then a weighted selection probability. Default: equal weights.

    Returns
    -------
    share : ndarray, shape (P,) [fraction]

    Examples
    --------
    >>> selection_share([[True, False], [True, True]]).tolist()
    [1.0, 0.5]
    """
    sel = _as_selected(selected)
    if weights is None:
        return sel.mean(axis=0)
    return weighted_selection_share(sel, weights)


def core_portfolio(selected, threshold=0.8, weights=None):
    """Projects selected in at least ``threshold`` of the scenarios.

    Parameters
    ----------
    selected : array_like of bool, shape (S, P)
    threshold : float [fraction], in (0, 1]
        Minimum selection share (default 0.8); 1.0 = selected everywhere.
    weights : array_like, shape (S,), optional
        Scenario weights, as in :func:`selection_share`.

    Returns
    -------
    core : ndarray of bool, shape (P,)

    Warnings
    --------
    The core is a list of robust choices, not itself a portfolio: it need
    not fit the budgets of every scenario, and a mandatory group may have
    no member in it.

    Examples
    --------
    >>> core_portfolio([[True, False], [True, True], [False, True]], 0.6).tolist()
    [True, True]
    """
    t = float(threshold)
    if not 0 < t <= 1:
        raise ValueError(f"threshold must lie in (0, 1], got {threshold}")
    return selection_share(selected, weights) >= t - 1e-12


def min_max_regret(pw, selected, objective, investment, budgets, *, scenario_class=None):
    """Min-max-regret portfolio among the distinct per-scenario optima.

    Parameters
    ----------
    pw : array_like, shape (P, S) [currency]
    selected : array_like of bool, shape (S, P)
        Optimal portfolio of each scenario (``RationingResult.selected``).
    objective : array_like, shape (S,) [currency]
        Its worth (``RationingResult.objective``); NaN marks a scenario with
        no optimum, which is skipped.
    investment, budgets, scenario_class
        As for :func:`ration_capital`, to check each candidate portfolio
        against every scenario's budgets.

    Returns
    -------
    RegretResult

    Notes
    -----
    The candidates are the K distinct optimal portfolios. The regret of
    portfolio k in scenario s is R_ks = objective_s - pw[:, s] @ x_k >= 0
    (up to the solver's gap tolerance), and the choice is
    argmin_k max_s R_ks.

    Groups and requires are the same in every scenario, so every candidate
    satisfies them everywhere. Budgets are not: when outlays are in
    then-current money (cost classes) or budgets are per scenario, an
    optimum of one scenario can overspend in another. Such a portfolio is
    *excluded* from the choice (its ``max_regret`` is +inf) and *flagged*
    in ``feasible`` (K, S); its regret where it does fit is still reported
    in ``max_regret_where_feasible``. If no candidate fits every scenario,
    ``best`` is -1.

    References
    ----------
    L. J. Savage, "The theory of statistical decision", Journal of the
    American Statistical Association 46(253), 1951, pp. 55-67 (minimax
    regret).

    Examples
    --------
    >>> pw = [[10.0, 1.0], [1.0, 10.0], [6.0, 6.0]]
    >>> sel = [[True, False, False], [False, True, False]]
    >>> r = min_max_regret(pw, sel, [10.0, 10.0], [[1.0, 1.0, 1.0]], [1.0])
    >>> r.portfolios.astype(int).tolist(), r.max_regret.tolist(), r.best
    ([[0, 1, 0], [1, 0, 0]], [9.0, 9.0], 0)
    """
    x = np.asarray(pw, dtype=float)
    if x.ndim != 2:
        raise ValueError(f"pw must have shape (P, S), got shape {x.shape}")
    P, S = x.shape
    sel = _as_selected(selected)
    if sel.shape != (S, P):
        raise ValueError(f"selected must have shape (S, P) = ({S}, {P}), got shape {sel.shape}")
    obj = np.asarray(objective, dtype=float)
    if obj.shape != (S,):
        raise ValueError(f"objective must have shape (S,) = ({S},), got shape {obj.shape}")
    prob = validate_problem(np.nan_to_num(x), investment, budgets, scenario_class, None, None, None)
    have = np.isfinite(obj)
    if not have.any():
        raise ValueError("no scenario has an optimum (objective is all NaN)")
    ports, counts = np.unique(sel[have], axis=0, return_counts=True)
    K = ports.shape[0]
    feas = np.zeros((K, S), dtype=bool)
    pf = ports.astype(float)
    for k in np.unique(prob.cls):
        m = np.flatnonzero(prob.cls == k)
        used = pf @ prob.inv[k].T  # (K, B)
        b = prob.budgets[m]  # (m, B)
        feas[:, m] = np.all(used[:, None, :] <= b[None] + np.abs(b[None]) * FEASIBILITY_TOL + FEASIBILITY_TOL, axis=2)
    worth = pf @ x  # (K, S)
    regret = np.where(feas & have[None], obj[None] - worth, np.nan)
    where_feas = np.where(feas[:, have].any(axis=1), np.nanmax(np.where(np.isnan(regret), -np.inf, regret), axis=1),
                          np.nan)
    everywhere = feas[:, have].all(axis=1)
    max_regret = np.where(everywhere, where_feas, np.inf)
    best = int(np.argmin(max_regret)) if everywhere.any() else -1
    best_sel = ports[best].copy() if best >= 0 else np.zeros(P, dtype=bool)
    return RegretResult(
        portfolios=ports,
        optimal_in=counts,
        feasible=feas,
        regret=regret,
        max_regret=max_regret,
        max_regret_where_feasible=where_feas,
        best=best,
        best_selected=best_sel,
    )
