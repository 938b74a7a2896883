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
from ratescape.decide.weights import check_weights, weighted_selection_share


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


# ---------------------------------------------------------------------------------------------
# The same statistics accumulated one block of scenarios at a time (no (S, P) or (K, S) matrix)
# ---------------------------------------------------------------------------------------------

class SelectionTally:
    """Selection shares and the core portfolio accumulated over blocks of scenarios.

    ``add(selected)`` takes the (b, P) optimal portfolios of the next b scenarios; after all S
    scenarios, :meth:`share`, :meth:`probability` and :meth:`core` equal :func:`selection_share`,
    its weighted form and :func:`core_portfolio` of the whole (S, P) matrix (the weighted share
    up to rounding of the sum's order).

    Examples
    --------
    >>> t = SelectionTally(2, 2, weights=[0.75, 0.25])
    >>> t.add([[True, False]]); t.add([[True, True]])
    >>> t.share().tolist(), t.probability().tolist(), t.core(0.6).tolist()
    ([1.0, 0.5], [1.0, 0.25], [True, False])
    """

    def __init__(self, project_count: int, scenario_count: int, weights=None):
        self.P, self.S = int(project_count), int(scenario_count)
        self.weights = None if weights is None else check_weights(weights, self.S)
        self.count = np.zeros(self.P, dtype=np.int64)
        self.weighted = np.zeros(self.P)
        self.seen = 0

    def add(self, selected) -> None:
        sel = _as_selected(selected)
        if sel.shape[1] != self.P or self.seen + sel.shape[0] > self.S:
            raise ValueError(f"block of shape {sel.shape} does not follow {self.seen} of {self.S} scenarios "
                             f"of {self.P} projects")
        self.count += sel.sum(axis=0)
        if self.weights is not None:
            self.weighted += self.weights[self.seen:self.seen + sel.shape[0]] @ sel.astype(float)
        self.seen += sel.shape[0]

    def _check_done(self):
        if self.seen != self.S:
            raise ValueError(f"{self.seen} of {self.S} scenarios added")

    def share(self) -> np.ndarray:
        """Share of scenarios (P,) in which each project is selected (:func:`selection_share`)."""
        self._check_done()
        return self.count / self.S

    def probability(self) -> np.ndarray:
        """Weighted share (P,); equal weights when none were given."""
        self._check_done()
        return self.share() if self.weights is None else self.weighted

    def core(self, threshold: float = 0.8) -> np.ndarray:
        """Projects selected in at least ``threshold`` of the scenarios (:func:`core_portfolio`)."""
        t = float(threshold)
        if not 0 < t <= 1:
            raise ValueError(f"threshold must lie in (0, 1], got {threshold}")
        return self.share() >= t - 1e-12


