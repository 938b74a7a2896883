"""Capital rationing in every scenario: a 0-1 integer program per scenario.

In each scenario s choose x in {0, 1}^P to

    maximise    sum_j pw[j, s] x_j
    subject to  sum_j a[k(s), b, j] x_j <= budget[s, b]     every budget period b
                sum_{j in g} x_j <= 1   (or == 1 if group g is mandatory)
                x_dep <= x_pre          every (dependent, prerequisite) pair

with HiGHS through its own Python interface (``highspy``; persistent models
per cost class, see :mod:`ratescape.decide.highs_models`). Beside the optimum
it reports the LP relaxation bound, the gap, and the profitability-index
greedy answer.

References
----------
J. H. Lorie, L. J. Savage, "Three problems in rationing capital", Journal of
Business 28(4), 1955, pp. 229-239.
H. M. Weingartner, Mathematical Programming and the Analysis of Capital
Budgeting Problems, Prentice-Hall, 1963 (0-1 formulation, mutually
exclusive and contingent projects).
Q. Huangfu, J. A. J. Hall, "Parallelizing the dual revised simplex method",
Mathematical Programming Computation 10(1), 2018, pp. 119-142 (HiGHS).
G. L. Nemhauser, L. A. Wolsey, Integer and Combinatorial Optimization,
Wiley, 1988 (reduced-cost fixing).
"""
from __future__ import annotations

import os
import sys
import time
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from ratescape.decide.highs_models import LP_OPTIMAL, MIP_INFEASIBLE, MIP_LIMIT, MIP_OPTIMAL, HighsModels
from ratescape.decide.rationing_problem import (
    FEASIBILITY_TOL,
    greedy_fill,
    prerequisite_pairs,
    prerequisites_met,
    problem_structure,
    validate_problem,
)

__all__ = [
    "RationingResult",
    "ration_capital",
    "STATUS_OPTIMAL",
    "STATUS_LIMIT",
    "STATUS_INFEASIBLE",
    "STATUS_OTHER",
    "STATUS_LABELS",
    "METHOD_LP_BOUND",
    "METHOD_MILP",
    "METHOD_MILP_FIXED",
    "solver_block_size",
]


#: status codes (S,) of :class:`RationingResult` (the numbers of ``scipy.optimize.milp``'s)
STATUS_OPTIMAL = 0  # optimal within mip_rel_gap


STATUS_LIMIT = 1  # time limit reached; best portfolio found is reported


STATUS_INFEASIBLE = 2  # no portfolio satisfies the constraints


STATUS_OTHER = 4

#: the one table of status names, stored in ``portfolios.status``
STATUS_LABELS = {STATUS_OPTIMAL: "optimal", STATUS_LIMIT: "limit", STATUS_INFEASIBLE: "infeasible",
                 STATUS_OTHER: "other"}


#: how a scenario's optimum was proved (``RationingResult.method``)
METHOD_LP_BOUND = 0  # a heuristic portfolio within mip_rel_gap of the LP bound: no MILP needed


METHOD_MILP = 1  # full MILP


METHOD_MILP_FIXED = 2  # MILP after reduced-cost fixing


METHOD_NONE = -1  # infeasible LP: nothing to solve


#: scenarios solved as one block (one pool of earlier optima): blocks are fixed ranges of scenario
#: indices [0, b), [b, 2b), ..., so the answer is the same whatever the number of processes and
#: whether the scenarios are solved all at once or streamed in larger blocks that are multiples of b.
BLOCK_SIZE = 256
#: fewer scenarios per block for large portfolios: about this many (scenario, project) cells a block
BLOCK_CELLS = 4_000_000
MIN_BLOCK_SIZE = 8
#: the local search's swaps look at most this many projects on each side (memory: B x side x side)
SWAP_SIDE = 512


