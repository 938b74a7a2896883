"""Decision stage of a run (after every chunk is stored, inside the run's final transaction).

Orchestration only: reads what it needs from DuckDB, calls the pure functions
of :mod:`ratescape.decide`, and writes

* ``group_decisions``: the preferred alternative of every group in every scenario, its
  runner-up and margin (an implicit "do nothing" competes unless the group is mandatory);
* ``frontiers``: the indifference frontier of every group on the plane of the discount axis
  and inflation (other axes at their base values), root-found, not a staircase;
* with budgets: ``portfolios``, ``selections``, ``greedy_selections``, ``portfolio_summary``
  and ``portfolio_regret`` (capital rationing in every scenario as a 0-1 program);
* selection shares and weighted probabilities in ``project_summary``.
"""
from __future__ import annotations

import time

import numpy as np
import pyarrow as pa

from ratescape.decide.alternatives import (
    DO_NOTHING,
    NO_ALTERNATIVE,
    preferred_alternative,
)
from ratescape.decide.frontier import indifference_frontier
from ratescape.decide.portfolio_stats import core_portfolio, min_max_regret, selection_share
from ratescape.decide.rationing import STATUS_LABELS, ration_capital
from ratescape.evaluate.kernel import (
    discount_tensor,
    present_worth_classes,
    then_current_streams,
)
from ratescape.run.progress import log
from ratescape.run.ranks import result_block
from ratescape.run.read import chunk_amounts
from ratescape.store.database import append_rows, fetch_frame

DO_NOTHING_LABEL = "do nothing"
# Largest projects x scenarios cube the decision stage holds in memory (float64: 8 bytes a cell).
CUBE_CELL_LIMIT = 40_000_000
FRONTIER_KINDS = {0: "edge", 1: "transversal", 2: "triple"}


def _insert(con, table: str, data: dict, run_id: str) -> None:
    if not data or len(next(iter(data.values()))) == 0:
        return

    def column(v):
        a = np.asarray(v) if not isinstance(v, list) else None
        if a is not None and a.dtype.kind == "f":
            return pa.array(a, mask=~np.isfinite(a))     # NaN / inf are stored as NULL, never silently
        return pa.array(v)

    append_rows(con, table, pa.table({k: column(v) for k, v in data.items()}), run_id)


def _projects(con):
    return fetch_frame(con, "SELECT project_key, project_id, group_name, requires, mandatory FROM projects ORDER BY project_key")


def _pw_cube(con, plan, column: str = "present_worth") -> np.ndarray | None:
    """(P, S) matrix of a results column, projects in project_key order (stored or recomputed)."""
    block = result_block(con, plan, 0, plan.scenarios.size)
    return None if block is None else block[column]


def decide_run(con, plan) -> None:
    """Run every decision analysis the portfolio and settings call for."""
    projects = _projects(con)
    groups = _group_members(projects)
    if groups:
        _decide_groups(con, plan, groups, chunk_amounts)
    if not plan.spec.budgets:
        return
    cells = plan.project_count * plan.scenarios.size
    pw = _pw_cube(con, plan) if cells <= CUBE_CELL_LIMIT else None
    if pw is None:
        log(f"decision stage: {cells:,} project-scenario cells are more than capital rationing holds in memory "
            f"({CUBE_CELL_LIMIT:,}); rationing is skipped for this run")
        return
    _ration(con, plan, projects, pw, chunk_amounts)


def _group_members(projects) -> dict:
    out = {}
    for key, pid, group, _req, mandatory in projects.iter_rows():
        if group:
            g = out.setdefault(group, {"keys": [], "ids": [], "mandatory": False})
            g["keys"].append(key)
            g["ids"].append(pid)
            g["mandatory"] = g["mandatory"] or bool(mandatory)
    return out


def _member_amounts(con, plan, keys, reader) -> np.ndarray:
    """Amounts (C, A, T) of a group's members (summed over roles)."""
    parts = [reader(con, plan, k, k + 1)[0].sum(axis=0) for k in keys]
    return np.concatenate(parts, axis=1)


def _planes(plan) -> list[dict]:
    """Decision-map planes: the discount axis against inflation and against each extra axis.

    Each plane holds the other axes at their base values; returns the y axis name and values, the
    (S,) mask of its scenarios (ordered y-major, x-minor as scenario ids are) and how a point's
    y value enters the evaluation.
    """
    cols = plan.scenarios.columns
    spec = plan.spec
    base = plan.scenarios.base_index
    axes = [("inflation", np.asarray(spec.inflation, dtype=float))]
    axes += [(a.name, np.asarray(a.values, dtype=float)) for a in spec.extra_axes]
    planes = []
    for y_name, y_values in axes:
        if y_values.size < 2:
            continue
        mask = np.ones(plan.scenarios.size, dtype=bool)
        for other, _ in axes:
            if other != y_name:
                mask &= cols[other] == cols[other][base]
        planes.append({"y_axis": y_name, "y": y_values, "mask": mask})
    return planes