class PortfolioSet:
    """The distinct optimal portfolios of blocks of scenarios, kept as packed bits (P / 8 bytes each).

    After every block is added, :meth:`portfolios` lists them in the order of
    ``numpy.unique(selected[have], axis=0)`` (lexicographic, False before True), with the count
    of scenarios each was optimal in: the candidates of :func:`min_max_regret`.
    """

    def __init__(self, project_count: int):
        self.P = int(project_count)
        self.counts: dict[bytes, int] = {}

    def add(self, selected, objective) -> None:
        sel = _as_selected(selected)
        have = np.isfinite(np.asarray(objective, dtype=float))
        if not have.any():
            return
        packed = np.packbits(sel[have], axis=1)          # big-endian bits: byte order = row order
        rows, counts = np.unique(packed, axis=0, return_counts=True)
        for row, n in zip(rows, counts):
            key = row.tobytes()
            self.counts[key] = self.counts.get(key, 0) + int(n)

    def __len__(self) -> int:
        return len(self.counts)

    def portfolios(self) -> tuple[np.ndarray, np.ndarray]:
        """(packed (K, ceil(P / 8)) uint8, counts (K,)) in lexicographic order."""
        keys = sorted(self.counts)
        width = -(-self.P // 8)
        packed = np.frombuffer(b"".join(keys), dtype=np.uint8).reshape(len(keys), width) if keys else \
            np.zeros((0, width), dtype=np.uint8)
        return packed, np.array([self.counts[k] for k in keys], dtype=np.int64)


@dataclass(frozen=True)
class RegretSummary:
    """Min-max regret over the distinct optima, accumulated over blocks (see :class:`RegretTally`).

    Attributes as in :class:`RegretResult` without the (K, S) matrices, plus ``mean_regret`` (K,):
    the mean regret over every scenario, NaN unless the portfolio fits every scenario and every
    scenario has an optimum (as the in-memory mean over the (K, S) regret matrix gives). The
    candidates are ``packed_portfolios`` (K, ceil(P / 8)) uint8, 8 projects to a byte
    (``np.unpackbits(..., axis=1, count=P)`` gives them as selections).
    """

    packed_portfolios: np.ndarray
    optimal_in: np.ndarray
    max_regret: np.ndarray
    max_regret_where_feasible: np.ndarray
    mean_regret: np.ndarray
    best: int
    best_selected: np.ndarray


class RegretTally:
    """:func:`min_max_regret` accumulated one block of scenarios at a time.

    Parameters
    ----------
    portfolios : array_like of bool, shape (K, P), or uint8, shape (K, ceil(P / 8))
        The candidates (the distinct optima): selections, or with ``n_projects`` given their rows
        packed 8 projects to a byte as :meth:`PortfolioSet.portfolios` gives them (held packed and
        unpacked ``batch_cells // P`` candidates at a time: K P / 8 bytes, not K P).
    optimal_in : array_like of int, shape (K,)
    investment : array_like, shape (B, P) or (K_c, B, P)
        Outlays per cost class, as for :func:`ratescape.decide.rationing.ration_capital`.
    batch_cells : int
        Candidates are multiplied with a block's worths ``batch_cells // P`` at a time (memory).
    n_projects : int, optional
        P, when ``portfolios`` are packed rows.

    ``add(pw, objective, budgets, scenario_class)`` takes the next block: pw (P, b), objective
    (b,) (NaN: no optimum), budgets (b, B) or (B,), classes (b,). :meth:`result` then gives the
    same ``max_regret``, ``max_regret_where_feasible`` and ``best`` as :func:`min_max_regret` on
    the whole matrix (the worths are the same matrix products, scenario by scenario).

    References
    ----------
    L. J. Savage, "The theory of statistical decision", Journal of the American Statistical
    Association 46(253), 1951, pp. 55-67 (minimax regret).
    """

    def __init__(self, portfolios, optimal_in, investment, batch_cells: int = 4_000_000, *,
                 n_projects: int | None = None):
        if n_projects is None:
            selected = _as_selected(portfolios)
            P = selected.shape[1]
            self.packed = np.packbits(selected, axis=1)
        else:
            P = int(n_projects)
            self.packed = np.asarray(portfolios, dtype=np.uint8)
            if self.packed.ndim != 2 or self.packed.shape[1] != -(-P // 8):
                raise ValueError(f"packed portfolios must have shape (K, {-(-P // 8)}) for {P} projects, "
                                 f"got shape {self.packed.shape}")
        self.optimal_in = np.asarray(optimal_in, dtype=np.int64)
        inv = np.asarray(investment, dtype=float)
        self.inv = inv[None] if inv.ndim == 2 else inv
        K = self.packed.shape[0]
        self.K, self.P = K, P
        self.batch = max(1, int(batch_cells) // max(P, 1))
        # outlay of every candidate in every class and budget period: (K_c, K, B), one pass over
        # the candidates for all classes
        K_c, B = self.inv.shape[:2]
        outlays = self.inv.transpose(2, 0, 1).reshape(P, K_c * B)             # (P, K_c B)
        self.used = self._products(outlays).reshape(K, K_c, B).transpose(1, 0, 2) if K else \
            np.zeros((K_c, 0, B))
        self.top = np.full(K, -np.inf)
        self.any_feasible = np.zeros(K, dtype=bool)
        self.everywhere = np.ones(K, dtype=bool)       # feasible in every scenario that has an optimum
        self.total = np.zeros(K)
        self.valid = np.zeros(K, dtype=np.int64)
        self.scenarios = 0
        self.have_any = False

    def _selected(self, a: int, b: int) -> np.ndarray:
        """Candidates a..b-1 as selections (b - a, P) of bool."""
        return np.unpackbits(self.packed[a:b], axis=1, count=self.P).view(bool)

    def _products(self, matrix: np.ndarray) -> np.ndarray:
        """candidates (K, P) @ matrix (P, n), ``batch`` candidates at a time."""
        out = np.empty((self.K, matrix.shape[1]))
        for a in range(0, self.K, self.batch):
            out[a:a + self.batch] = self._selected(a, a + self.batch).astype(float) @ matrix
        return out

    def add(self, pw, objective, budgets, scenario_class=None) -> None:
        x = np.asarray(pw, dtype=float)
        obj = np.asarray(objective, dtype=float)
        b = obj.size
        if x.shape != (self.P, b):
            raise ValueError(f"pw must have shape (P, b) = ({self.P}, {b}), got shape {x.shape}")
        bud = np.broadcast_to(np.asarray(budgets, dtype=float), (b, self.inv.shape[1]))
        cls = np.zeros(b, dtype=np.intp) if scenario_class is None else np.asarray(scenario_class, dtype=np.intp)
        self.scenarios += b
        if self.K == 0:
            return
        have = np.isfinite(obj)
        self.have_any |= bool(have.any())
        used = self.used[cls]                                          # (b, K, B)
        feas = np.all(used <= (bud + np.abs(bud) * FEASIBILITY_TOL + FEASIBILITY_TOL)[:, None, :], axis=2).T
        worth = self._products(x)                                      # (K, b)
        valid = feas & have[None]
        regret = obj[None] - worth
        self.top = np.maximum(self.top, np.where(valid, regret, -np.inf).max(axis=1, initial=-np.inf))
        self.any_feasible |= valid.any(axis=1)
        self.everywhere &= np.all(feas | ~have[None], axis=1)
        self.total += np.where(valid, regret, 0.0).sum(axis=1)
        self.valid += valid.sum(axis=1)

    def result(self) -> RegretSummary:
        if not self.have_any:
            raise ValueError("no scenario has an optimum (objective is all NaN)")
        where_feas = np.where(self.any_feasible, self.top, np.nan)
        max_regret = np.where(self.everywhere, where_feas, np.inf)
        best = int(np.argmin(max_regret)) if self.everywhere.any() else -1
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(self.valid == self.scenarios, self.total / max(self.scenarios, 1), np.nan)
        best_sel = self._selected(best, best + 1)[0] if best >= 0 else np.zeros(self.P, dtype=bool)
        return RegretSummary(packed_portfolios=self.packed, optimal_in=self.optimal_in, max_regret=max_regret,
                             max_regret_where_feasible=where_feas, mean_regret=mean, best=best,
                             best_selected=best_sel)