@dataclass(frozen=True)
class RationingResult:
    """Per-scenario capital rationing results (all arrays indexed by scenario first).

    Attributes
    ----------
    selected : ndarray of bool, shape (S, P)
        Optimal (within ``mip_rel_gap``) portfolio of each scenario.
    objective : ndarray, shape (S,) [currency]
        Its total present worth; NaN where infeasible.
    lp_bound : ndarray, shape (S,) [currency]
        Optimum of the LP relaxation (0 <= x <= 1); NaN where infeasible.
    mip_gap : ndarray, shape (S,) [fraction]
        (best bound - objective) / |objective| at the end of the solve, the
        best bound being the LP bound or the branch-and-bound dual bound.
    greedy_selected : ndarray of bool, shape (S, P)
    greedy_objective : ndarray, shape (S,) [currency]
        Profitability-index greedy portfolio and its worth (NaN where the
        greedy rule finds no feasible portfolio); see :func:`greedy_selection`.
    budget_used : ndarray, shape (S, B) [then-current money]
        Outlay of the optimal portfolio in each budget period.
    solve_seconds : ndarray, shape (S,) [s]
        Solver time; 0 for scenarios that reused another's solve.
    status : ndarray of int8, shape (S,)
        ``STATUS_OPTIMAL``, ``STATUS_LIMIT``, ``STATUS_INFEASIBLE`` or
        ``STATUS_OTHER``.
    method : ndarray of int8, shape (S,)
        ``METHOD_LP_BOUND``, ``METHOD_MILP``, ``METHOD_MILP_FIXED`` (or -1).
    solved_as : ndarray of int, shape (S,)
        Index of the scenario whose solve was reused (``s`` itself when it
        was solved).
    """

    selected: np.ndarray
    objective: np.ndarray
    lp_bound: np.ndarray
    mip_gap: np.ndarray
    greedy_selected: np.ndarray
    greedy_objective: np.ndarray
    budget_used: np.ndarray
    solve_seconds: np.ndarray
    status: np.ndarray
    method: np.ndarray
    solved_as: np.ndarray


@contextmanager
def _quiet_stdout(enabled):
    """Send file descriptor 1 to /dev/null: some HiGHS builds print debug lines there."""
    if not enabled:
        yield
        return
    try:
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):
        yield
        return
    sys.stdout.flush()
    saved = os.dup(fd)
    devnull = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, fd)
        yield
    finally:
        os.dup2(saved, fd)
        os.close(saved)
        os.close(devnull)


def _feasible(prob, x, k, budget):
    """Whether 0-1 portfolios x (n, P) fit class k's budgets (B,); groups/requires assumed."""
    used = x.astype(float) @ prob.inv[k].T
    return np.all(used <= budget + np.abs(budget) * FEASIBILITY_TOL + FEASIBILITY_TOL, axis=1)


def _structurally_ok(prob, x):
    """Groups and requires satisfied by portfolios x (n, P)."""
    ok = np.ones(x.shape[0], dtype=bool)
    if prob.requires.size:
        ok &= ~np.any(x[:, prob.requires[:, 0]] & ~x[:, prob.requires[:, 1]], axis=1)
    G = prob.mandatory.size
    if G:
        m = prob.group >= 0
        counts = np.zeros((x.shape[0], G), dtype=np.intp)
        np.add.at(counts.T, prob.group[m], x[:, m].T.astype(np.intp))
        ok &= np.all(counts <= 1, axis=1) & np.all(counts[:, prob.mandatory] == 1, axis=1)
    return ok


def _prune(prob, x, pw_s, k, budget):
    """Drop selected projects with pw <= 0 that nothing forces (keeps feasibility)."""
    x = x.copy()
    while True:
        cand = x & (pw_s <= 0)
        if not cand.any():
            return x
        needed = np.zeros_like(x)
        if prob.requires.size:
            dep, pre = prob.requires[:, 0], prob.requires[:, 1]
            needed[pre[x[dep]]] = True
        m = prob.group >= 0
        in_mand = np.zeros_like(x)
        in_mand[m] = prob.mandatory[prob.group[m]]
        cand &= ~needed & ~in_mand
        dropped = False
        for j in np.flatnonzero(cand):
            y = x.copy()
            y[j] = False
            if _feasible(prob, y[None], k, budget)[0]:
                x = y
                dropped = True
        if not dropped:
            return x


def _lp_rounding_starts(prob, lp_x, cls, budgets):
    """LP solutions (n, P) rounded down, requires repaired, infeasible ones emptied."""
    start = lp_x > 1 - 1e-6
    if prob.requires.size:
        dep, pre = prob.requires[:, 0], prob.requires[:, 1]
        for _ in range(dep.size + 1):
            bad = start[:, dep] & ~start[:, pre]
            if not bad.any():
                break
            r, c = np.nonzero(bad)
            start[r, dep[c]] = False
    for k in np.unique(cls):
        m = np.flatnonzero(cls == k)
        used = start[m].astype(float) @ prob.inv[k].T
        bad = np.any(used > budgets[m] + np.abs(budgets[m]) * FEASIBILITY_TOL + FEASIBILITY_TOL, axis=1)
        start[m[bad]] = False
    return start