def _point_evaluator(plan, y_axis: str):
    """worth(A (C, A, T), x (n,), y (n,)) -> (A, n): exact worth at points of a decision-map plane."""
    cols = plan.scenarios.columns
    base = plan.scenarios.base_index
    f_base = float(cols["inflation"][base])
    x_is_nominal = plan.spec.discount_basis == "nominal"

    def worth(A, x, y):
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        f = y if y_axis == "inflation" else np.full(x.size, f_base)
        i = x if x_is_nominal else (1 + x) * (1 + f) - 1
        mult = {k: np.full(x.size, v) for k, v in plan.base_multipliers.items()}
        if y_axis == "tax_rate":
            mult["tax"] = y if plan.spec.after_tax else np.zeros(x.size)
            mult["after_tax"] = 1 - mult["tax"]
        elif y_axis in ("cost_multiplier", "benefit_multiplier"):
            mult[y_axis] = y
        return present_worth_classes(A, discount_tensor(plan.classes, plan.exponents, i, f, mult))
    return worth


def _decide_groups(con, plan, groups: dict, reader) -> None:
    S = plan.scenarios.size
    spec = plan.spec
    x_name = "discount_rate" if spec.discount_basis == "nominal" else "real_rate"
    x_axis = np.asarray(spec.discount_rates, dtype=float)
    planes = _planes(plan) if x_axis.size >= 2 else []
    evaluators = {p["y_axis"]: _point_evaluator(plan, p["y_axis"]) for p in planes}
    rows = {k: [] for k in ("group_name", "scenario_id", "preferred", "runner_up", "margin", "preferred_worth")}
    fr = {k: [] for k in ("group_name", "alternative_a", "alternative_b", "x_axis", "x", "y_axis", "y", "segment",
                          "point", "kind", "residual", "converged")}
    for name, g in sorted(groups.items()):
        A = _member_amounts(con, plan, g["keys"], reader)                 # (C, A, T)
        pw = present_worth_classes(A, plan.tensor)                        # (A, S)
        optional = not g["mandatory"]
        pref = preferred_alternative(pw, do_nothing=optional)
        n_alt = len(g["ids"])
        labels = np.array(g["ids"] + [DO_NOTHING_LABEL, ""], dtype=object)   # index -1 -> do nothing, -2 -> none

        def label(index):
            index = np.asarray(index)
            return labels[np.where(index == DO_NOTHING, n_alt, np.where(index == NO_ALTERNATIVE, n_alt + 1, index))]

        best = np.asarray(pref.best)
        rows["group_name"] += [name] * S
        rows["scenario_id"] += list(range(S))
        rows["preferred"] += label(best).tolist()
        rows["runner_up"] += label(pref.runner_up).tolist()
        rows["margin"] += np.asarray(pref.margin, dtype=float).tolist()
        rows["preferred_worth"] += np.where(best >= 0, pw[np.clip(best, 0, None), np.arange(S)], 0.0).tolist()
        names = list(g["ids"]) + ([DO_NOTHING_LABEL] if optional else [])
        for plane in planes:   # a decision map per plane; other axes at their base values
            y_values = plane["y"]
            grid_pw = pw[:, plane["mask"]].reshape(n_alt, y_values.size, x_axis.size)
            if optional:
                grid_pw = np.concatenate([grid_pw, np.zeros((1,) + grid_pw.shape[1:])])

            def worth_at(x, y, A=A, evaluate=evaluators[plane["y_axis"]]):
                w = evaluate(A, x, y)
                return np.concatenate([w, np.zeros((1, w.shape[1]))]) if optional else w

            front = indifference_frontier(x_axis, y_values, grid_pw, worth_at, densify=2)
            n = len(front)
            if n == 0:
                continue
            fr["group_name"] += [name] * n
            fr["alternative_a"] += [names[k] for k in np.asarray(front.alternative_a)]
            fr["alternative_b"] += [names[k] for k in np.asarray(front.alternative_b)]
            fr["x_axis"] += [x_name] * n
            fr["y_axis"] += [plane["y_axis"]] * n
            fr["x"] += np.asarray(front.x, dtype=float).tolist()
            fr["y"] += np.asarray(front.y, dtype=float).tolist()
            fr["segment"] += np.asarray(front.segment, dtype=np.int32).tolist()
            fr["point"] += np.asarray(front.point, dtype=np.int32).tolist()
            fr["kind"] += [FRONTIER_KINDS.get(int(k), str(k)) for k in np.asarray(front.kind)]
            fr["residual"] += np.asarray(front.residual, dtype=float).tolist()
            fr["converged"] += np.asarray(front.converged, dtype=bool).tolist()
    _insert(con, "group_decisions", rows, plan.run_id)
    _insert(con, "frontiers", fr, plan.run_id)


