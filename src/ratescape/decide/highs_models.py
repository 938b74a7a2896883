"""Persistent HiGHS models for capital rationing: one LP relaxation and one 0-1 program per cost class.

Scenarios of one class share the constraint matrix and differ in the objective (each project's
present worth), the budgets and which projects may be chosen at all. The models are built once
and changed in place from one scenario to the next, so the LP relaxation restarts from the
previous scenario's optimal basis (a few simplex iterations instead of a solve from scratch), and
the 0-1 program starts from the best portfolio known (``setSolution``), which lets branch and
bound prune from its first node. ``scipy.optimize.milp`` runs the same solver but builds the
model anew on every call and takes no starting portfolio.

References
----------
Q. Huangfu, J. A. J. Hall, "Parallelizing the dual revised simplex method", Mathematical
Programming Computation 10(1), 2018, pp. 119-142 (HiGHS).
HiGHS documentation, "highspy" (Python interface: passModel, changeColsCost, setSolution, run).
"""
from __future__ import annotations

import time

import highspy
import numpy as np
from scipy import sparse

__all__ = ["HighsModels", "LP_OPTIMAL", "LP_INFEASIBLE", "LP_OTHER", "MIP_OPTIMAL", "MIP_LIMIT",
           "MIP_INFEASIBLE", "MIP_OTHER"]

LP_OPTIMAL, LP_INFEASIBLE, LP_OTHER = 0, 2, 4
MIP_OPTIMAL, MIP_LIMIT, MIP_INFEASIBLE, MIP_OTHER = 0, 1, 2, 4

_STATUS = highspy.HighsModelStatus


class HighsModels:
    """The LP and 0-1 models of every cost class of one rationing problem (built on first use).

    Parameters
    ----------
    a_ub : list of sparse matrices (rows, P)
        Per class: the B budget rows first, then the group (at most one) and requires rows.
    rest_b : ndarray
        Upper bounds of the rows after the budget rows.
    a_eq, b_eq : sparse matrix (E, P), ndarray (E,)
        Mandatory-group rows (sum == 1).
    budget_rows : int
        B, the number of budget rows at the top of every ``a_ub``.
    time_limit : float or None
        Seconds per 0-1 solve.
    """

    def __init__(self, a_ub, rest_b, a_eq, b_eq, budget_rows, time_limit=None):
        self.a_ub, self.rest_b, self.a_eq, self.b_eq = a_ub, np.asarray(rest_b, float), a_eq, np.asarray(b_eq, float)
        self.B = int(budget_rows)
        self.time_limit = time_limit
        self.P = a_ub[0].shape[1]
        self.cols = np.arange(self.P, dtype=np.int32)
        self.rows = np.arange(self.B, dtype=np.int32)
        self.models = {}

    def _build(self, k, integer):
        h = highspy.Highs()
        h.setOptionValue("output_flag", False)
        h.setOptionValue("presolve", "off")        # small models, changed in place: presolve costs more than it saves
        h.setOptionValue("threads", 1)
        if integer and self.time_limit is not None:
            h.setOptionValue("time_limit", float(self.time_limit))
        inf = highspy.kHighsInf
        a = sparse.vstack([self.a_ub[k], self.a_eq]).tocsc() if self.a_eq.shape[0] else self.a_ub[k].tocsc()
        n_ub = self.a_ub[k].shape[0]
        lp = highspy.HighsLp()
        lp.num_col_ = self.P
        lp.num_row_ = a.shape[0]
        lp.col_cost_ = np.zeros(self.P)
        lp.col_lower_ = np.zeros(self.P)
        lp.col_upper_ = np.ones(self.P)
        lp.row_lower_ = np.r_[np.full(n_ub, -inf), self.b_eq]
        lp.row_upper_ = np.r_[np.full(self.B, inf), self.rest_b, self.b_eq]
        lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
        lp.a_matrix_.start_ = a.indptr.astype(np.int32)
        lp.a_matrix_.index_ = a.indices.astype(np.int32)
        lp.a_matrix_.value_ = a.data.astype(float)
        if integer:
            lp.integrality_ = [highspy.HighsVarType.kInteger] * self.P
        h.passModel(lp)
        return h

    def _model(self, k, integer):
        key = (int(k), bool(integer))
        if key not in self.models:
            self.models[key] = self._build(k, integer)
        return self.models[key]

    def _set(self, h, pw, budget, lower, upper):
        h.changeColsCost(self.P, self.cols, -np.asarray(pw, dtype=float))
        h.changeColsBounds(self.P, self.cols, np.asarray(lower, dtype=float), np.asarray(upper, dtype=float))
        b = np.asarray(budget, dtype=float)
        h.changeRowsBounds(self.B, self.rows, np.full(self.B, -highspy.kHighsInf),
                           np.where(np.isfinite(b), b, highspy.kHighsInf))

    def lp(self, k, pw, budget, upper):
        """LP relaxation of max pw @ x: (status, bound U, x (P,), reduced costs d (P,), seconds).

        ``d`` is the cost, in worth, of moving each x_j off its bound in the LP (>= 0): from 0 up
        for a project at 0, from 1 down for a project at 1 (0 for basic ones)."""
        t0 = time.perf_counter()
        h = self._model(k, False)
        self._set(h, pw, budget, np.zeros(self.P), upper)
        h.run()
        status = h.getModelStatus()
        if status != _STATUS.kOptimal:
            code = LP_INFEASIBLE if status == _STATUS.kInfeasible else LP_OTHER
            h.clearSolver()                          # no stale basis carried into the next scenario
            return code, np.nan, None, None, time.perf_counter() - t0
        sol = h.getSolution()
        x = np.asarray(sol.col_value, dtype=float)
        dual = np.asarray(sol.col_dual, dtype=float)          # of min -pw @ x
        return LP_OPTIMAL, -h.getInfo().objective_function_value, x, np.abs(dual), time.perf_counter() - t0

    def mip(self, k, pw, budget, lower, upper, start, gap):
        """0-1 program max pw @ x from the portfolio ``start`` (or None), to relative gap ``gap``.

        Returns (status, x (P,) bool or None, proven bound on the optimum (max form), seconds)."""
        t0 = time.perf_counter()
        h = self._model(k, True)
        self._set(h, pw, budget, lower, upper)
        h.setOptionValue("mip_rel_gap", float(gap))
        if start is not None:
            sol = highspy.HighsSolution()
            sol.col_value = np.asarray(start, dtype=float).tolist()
            sol.value_valid = True
            h.setSolution(sol)
        h.run()
        status = h.getModelStatus()
        info = h.getInfo()
        bound = -info.mip_dual_bound if np.isfinite(info.mip_dual_bound) else np.inf
        x = None
        if info.primal_solution_status == highspy.SolutionStatus.kSolutionStatusFeasible:
            x = np.asarray(h.getSolution().col_value) > 0.5
        if status == _STATUS.kOptimal:
            code = MIP_OPTIMAL
        elif status == _STATUS.kInfeasible:
            code = MIP_INFEASIBLE
        elif status in (_STATUS.kTimeLimit, _STATUS.kIterationLimit, _STATUS.kSolutionLimit):
            code = MIP_LIMIT
        else:
            code = MIP_OTHER
        h.clearSolver()                              # each 0-1 solve starts from its own root
        return code, x, bound, time.perf_counter() - t0