def _improve(prob, x, pw_s, ub, k, budget, max_iter=25):
    """Best-improvement local search: add one project, or swap one in for one out."""
    inv_k = prob.inv[k]
    grp, mand = prob.group, prob.mandatory
    G = mand.size
    tol = np.abs(budget) * FEASIBILITY_TOL + FEASIBILITY_TOL
    x = x.copy()
    for _ in range(max_iter):
        slack = budget - inv_k @ x + tol
        ins = np.flatnonzero(x)
        outs = np.flatnonzero(~x & (ub > 0) & (pw_s > 0))
        if outs.size == 0:
            break
        taken = np.zeros(G + 1, dtype=bool)
        gi_all = grp[ins]
        taken[gi_all[gi_all >= 0]] = True
        gj = np.where(grp[outs] >= 0, grp[outs], G)
        taken[G] = False
        pre_ok = prerequisites_met(prob.prereq, x[None, :], np.zeros(outs.size, dtype=np.intp), outs)
        add_ok = pre_ok & ~taken[gj] & np.all(inv_k[:, outs] <= slack[:, None], axis=0)
        if add_ok.any():
            j = outs[np.argmax(np.where(add_ok, pw_s[outs], -np.inf))]
            x[j] = True
            continue
        if ins.size == 0:
            break
        if ins.size > SWAP_SIDE:        # large portfolios: swap the least worth in for the most worth out
            ins = ins[np.argsort(pw_s[ins], kind="stable")[:SWAP_SIDE]]
            gi_all = grp[ins]
        if outs.size > SWAP_SIDE:
            keep = np.argsort(-pw_s[outs], kind="stable")[:SWAP_SIDE]
            outs, gj, pre_ok = outs[keep], gj[keep], pre_ok[keep]
        needed = np.zeros(x.size, dtype=bool)
        if prob.requires.size:
            dep, pre = prob.requires[:, 0], prob.requires[:, 1]
            needed[pre[x[dep]]] = True
        gi = np.where(gi_all >= 0, gi_all, G)
        same = gi[:, None] == gj[None, :]
        ok = (~needed[ins])[:, None] & pre_ok[None, :] & (~taken[gj][None, :] | same)
        mand_i = np.zeros(ins.size, dtype=bool)
        mand_i[gi_all >= 0] = mand[gi_all[gi_all >= 0]]
        ok &= ~mand_i[:, None] | same
        if prob.requires.size:      # an alternative in needs no prerequisite it would swap out
            owner, pre = prerequisite_pairs(prob.prereq, outs)
            pos = np.full(x.size, -1, dtype=np.intp)
            pos[ins] = np.arange(ins.size)
            hit = pos[pre] >= 0
            ok[pos[pre[hit]], owner[hit]] = False
        gain = pw_s[outs][None, :] - pw_s[ins][:, None]
        ok &= gain > 1e-9 * max(1.0, float(np.abs(pw_s).max()))
        if not ok.any():
            break
        delta = inv_k[:, outs][:, None, :] - inv_k[:, ins][:, :, None]  # (B, in, out)
        ok &= np.all(delta <= slack[:, None, None], axis=0)
        if not ok.any():
            break
        flat = int(np.argmax(np.where(ok, gain, -np.inf)))
        a, b = divmod(flat, outs.size)
        x[ins[a]] = False
        x[outs[b]] = True
    return x