def _budget_outlays(con, plan, reader):
    """Investment outlays (K, B, P) in then-current money per scenario class, and each scenario's class.

    Classes are the distinct (inflation, cost multiplier) pairs: outlays of real investment
    lines grow with inflation and escalation; nominal ones are fixed.
    """
    cols = plan.scenarios.columns
    periods = sorted(plan.spec.budgets)
    cm = cols.get("cost_multiplier", np.ones(plan.scenarios.size))
    pairs = np.stack([cols["inflation"], cm], axis=1)
    uniq, scenario_class = np.unique(pairs, axis=0, return_inverse=True)
    P = plan.project_count
    outlay = np.zeros((len(uniq), len(periods), P))
    T = plan.n_periods
    for first in range(0, P, plan.chunk_size):
        stop = min(first + plan.chunk_size, P)
        A = reader(con, plan, first, stop)[0][0]                           # investment role (C, p, T)
        mult = {name: np.ones(len(uniq)) for name in plan.base_multipliers}   # cost multiplier applied below
        streams = then_current_streams(A, plan.classes, plan.exponents, uniq[:, 0], mult)   # (K, p, T)
        streams = streams * uniq[:, 1][:, None, None]
        for b, period in enumerate(periods):
            if period < T:
                outlay[:, b, first:stop] = -streams[:, :, period]
    return np.clip(outlay, 0.0, None), scenario_class.ravel(), periods


def _ration(con, plan, projects, pw: np.ndarray, reader) -> None:
    ids = np.asarray(projects["project_id"].to_list(), dtype=object)
    P = len(ids)
    group_names = sorted({g for g in projects["group_name"].to_list() if g})
    gi = {g: n for n, g in enumerate(group_names)}
    group_index = np.array([gi.get(g, -1) if g else -1 for g in projects["group_name"].to_list()], dtype=np.int64)
    mandatory = np.zeros(len(group_names), dtype=bool)
    for g, m in zip(projects["group_name"].to_list(), projects["mandatory"].to_list()):
        if g and m:
            mandatory[gi[g]] = True
    key_of = {pid: k for k, pid in enumerate(ids)}
    pairs = [(key_of[pid], key_of[t.strip()]) for pid, req in zip(ids, projects["requires"].to_list()) if req
             for t in req.split(";") if t.strip() in key_of]
    requires = np.array(pairs, dtype=np.int64).reshape(-1, 2)
    outlay, scenario_class, periods = _budget_outlays(con, plan, reader)
    budgets = np.array([plan.spec.budgets[p] for p in periods], dtype=float)
    t0 = time.perf_counter()
    res = ration_capital(pw, outlay, budgets, scenario_class=scenario_class, group_index=group_index,
                         group_mandatory=mandatory, requires=requires)
    log(f"capital rationing: {plan.scenarios.size} scenarios x {P} projects solved in {time.perf_counter() - t0:.1f} s")
    S = plan.scenarios.size
    status_names = STATUS_LABELS
    used = np.asarray(res.budget_used)
    _insert(con, "portfolios", {
        "scenario_id": np.arange(S, dtype=np.int32), "objective": np.asarray(res.objective, dtype=float),
        "lp_bound": np.asarray(res.lp_bound, dtype=float), "mip_gap": np.asarray(res.mip_gap, dtype=float),
        "greedy_objective": np.asarray(res.greedy_objective, dtype=float),
        "projects_selected": np.asarray(res.selected).sum(axis=1).astype(np.int32),
        "budget_used": ["; ".join(f"{p}={u:.6g}" for p, u in zip(periods, row)) for row in used],
        "status": [status_names[int(v)] for v in np.asarray(res.status)],
        "solve_seconds": np.asarray(res.solve_seconds, dtype=float)}, plan.run_id)
    for table, sel in (("selections", res.selected), ("greedy_selections", res.greedy_selected)):
        s_idx, p_idx = np.nonzero(np.asarray(sel))
        _insert(con, table, {"scenario_id": s_idx.astype(np.int32), "project_id": ids[p_idx].tolist()}, plan.run_id)
    threshold = float(plan.spec.decisions.get("core_share", 0.8))
    share = np.asarray(selection_share(res.selected), dtype=float)
    prob = np.asarray(selection_share(res.selected, plan.weights), dtype=float)
    core = np.asarray(core_portfolio(res.selected, threshold), dtype=bool)
    regret = min_max_regret(pw, res.selected, res.objective, outlay, budgets, scenario_class=scenario_class)
    best = np.asarray(regret.best_selected, dtype=bool) if regret.best >= 0 else np.zeros(P, dtype=bool)
    _insert(con, "portfolio_summary", {"project_id": ids.tolist(), "selected_share": share,
                                       "selected_probability": prob, "in_core": core, "in_min_max_regret": best},
            plan.run_id)
    K = len(regret.portfolios)
    _insert(con, "portfolio_regret", {
        "candidate": np.arange(K, dtype=np.int32), "max_regret": np.asarray(regret.max_regret, dtype=float),
        "mean_regret": np.where(np.asarray(regret.feasible), np.asarray(regret.regret), np.nan).mean(axis=1)
        if K else np.zeros(0), "scenarios_optimal": np.asarray(regret.optimal_in).astype(np.int32),
        "chosen": np.arange(K) == regret.best}, plan.run_id)
    con.execute("""UPDATE project_summary AS s SET selected_share = ps.selected_share,
                   selected_probability = ps.selected_probability
                   FROM portfolio_summary ps WHERE ps.run_id = s.run_id AND ps.project_id = s.project_id
                   AND s.run_id = ?""", [plan.run_id])
