"""The capital-rationing problem of a portfolio, checked and laid out once for every scenario:
worths, outlays by budget period, scenario classes of outlays, groups, mandatory groups and
"requires" pairs, with the greedy fill by profitability index that the solver and the
comparison both use.

References
----------
H. M. Weingartner, Mathematical Programming and the Analysis of Capital Budgeting Problems,
Prentice-Hall, 1963 (0-1 formulation, mutually exclusive and contingent projects).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

FEASIBILITY_TOL = 1e-9  # relative budget tolerance when checking portfolios


@dataclass
class RationingProblem:
    pw: np.ndarray  # (P, S)
    inv: np.ndarray  # (K, B, P)
    cls: np.ndarray  # (S,)
    budgets: np.ndarray  # (S, B)
    group: np.ndarray  # (P,) -1 = none
    mandatory: np.ndarray  # (G,) bool
    requires: np.ndarray  # (R, 2)
    prereq: sparse.csr_matrix  # (P, P): row p lists the prerequisites of project p (R entries, not P x M)
    may_be_forced: np.ndarray  # (P,) bool: in a mandatory group or a prerequisite


def validate_problem(pw, investment, budgets, scenario_class, group_index, group_mandatory, requires):
    x = np.asarray(pw, dtype=float)
    if x.ndim != 2 or x.shape[0] == 0 or x.shape[1] == 0:
        raise ValueError(f"pw must have shape (P, S) with P, S >= 1, got shape {x.shape}")
    if np.any(~np.isfinite(x)):
        raise ValueError("pw must be finite")
    P, S = x.shape
    inv = np.asarray(investment, dtype=float)
    if inv.ndim == 2:
        inv = inv[None]
    if inv.ndim != 3 or inv.shape[2] != P or inv.shape[1] == 0:
        raise ValueError(
            f"investment must have shape (B, P) or (K, B, P) with P = {P}, got shape {np.shape(investment)}"
        )
    if np.any(~np.isfinite(inv)):
        raise ValueError("investment must be finite")
    K, B, _ = inv.shape
    if scenario_class is None:
        if K != 1:
            raise ValueError(f"investment has K = {K} classes: give scenario_class of shape (S,) = ({S},)")
        cls = np.zeros(S, dtype=np.intp)
    else:
        cls = np.asarray(scenario_class)
        if cls.shape != (S,) or not np.issubdtype(cls.dtype, np.integer):
            raise ValueError(f"scenario_class must be integers of shape (S,) = ({S},), got shape {cls.shape}")
        if np.any(cls < 0) or np.any(cls >= K):
            raise ValueError(f"scenario_class values must lie in [0, {K}) for investment of shape {inv.shape}")
        cls = cls.astype(np.intp)
    bud = np.asarray(budgets, dtype=float)
    if bud.shape == (B,):
        bud = np.broadcast_to(bud, (S, B))
    elif bud.shape != (S, B):
        raise ValueError(f"budgets must have shape (B,) = ({B},) or (S, B) = ({S}, {B}), got shape {bud.shape}")
    if np.any(np.isnan(bud)):
        raise ValueError("budgets must not be NaN (use inf for an unlimited period)")
    if group_index is None:
        grp = np.full(P, -1, dtype=np.intp)
    else:
        grp = np.asarray(group_index)
        if grp.shape != (P,) or not np.issubdtype(grp.dtype, np.integer):
            raise ValueError(f"group_index must be integers of shape (P,) = ({P},), got shape {grp.shape}")
        if np.any(grp < -1):
            raise ValueError("group_index values must be >= -1 (-1 = no group)")
        grp = grp.astype(np.intp)
    G = int(grp.max()) + 1 if grp.size else 0
    if group_mandatory is None:
        mand = np.zeros(G, dtype=bool)
    else:
        mand = np.asarray(group_mandatory, dtype=bool)
        if mand.ndim != 1 or mand.size < G:
            raise ValueError(f"group_mandatory must have shape (G,) with G >= {G}, got shape {mand.shape}")
        G = mand.size
    if requires is None:
        req = np.zeros((0, 2), dtype=np.intp)
    else:
        req = np.asarray(requires)
        if req.size == 0:
            req = np.zeros((0, 2), dtype=np.intp)
        if req.ndim != 2 or req.shape[1] != 2 or not np.issubdtype(req.dtype, np.integer):
            raise ValueError(f"requires must be integer pairs of shape (R, 2), got shape {req.shape}")
        if np.any(req < 0) or np.any(req >= P):
            raise ValueError(f"requires indices must lie in [0, {P})")
        if np.any(req[:, 0] == req[:, 1]):
            raise ValueError("requires must not pair a project with itself")
        req = np.unique(req.astype(np.intp), axis=0)
    # prerequisites of each project as one sparse row each: memory grows with the count of pairs
    # (a project requiring 20,000 others is 20,000 entries, not P x 20,000 padded ones)
    prereq = sparse.csr_matrix((np.ones(req.shape[0], dtype=np.int8), (req[:, 0], req[:, 1])), shape=(P, P))
    prereq.sort_indices()
    forced = np.zeros(P, dtype=bool)
    if G:
        in_grp = grp >= 0
        forced[in_grp] = mand[grp[in_grp]]
    if req.size:
        forced[req[:, 1]] = True
    return RationingProblem(x, inv, cls, np.ascontiguousarray(bud), grp, mand, req, prereq, forced)


def prerequisite_pairs(prereq, projects):
    """The prerequisites of each of ``projects`` (n,) as pairs: (owner (T,), prerequisite (T,)),
    owner indexing ``projects``; T is the sum of their prerequisite counts."""
    ptr, idx = prereq.indptr, prereq.indices
    projects = np.asarray(projects, dtype=np.intp)
    counts = ptr[projects + 1] - ptr[projects]
    total = int(counts.sum())
    owner = np.repeat(np.arange(projects.size), counts)
    if total == 0:
        return owner, np.zeros(0, dtype=np.intp)
    start = np.repeat(ptr[projects] - (np.cumsum(counts) - counts), counts)
    return owner, idx[start + np.arange(total)]


def prerequisites_met(prereq, chosen, rows, projects):
    """Whether every prerequisite of ``projects[i]`` is chosen in ``chosen[rows[i]]`` (chosen (S', P)
    bool; rows, projects (n,)): work and memory in the count of prerequisites looked at."""
    owner, pre = prerequisite_pairs(prereq, projects)
    missing = ~chosen[np.asarray(rows)[owner], pre]
    return np.bincount(owner[missing], minlength=np.size(projects)) == 0


def problem_structure(prob):
    """Per-class constraint matrices: (A_ub, A_eq) sparse and the fixed row bounds."""
    P = prob.pw.shape[0]
    grp, mand, req = prob.group, prob.mandatory, prob.requires
    G = mand.size
    members = grp >= 0
    gmat = sparse.csr_matrix(
        (np.ones(members.sum()), (grp[members], np.flatnonzero(members))), shape=(G, P)
    )
    has_member = np.bincount(grp[members], minlength=G) > 0
    opt_rows = np.flatnonzero(~mand & has_member)
    man_rows = np.flatnonzero(mand)
    R = req.shape[0]
    rmat = sparse.csr_matrix(
        (np.r_[np.ones(R), -np.ones(R)], (np.r_[np.arange(R), np.arange(R)], np.r_[req[:, 0], req[:, 1]])),
        shape=(R, P),
    )
    rest_ub = sparse.vstack([gmat[opt_rows], rmat]).tocsr()
    rest_b = np.r_[np.ones(opt_rows.size), np.zeros(R)]
    a_eq = gmat[man_rows].tocsr()
    b_eq = np.ones(man_rows.size)
    a_ub = [sparse.vstack([sparse.csr_matrix(prob.inv[k]), rest_ub]).tocsr() for k in range(prob.inv.shape[0])]
    return a_ub, rest_b, a_eq, b_eq


def greedy_fill(prob, pw_sp, cls, budgets, start=None):
    """Profitability-index greedy for many scenarios at once.

    pw_sp (S', P), cls (S',), budgets (S', B), start (S', P) bool or None.
    Returns selected (S', P) bool, feasible (S',) bool.
    """
    Sn, P = pw_sp.shape
    inv = prob.inv  # (K, B, P)
    grp, mand, prereq = prob.group, prob.mandatory, prob.prereq
    G = mand.size
    tot = inv.sum(axis=1)[cls]  # (S', P) total outlay over the budget periods
    with np.errstate(divide="ignore", invalid="ignore"):
        pi = np.where(tot > 0, pw_sp / np.where(tot > 0, tot, 1.0), np.inf)
    pi = np.where(pw_sp > 0, pi, -np.inf)
    # sort by PI descending, then pw descending, then index (lexsort is stable)
    order = np.lexsort((-pw_sp, -pi), axis=-1) if Sn else np.zeros((0, P), dtype=np.intp)
    chosen = np.zeros((Sn, P), dtype=bool) if start is None else start.copy()
    gcol = np.where(grp >= 0, grp, G)  # column G = "no group", never marked taken
    taken = np.zeros((Sn, G + 1), dtype=bool)
    rows = np.arange(Sn)
    if start is not None and G:
        r, c = np.nonzero(chosen & (grp >= 0))
        taken[r, grp[c]] = True
        taken[:, G] = False
    inv_t = np.transpose(inv, (0, 2, 1))  # (K, P, B)
    used = np.zeros((Sn, inv.shape[1]))
    if start is not None:
        for k in np.unique(cls):
            m = cls == k
            used[m] = chosen[m].astype(float) @ inv[k].T
    slack = np.abs(budgets) * FEASIBILITY_TOL + FEASIBILITY_TOL
    feasible = np.ones(Sn, dtype=bool)
    # must-do first: every mandatory group still empty takes its fitting member with the
    # highest PI before the PI pass spends the budgets (common practice: commit to
    # obligatory projects, then rank the discretionary ones)
    for g in np.flatnonzero(mand):
        mem = np.flatnonzero(grp == g)
        need = ~taken[:, g]
        if not need.any():
            continue
        if mem.size == 0:
            feasible[:] = False
            continue
        r = np.flatnonzero(need)
        a = inv_t[cls[r][:, None], mem[None, :]]  # (r, m, B)
        fits = np.all(used[r][:, None, :] + a <= (budgets[r] + slack[r])[:, None, :], axis=2)
        pre_ok = prerequisites_met(prereq, chosen, np.repeat(r, mem.size),
                                   np.tile(mem, r.size)).reshape(r.size, mem.size)
        okm = fits & pre_ok
        tot_m = tot[r][:, mem]
        with np.errstate(divide="ignore", invalid="ignore"):
            score = np.where(tot_m > 0, pw_sp[r][:, mem] / np.where(tot_m > 0, tot_m, 1.0), np.inf)
        score = np.where(okm, score, -np.inf)
        best = np.argmax(score, axis=1)
        got = okm[np.arange(r.size), best]
        rr = r[got]
        jj = mem[best[got]]
        chosen[rr, jj] = True
        used[rr] += inv_t[cls[rr], jj]
        taken[rr, g] = True
        feasible[r[~got]] = False
    n_pos = int((pw_sp > 0).sum(axis=1).max()) if Sn else 0
    # position-major copies of the first n_pos positions: each step reads one contiguous row
    order_t = np.ascontiguousarray(order[:, :n_pos].T)                          # (n_pos, S')
    candidate_t = np.ascontiguousarray((np.take_along_axis(pi, order[:, :n_pos], axis=1) > -np.inf).T)
    has_pre = np.diff(prereq.indptr) > 0
    any_pre = bool(has_pre.any())
    cap = budgets + slack
    for k in range(n_pos):  # sequential by nature; vectorised over scenarios
        j = order_t[k]
        ok = candidate_t[k] & ~chosen[rows, j]
        a = inv_t[cls, j]  # (S', B)
        ok &= np.all(used + a <= cap, axis=1)
        ok &= ~taken[rows, gcol[j]]
        if any_pre:
            need = ok & has_pre[j]
            if need.any():
                ok[need] = prerequisites_met(prereq, chosen, rows[need], j[need])
        if not ok.any():
            continue
        r = rows[ok]
        chosen[r, j[ok]] = True
        used[r] += a[ok]
        taken[r, gcol[j[ok]]] = True
        taken[:, G] = False
    chosen[~feasible] = False
    return chosen, feasible


def greedy_selection(pw, investment, budgets, *, scenario_class=None, group_index=None,
                     group_mandatory=None, requires=None):
    """Profitability-index greedy portfolio in every scenario.

    Parameters
    ----------
    pw, investment, budgets, scenario_class, group_index, group_mandatory, requires
        As for :func:`ration_capital`.

    Returns
    -------
    selected : ndarray of bool, shape (S, P)
    objective : ndarray, shape (S,) [currency]
        NaN where the rule finds no feasible portfolio (all False then).

    Notes
    -----
    The rule, in each scenario:

    1. Must-do first: each mandatory group takes its member with the
       highest PI (pw <= 0 included) that fits the budgets and whose
       prerequisites are taken. If none fits, the greedy portfolio is
       infeasible: the selection is empty and its objective NaN.
    2. Candidates are the projects with pw > 0, sorted by
       PI = pw / (sum over budget periods of the project's outlay),
       highest first (ties: higher pw first, then lower index). A project
       with pw > 0 and total outlay <= 0 has PI = +inf and comes first.
    3. One pass in that order. A candidate is taken if its outlay fits the
       remaining budget of every period, no other member of its group is
       taken, and **every prerequisite has already been taken**.
       Prerequisites are never pulled in by a dependent, and a candidate
       skipped for any reason is not reconsidered.

    The pass is a loop over candidate positions, vectorised over scenarios.

    References
    ----------
    J. H. Lorie, L. J. Savage, "Three problems in rationing capital",
    Journal of Business 28(4), 1955, pp. 229-239 (ranking by
    profitability index and its failure with several budget periods).

    Examples
    --------
    >>> sel, obj = greedy_selection([[6.0], [5.0], [5.0]], [[4.0, 3.0, 3.0]], [6.0])
    >>> sel.tolist(), obj.tolist()
    ([[False, True, True]], [10.0])
    """
    prob = validate_problem(pw, investment, budgets, scenario_class, group_index, group_mandatory, requires)
    sel, ok = greedy_fill(prob, prob.pw.T, prob.cls, prob.budgets)
    obj = np.where(ok, np.einsum("sp,ps->s", sel.astype(float), prob.pw), np.nan)
    return sel, obj