def _solve_one(prob, s, models, lp_info, cands, mip_rel_gap):
    """Certify or branch and bound scenario s. Returns (x or None, bound, status, method, seconds)."""
    t0 = time.perf_counter()
    U, lp_x, d, ub = lp_info
    pw_s = prob.pw[:, s]
    k = int(prob.cls[s])
    budget = prob.budgets[s]
    P = pw_s.size
    # incumbent: best feasible candidate portfolio
    L, x_inc = -np.inf, None
    if cands:
        cand = np.asarray(cands, dtype=bool)
        ok = _feasible(prob, cand, k, budget) & ~np.any(cand[:, ub == 0], axis=1)
        if ok.any():
            vals = np.where(ok, cand.astype(float) @ pw_s, -np.inf)
            i = int(np.argmax(vals))
            L, x_inc = float(vals[i]), cand[i]
    if x_inc is not None and U - L > mip_rel_gap * max(abs(L), 1e-12):
        x_inc = _improve(prob, x_inc, pw_s, ub, k, budget)
        L = float(pw_s[x_inc].sum())
    if x_inc is not None and U - L <= mip_rel_gap * max(abs(L), 1e-12):
        return x_inc, max(U, L), STATUS_OPTIMAL, METHOD_LP_BOUND, time.perf_counter() - t0
    lb_v = np.zeros(P)
    ub_v = ub.astype(float)
    method = METHOD_MILP
    if x_inc is not None:
        # reduced-cost fixing: moving x_j off its LP bound costs at least d_j, so a portfolio better
        # than L keeps every x_j whose d_j exceeds U - L where the LP put it
        margin = U - L + 1e-7 * max(1.0, abs(U))
        ub_v[(d > margin) & (lp_x < 0.5)] = 0.0
        lb_v[(d > margin) & (lp_x > 0.5)] = 1.0
        method = METHOD_MILP_FIXED
    gap = mip_rel_gap
    for attempt in range(2):
        code, x, bnd, _ = models.mip(k, pw_s, budget, lb_v, ub_v, x_inc, gap)
        obj = -np.inf
        if x is not None:
            if _structurally_ok(prob, x[None])[0] and _feasible(prob, x[None], k, budget)[0]:
                obj = float(pw_s[x].sum())
            else:  # rounded solver answer not feasible (numerical trouble)
                x = None
        if x_inc is not None and L >= obj:
            x, obj = x_inc, L
        if x is None:
            st = {MIP_INFEASIBLE: STATUS_INFEASIBLE, MIP_LIMIT: STATUS_LIMIT}.get(code, STATUS_OTHER)
            return None, np.nan, st, method, time.perf_counter() - t0
        # proven bound: the solver's dual bound over the fixed space, or the incumbent (anything
        # outside the fixed space is worth less than L <= obj)
        bound = min(U, max(obj, bnd)) if code == MIP_OPTIMAL else U
        excess = bound - obj - mip_rel_gap * max(abs(obj), 1e-12)
        if code != MIP_OPTIMAL or excess <= 0 or attempt:
            break
        # the solver measures its gap its own way: solve again with a tolerance small enough that
        # the gap proven is within mip_rel_gap of this objective
        gap = max(0.0, 0.5 * gap * mip_rel_gap * max(abs(obj), 1e-12) / max(bound - obj, 1e-300))
        x_inc, L = x, obj
    seconds = time.perf_counter() - t0
    return x, bound, (STATUS_OPTIMAL if code == MIP_OPTIMAL else STATUS_LIMIT), method, seconds


def ration_capital(pw, investment, budgets, *, scenario_class=None, group_index=None,
                   group_mandatory=None, requires=None, mip_rel_gap=1e-3, time_limit=None,
                   reuse_identical=True, pool_size=32, quiet=True, processes=None,
                   block_size=None, progress=None):
    """Best portfolio of projects under period budgets, in every scenario.

    Parameters
    ----------
    pw : array_like, shape (P, S) [currency]
        Present worth of each project in each scenario (the objective).
    investment : array_like, shape (B, P) or (K, B, P) [then-current money]
        Outlay of each project in each budget period b. With K classes
        (e.g. one per inflation value, since then-current outlays move with
        inflation), ``scenario_class`` says which class each scenario uses;
        the constraint matrix is built once per class.
    budgets : array_like, shape (B,) or (S, B) [then-current money]
        Money available in each budget period (``inf`` = unlimited);
        per scenario when given as (S, B).
    scenario_class : array_like of int, shape (S,), optional
        Class of each scenario in [0, K); required when K > 1.
    group_index : array_like of int, shape (P,), optional
        Mutually exclusive group of each project, -1 = none. Groups are
        numbered 0 .. G-1.
    group_mandatory : array_like of bool, shape (G,), optional
        True: exactly one member of the group must be chosen; False
        (default): at most one.
    requires : array_like of int, shape (R, 2), optional
        (dependent, prerequisite) pairs: x_dep <= x_pre.
    mip_rel_gap : float, optional
        Relative optimality tolerance: a reported portfolio is within
        ``mip_rel_gap * |objective|`` of the best possible (default 1e-3,
        0.1 % of the portfolio's present worth, far inside the accuracy of
        the cash-flow estimates). Each scenario's proven gap is in
        ``mip_gap``. Use 0 for a proof of exact optimality (slower: on
        1,000-project problems branch and bound then takes about a second
        per scenario).
    time_limit : float, optional
        Seconds per scenario for the branch and bound; on reaching it the
        best portfolio found is reported with status ``STATUS_LIMIT``.
    reuse_identical : bool, optional
        Solve once per distinct (class, budgets, pw column) within a block
        and copy the answer to identical scenarios (default True).
    pool_size : int, optional
        How many distinct optimal portfolios to keep as starting
        candidates for later scenarios (default 32).
    quiet : bool, optional
        Silence text that the solver writes to standard output during the
        solve (default True).
    processes : int, optional
        Processes that solve blocks of scenarios side by side (default:
        2, or 1 on a one-core machine; 1 solves in this process). The
        answer does not depend on it.
    block_size : int, optional
        Scenarios per block (default :func:`solver_block_size`: 256, fewer
        above 15,625 projects); blocks are the index ranges [0, b), [b, 2b),
        ..., each with its own pool of earlier optima, identical scenarios
        solved once within a block.
    progress : callable, optional
        Called with the number of scenarios of each block as it is solved.

    Returns
    -------
    RationingResult
        See :class:`RationingResult`; arrays of shape (S, ...).

    Warnings
    --------
    Outlays in ``investment`` and ``budgets`` are in then-current money of
    their budget period; ``pw`` is present worth in base-year money. The two
    are not mixed: outlays only enter the constraints.

    Notes
    -----
    Formulation (Weingartner 1963): maximise pw[:, s] @ x subject to
    inv[k(s)] @ x <= budgets[s], group rows sum(x_g) <= 1 (== 1 when
    mandatory), and x_dep - x_pre <= 0; x in {0, 1}^P.

    A project with pw <= 0 has upper bound 0 unless it is in a mandatory
    group or is a prerequisite of another project; a selected project with
    pw <= 0 that neither a mandatory group nor a selected dependent needs
    is dropped after the solve. So a project with pw <= 0 is selected only
    when the constraints force it or when it enables dependents worth more
    than it costs.

    Each distinct scenario is solved in three steps, which reuse the work
    of earlier scenarios:

    1. The LP relaxation gives ``lp_bound`` U and the reduced costs d_j
       (HiGHS simplex on one LP model per cost class, changed in place from
       one scenario to the next, so each solve restarts from the previous
       optimal basis).
    2. Candidate portfolios: the profitability-index greedy answer, the LP
       solution rounded down and then filled greedily, and the distinct
       optima of earlier scenarios (``pool_size`` most recent) that fit
       this scenario's budgets. The best, improved by a local search
       (add one project, or swap one in for one out, while it gains), is
       the incumbent L. If U - L <= mip_rel_gap |L| it is optimal within the
       tolerance and no branch and bound is needed
       (``METHOD_LP_BOUND``).
    3. Otherwise, reduced-cost fixing: a variable at 0 (1) in the LP with
       |d_j| > U - L cannot change in any portfolio better than L, so it is
       fixed; HiGHS's branch and bound then solves the 0-1 program over the
       rest, starting from L (``setSolution``) on the class's persistent
       model, to ``mip_rel_gap``. The better of its answer and L is kept; its
       proven bound is max(answer, dual bound), which also bounds the
       portfolios the fixing excluded (they are worth less than L). If that
       bound is not within ``mip_rel_gap`` of the answer (the solver measures
       its gap its own way), it solves once more to a tighter tolerance.

    Every stored gap is proven: by the LP bound or the branch-and-bound dual
    bound, never assumed.

    References
    ----------
    H. M. Weingartner, Mathematical Programming and the Analysis of Capital
    Budgeting Problems, Prentice-Hall, 1963.
    G. L. Nemhauser, L. A. Wolsey, Integer and Combinatorial Optimization,
    Wiley, 1988, sec. II.1 (reduced-cost fixing).

    Examples
    --------
    >>> res = ration_capital([[6.0], [5.0], [5.0]], [[4.0, 3.0, 3.0]], [6.0])
    >>> res.selected.tolist(), res.objective.tolist(), res.greedy_objective.tolist()
    ([[False, True, True]], [10.0], [10.0])
    """
    prob = validate_problem(pw, investment, budgets, scenario_class, group_index, group_mandatory, requires)
    mip_rel_gap = float(mip_rel_gap)
    if not 0 <= mip_rel_gap < 1:
        raise ValueError(f"mip_rel_gap must lie in [0, 1), got {mip_rel_gap}")
    if time_limit is not None and not float(time_limit) > 0:
        raise ValueError(f"time_limit must be > 0 seconds, got {time_limit}")
    P, S = prob.pw.shape
    B = prob.inv.shape[1]
    block_size = solver_block_size(P) if block_size is None else max(1, int(block_size))

    # fixed blocks of scenario indices; identical scenarios are solved once within a block
    blocks = [np.arange(a, min(a + block_size, S)) for a in range(0, S, block_size)]
    solved_as = np.arange(S)
    uniq_of = []
    for blk in blocks:
        if reuse_identical and blk.size > 1:
            key = np.concatenate([prob.cls[blk, None].astype(float), prob.budgets[blk], prob.pw[:, blk].T], axis=1)
            _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
            solved_as[blk] = blk[first[inverse.ravel()]]
            uniq_of.append(blk[np.sort(first)])
        else:
            uniq_of.append(blk)
    uniq = np.concatenate(uniq_of)
    n_u = uniq.size
    args = (mip_rel_gap, time_limit, pool_size, quiet)
    workers = _worker_count(processes, len(blocks))
    counts = [blk.size for blk in blocks]
    if workers > 1:
        parts = _solve_blocks_in_processes(prob, uniq_of, counts, args, workers, progress)
    else:
        parts = []
        for u, n in zip(uniq_of, counts):
            parts.append(_solve_block(prob, u, *args))
            if progress is not None:
                progress(n)
    sel_u, lp_u, bound_u, st_u, meth_u, sec_u, ok_u, g_sel, g_ok = (np.concatenate(x) for x in zip(*parts))

    # back to all scenarios
    pos = np.empty(S, dtype=np.intp)
    pos[uniq] = np.arange(n_u)
    idx = pos[solved_as]
    selected = sel_u[idx]
    ok = ok_u[idx]
    objective = np.where(ok, _worth_of(selected, prob.pw), np.nan)
    bound = bound_u[idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        gap = np.where(ok, (bound - objective) / np.maximum(np.abs(objective), 1e-300), np.nan)
    gap = np.where(ok & (bound - objective <= 0), 0.0, gap)
    greedy_sel = g_sel[idx]
    greedy_obj = np.where(g_ok[idx], _worth_of(greedy_sel, prob.pw), np.nan)
    used = np.einsum("sbp,sp->sb", prob.inv[prob.cls], selected.astype(float)) if S * B * P <= 5e7 else \
        _used_by_class(prob, selected)
    seconds = np.where(solved_as == np.arange(S), sec_u[idx], 0.0)
    return RationingResult(
        selected=selected,
        objective=objective,
        lp_bound=lp_u[idx],
        mip_gap=gap,
        greedy_selected=greedy_sel,
        greedy_objective=greedy_obj,
        budget_used=used,
        solve_seconds=seconds,
        status=st_u[idx],
        method=meth_u[idx],
        solved_as=solved_as,
    )


def solver_block_size(project_count: int) -> int:
    """Scenarios per solver block for a portfolio of ``project_count`` projects: BLOCK_SIZE, fewer
    for large portfolios so that a block's (scenarios x projects) arrays stay near BLOCK_CELLS."""
    return int(max(MIN_BLOCK_SIZE, min(BLOCK_SIZE, BLOCK_CELLS // max(1, int(project_count)))))


def _worker_count(processes, n_blocks):
    """Processes to use: ``processes`` (None: 2, or 1 on a one-core machine), at most one per block."""
    if processes is None:
        processes = min(2, os.cpu_count() or 1)
    return max(1, min(int(processes), n_blocks))


def _solve_blocks_in_processes(prob, uniq_of, counts, args, workers, progress=None):
    """Solve the blocks on ``workers`` forked processes (here, one after another, where fork is missing);
    ``progress(n)`` is called with a block's scenario count as each block finishes."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed
    if "fork" not in multiprocessing.get_all_start_methods() or multiprocessing.current_process().daemon:
        out = []
        for u, n in zip(uniq_of, counts):
            out.append(_solve_block(prob, u, *args))
            if progress is not None:
                progress(n)
        return out
    with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("fork")) as ex:
        futures = [ex.submit(_solve_block, prob, u, *args) for u in uniq_of]
        if progress is not None:
            size = {f: n for f, n in zip(futures, counts)}
            for f in as_completed(futures):
                progress(size[f])
        return [f.result() for f in futures]


def _solve_block(prob, uniq, mip_rel_gap, time_limit, pool_size, quiet):
    """Solve the distinct scenarios ``uniq`` in order, with one pool of earlier optima.

    Returns per-scenario arrays of length ``uniq.size``: selection, LP bound, proven bound,
    status, method, seconds, solved, greedy selection, greedy feasible."""
    a_ub, rest_b, a_eq, b_eq = problem_structure(prob)
    models = HighsModels(a_ub, rest_b, a_eq, b_eq, prob.inv.shape[1], time_limit)
    pw_u = prob.pw[:, uniq].T  # (U, P)
    cls_u = prob.cls[uniq]
    bud_u = prob.budgets[uniq]
    g_sel, g_ok = greedy_fill(prob, pw_u, cls_u, bud_u)

    n_u = uniq.size
    P = prob.pw.shape[0]
    sel_u = np.zeros((n_u, P), dtype=bool)
    lp_u = np.full(n_u, np.nan)
    bound_u = np.full(n_u, np.nan)
    st_u = np.full(n_u, STATUS_INFEASIBLE, dtype=np.int8)
    meth_u = np.full(n_u, METHOD_NONE, dtype=np.int8)
    sec_u = np.zeros(n_u)
    ok_u = np.zeros(n_u, dtype=bool)
    lp_x = np.zeros((n_u, P))
    lp_info = [None] * n_u
    with _quiet_stdout(quiet):
        # 1. LP relaxations
        for i, s in enumerate(uniq):
            k = int(prob.cls[s])
            pw_s = prob.pw[:, s]
            ub = np.where((pw_s > 0) | prob.may_be_forced, 1.0, 0.0)
            st, U, x, d, sec = models.lp(k, pw_s, prob.budgets[s], ub)
            sec_u[i] = sec
            if st == LP_OPTIMAL:
                lp_u[i] = U
                lp_x[i] = x
                lp_info[i] = (U, x, d, ub)
            else:
                st_u[i] = STATUS_INFEASIBLE if st == 2 else STATUS_OTHER
        # 2. LP solutions rounded down and filled greedily (all scenarios at once)
        r_sel, r_ok = greedy_fill(prob, pw_u, cls_u, bud_u, _lp_rounding_starts(prob, lp_x, cls_u, bud_u))
        # 3. certify by the LP bound, or branch and bound on what reduced costs leave free
        pool = []  # distinct optima so far, any class: feasibility is checked per scenario
        for i, s in enumerate(uniq):
            if lp_info[i] is None:
                continue
            k = int(prob.cls[s])
            cands = list(pool)
            if g_ok[i]:
                cands.append(g_sel[i])
            if r_ok[i]:
                cands.append(r_sel[i])
            x, bnd, st, meth, sec = _solve_one(prob, s, models, lp_info[i], cands, mip_rel_gap)
            st_u[i], meth_u[i] = st, meth
            sec_u[i] += sec
            if x is None:
                continue
            x = _prune(prob, x, prob.pw[:, s], k, prob.budgets[s])
            sel_u[i] = x
            bound_u[i] = bnd
            ok_u[i] = True
            if not any(np.array_equal(x, y) for y in pool):
                pool.append(x)
                if len(pool) > pool_size:
                    pool.pop(0)
    return sel_u, lp_u, bound_u, st_u, meth_u, sec_u, ok_u, g_sel, g_ok


def _worth_of(selected, pw, rows=64):
    """Worth (S,) of portfolios (S, P) under pw (P, S), ``rows`` scenarios at a time (no (S, P) float copy)."""
    out = np.empty(selected.shape[0])
    for a in range(0, selected.shape[0], rows):
        out[a:a + rows] = np.einsum("sp,ps->s", selected[a:a + rows].astype(float), pw[:, a:a + rows])
    return out


def _used_by_class(prob, selected):
    used = np.zeros((selected.shape[0], prob.inv.shape[1]))
    for k in np.unique(prob.cls):
        m = prob.cls == k
        used[m] = selected[m].astype(float) @ prob.inv[k].T
    return used
