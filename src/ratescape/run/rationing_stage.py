"""Capital rationing of a run, at any portfolio size: blocks of scenarios streamed from the worth files.

Orchestration only (the mathematics is :mod:`ratescape.decide.rationing` and
:mod:`ratescape.decide.portfolio_stats`). Two steps:

1. :func:`ration_stage`, after the rank pass and before the run's final transaction: the
   scenarios are read from the run's worth files (:mod:`ratescape.store.worth_files`) in blocks
   of at most ``RATION_CELL_LIMIT`` project-scenario cells (the whole matrix at once when it fits),
   solved, and each block's ``portfolios``, ``selections`` and ``greedy_selections`` rows are
   committed in ONE transaction with its mark in ``run_ration_blocks``. An interrupted run resumed
   with ``--resume`` solves only the blocks not marked, and ends with exactly the rows an
   uninterrupted run would have (the blocks are the same fixed ranges of scenarios, and each
   scenario's answer depends only on its solver block, not on what was solved before).
2. :func:`ration_summary`, inside the run's final transaction: selection shares, the core
   portfolio and the min-max-regret portfolio, accumulated over the stored selections and the
   worth files one block at a time (no projects x scenarios matrix is held).

Before a run starts, :func:`check_rationing_fits` refuses a portfolio whose rationing would not
fit the machine's memory.
"""
from __future__ import annotations

import os
import time

import numpy as np
import pyarrow as pa

from ratescape.decide.portfolio_stats import PortfolioSet, RegretTally, SelectionTally
from ratescape.decide.rationing import STATUS_LABELS, ration_capital, solver_block_size
from ratescape.errors import RunError
from ratescape.evaluate.kernel import then_current_streams
from ratescape.run.progress import Progress, log
from ratescape.run.ranks import ensure_worth_files
from ratescape.run.read import chunk_amounts
from ratescape.run.plan import DUCKDB_MEMORY_LIMIT, utc_now
from ratescape.run.plan import available_memory as plan_available_memory  # None: unknown
from ratescape.run.write import arrow_labels
from ratescape.store.database import append_rows, fetch_frame, transaction

#: Largest (projects x scenarios) block of worths rationing reads at once (float64: 320 MB). A
#: portfolio within it is solved from one read; a larger one streams blocks of scenarios.
RATION_CELL_LIMIT = 40_000_000

#: DuckDB's memory limit while rationing runs (its buffers are released for the solver processes)
RATION_DUCKDB_MEMORY = "256MB"

#: Bytes per (scenario, project) cell that a solver block holds while it is solved (worths, the
#: greedy fills' orderings and ratios, LP solutions, selections: about twelve 8-byte arrays).
SOLVE_BYTES_PER_CELL = 96


def _insert(con, table: str, data: dict, run_id: str) -> None:
    if not data or len(next(iter(data.values()))) == 0:
        return

    def column(v):
        if isinstance(v, pa.Array):
            return v
        a = np.asarray(v) if not isinstance(v, list) else None
        if a is not None and a.dtype.kind == "f":
            return pa.array(a, mask=~np.isfinite(a))     # NaN / inf are stored as NULL, never silently
        return pa.array(v)

    append_rows(con, table, pa.table({k: column(v) for k, v in data.items()}), run_id)


def available_memory() -> int:
    """Bytes of memory available to a new allocation (:func:`ratescape.run.plan.available_memory`;
    unknown counts as plenty: the check then lets the run go ahead)."""
    have = plan_available_memory()
    return 1 << 62 if have is None else have


def _processes() -> int:
    return min(2, os.cpu_count() or 1)


def rationing_memory(P: int, S: int, read_scenarios: int, classes: int = 1, periods: int = 1) -> int:
    """Estimated peak bytes of rationing ``P`` projects x ``S`` scenarios read ``read_scenarios`` at a time."""
    solve = solver_block_size(P)
    read = 8 * read_scenarios * P * 3                       # the worth block, its copy, two selections
    solving = _processes() * SOLVE_BYTES_PER_CELL * solve * P
    candidates = 2 * S * (-(-P // 8)) + 8 * 4_000_000        # distinct optima as bits, one batch as floats
    outlays = 8 * classes * periods * P
    return read + solving + candidates + outlays


def read_block_scenarios(P: int, S: int, cell_limit: int | None = None) -> int:
    """Scenarios per read: all of them when S x P cells fit ``cell_limit``, else the largest
    multiple of the solver block that does (at least one solver block). It depends on the sizes
    only, so a resumed run splits the scenarios exactly as the interrupted one did."""
    limit = RATION_CELL_LIMIT if cell_limit is None else int(cell_limit)
    solve = solver_block_size(P)
    fit = limit // max(P, 1)
    if fit >= S:
        return S
    return max(solve, (fit // solve) * solve)


def check_rationing_fits(plan) -> None:
    """Refuse, before a run starts, budgets on a portfolio whose rationing cannot fit in memory."""
    if not plan.spec.budgets:
        return
    P, S = plan.project_count, plan.scenarios.size
    smallest = min(S, solver_block_size(P))
    need = rationing_memory(P, S, read_block_scenarios(P, S), periods=len(plan.spec.budgets))
    have = available_memory()
    if need > have:
        raise RunError(
            f"capital rationing of {P:,} projects x {S:,} scenarios needs about {need / 1e9:.1f} GB of memory "
            f"(blocks of {read_block_scenarios(P, S):,} scenarios read, {smallest} solved at a time), and "
            f"{have / 1e9:.1f} GB is available. Fix: free memory or use a machine with more, or screen without "
            "--budget (rationing is then not run)")


def budget_outlays(con, plan, reader=chunk_amounts):
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


def rationing_inputs(con, plan, reader=chunk_amounts) -> dict:
    """Everything but the worths: project ids, groups (a must-fund project is a mandatory group of
    one), "requires" pairs, outlays per class, each scenario's class, budget periods and amounts."""
    projects = fetch_frame(con, "SELECT project_key, project_id, group_name, requires, mandatory FROM projects "
                                "ORDER BY project_key")
    ids = np.asarray(projects["project_id"].to_list(), dtype=object)
    groups = projects["group_name"].to_list()
    marks = projects["mandatory"].to_list()
    group_names = sorted({g for g in groups if g})
    gi = {g: n for n, g in enumerate(group_names)}
    group_index = np.array([gi.get(g, -1) if g else -1 for g in groups], dtype=np.int64)
    mandatory = np.zeros(len(group_names), dtype=bool)
    for g, m in zip(groups, marks):
        if g and m:
            mandatory[gi[g]] = True
    must_fund = np.array([bool(m) and not g for g, m in zip(groups, marks)], dtype=bool)
    group_index[must_fund] = len(group_names) + np.arange(int(must_fund.sum()))
    mandatory = np.concatenate([mandatory, np.ones(int(must_fund.sum()), dtype=bool)])
    key_of = {pid: k for k, pid in enumerate(ids)}
    pairs = [(key_of[pid], key_of[t.strip()]) for pid, req in zip(ids, projects["requires"].to_list()) if req
             for t in req.split(";") if t.strip() in key_of]
    outlay, scenario_class, periods = budget_outlays(con, plan, reader)
    forced = [str(p) for p in ids[must_fund]] + [g for g, m in zip(group_names, mandatory) if m]
    return {"ids": ids, "group_index": group_index, "mandatory": mandatory, "forced": forced,
            "requires": np.array(pairs, dtype=np.int64).reshape(-1, 2), "outlay": outlay,
            "scenario_class": scenario_class, "periods": periods,
            "budgets": np.array([plan.spec.budgets[p] for p in periods], dtype=float)}


def _blocks(plan, cell_limit):
    S = plan.scenarios.size
    size = read_block_scenarios(plan.project_count, S, cell_limit)
    return [(a, min(S, a + size)) for a in range(0, S, size)], size


def ration_stage(con, plan, *, cell_limit: int | None = None, progress: bool = True) -> None:
    """Solve capital rationing for every scenario block not yet stored, committing block by block."""
    if not plan.spec.budgets:
        return
    P, S = plan.project_count, plan.scenarios.size
    blocks, size = _blocks(plan, cell_limit)
    stored = con.execute("SELECT block_index, first_scenario_id, last_scenario_id FROM run_ration_blocks "
                         "WHERE run_id = ?", [plan.run_id]).fetchall()
    for n, first, last in stored:
        if n >= len(blocks) or blocks[n] != (first, last + 1):
            raise RunError(f"run {plan.run_id} stored capital rationing in blocks of scenarios other than this "
                           "version of ratescape uses, so it cannot be resumed. Fix: start a new run with "
                           "`ratescape screen`")
    done = {n for n, _, _ in stored}
    todo = [n for n in range(len(blocks)) if n not in done]
    if not todo:
        return
    ensure_worth_files(con, plan)
    inputs = rationing_inputs(con, plan)
    K, B = inputs["outlay"].shape[:2]
    memory = rationing_memory(P, S, size, K, B)
    log(f"capital rationing: {P:,} projects x {S:,} scenarios in {len(blocks)} block(s) of up to {size:,} "
        f"scenarios read from the worth files ({len(todo)} to solve; about {memory / 1e9:.1f} GB of memory)")
    bar = Progress(sum(blocks[n][1] - blocks[n][0] for n in todo), "capital rationing", unit="scenario",
                   enabled=progress)
    started = time.perf_counter()
    # DuckDB's buffers (up to DUCKDB_MEMORY_LIMIT after the screen) would otherwise sit beside the
    # solver processes for the whole stage: a block's inserts need far less
    con.execute(f"SET memory_limit = '{RATION_DUCKDB_MEMORY}'")
    try:
        for n in todo:
            a, b = blocks[n]
            t0 = time.perf_counter()
            pw = plan.worth_files.read_block("pw", a, b).T              # (P, b), a view of the block
            res = ration_capital(pw, inputs["outlay"], inputs["budgets"],
                                 scenario_class=inputs["scenario_class"][a:b], group_index=inputs["group_index"],
                                 group_mandatory=inputs["mandatory"], requires=inputs["requires"],
                                 progress=bar.update)
            del pw
            _store_block(con, plan, n, a, b, res, inputs, time.perf_counter() - t0)
            del res
    finally:
        bar.close()
        try:
            con.execute(f"SET memory_limit = '{DUCKDB_MEMORY_LIMIT}'")
        except Exception:                        # noqa: BLE001 - never hides the error that ended the stage
            pass
    log(f"capital rationing: {sum(blocks[n][1] - blocks[n][0] for n in todo):,} scenarios solved in "
        f"{time.perf_counter() - started:.1f} s")


def _store_block(con, plan, n, a, b, res, inputs, seconds) -> None:
    """One block's portfolios, selections and greedy selections, and its mark, in ONE transaction."""
    ids, periods = inputs["ids"], inputs["periods"]
    used = np.asarray(res.budget_used)
    with transaction(con):
        _insert(con, "portfolios", {
            "scenario_id": np.arange(a, b, dtype=np.int32), "objective": np.asarray(res.objective, dtype=float),
            "lp_bound": np.asarray(res.lp_bound, dtype=float), "mip_gap": np.asarray(res.mip_gap, dtype=float),
            "greedy_objective": np.asarray(res.greedy_objective, dtype=float),
            "projects_selected": np.asarray(res.selected).sum(axis=1).astype(np.int32),
            "budget_used": ["; ".join(f"{p}={u:.6g}" for p, u in zip(periods, row)) for row in used],
            "status": [STATUS_LABELS[int(v)] for v in np.asarray(res.status)],
            "solve_seconds": np.asarray(res.solve_seconds, dtype=float)}, plan.run_id)
        for table, sel in (("selections", res.selected), ("greedy_selections", res.greedy_selected)):
            s_idx, p_idx = np.nonzero(np.asarray(sel))
            _insert(con, table, {"scenario_id": (a + s_idx).astype(np.int32),
                                 "project_id": arrow_labels(p_idx, ids)}, plan.run_id)
        con.execute("INSERT INTO run_ration_blocks VALUES (?, ?, ?, ?, ?, ?)",
                    [plan.run_id, n, a, b - 1, utc_now(), seconds])


def _stored_block(con, plan, a, b):
    """Selections (b - a, P) and objectives (b - a,) of scenarios [a, b) as stored."""
    P = plan.project_count
    got = con.execute("""SELECT s.scenario_id, k.project_key FROM selections s
                         JOIN run_projects k ON k.run_id = s.run_id AND k.project_id = s.project_id
                         WHERE s.run_id = ? AND s.scenario_id >= ? AND s.scenario_id < ?""",
                      [plan.run_id, a, b]).fetchnumpy()
    selected = np.zeros((b - a, P), dtype=bool)
    selected[np.asarray(got["scenario_id"], dtype=np.int64) - a, np.asarray(got["project_key"], dtype=np.int64)] = True
    rows = con.execute("SELECT scenario_id, objective FROM portfolios WHERE run_id = ? AND scenario_id >= ? "
                       "AND scenario_id < ? ORDER BY scenario_id", [plan.run_id, a, b]).fetchnumpy()
    objective = np.full(b - a, np.nan)
    values = rows["objective"]
    mask = np.ma.getmaskarray(values)
    objective[np.asarray(rows["scenario_id"], dtype=np.int64)[~mask] - a] = np.asarray(values)[~mask]
    return selected, objective


def ration_summary(con, plan, *, cell_limit: int | None = None, progress: bool = True) -> None:
    """Selection shares, core portfolio and min-max regret from the stored blocks (in the caller's
    transaction): ``portfolio_summary``, ``portfolio_regret``, ``project_summary`` shares, and a
    run note when mandatory projects do not fit some scenarios. ``progress``: the two passes over
    the blocks (selections, then worths for the regret) with the time left."""
    if not plan.spec.budgets:
        return
    P, S = plan.project_count, plan.scenarios.size
    blocks, _ = _blocks(plan, cell_limit)
    inputs = rationing_inputs(con, plan)
    ids = inputs["ids"]
    t0 = time.perf_counter()
    tally = SelectionTally(P, S, plan.weights)
    optima = PortfolioSet(P)
    objective = np.full(S, np.nan)
    bar = Progress(2 * len(blocks), "capital rationing summary", unit="block", enabled=progress)
    for a, b in blocks:
        sel, obj = _stored_block(con, plan, a, b)
        tally.add(sel)
        optima.add(sel, obj)
        objective[a:b] = obj
        bar.update()
    infeasible = con.execute("SELECT count(*) FROM portfolios WHERE run_id = ? AND status = 'infeasible'",
                             [plan.run_id]).fetchall()[0][0]
    if infeasible and inputs["mandatory"].any():
        message = (f"capital rationing: the must-fund projects and mandatory groups ({', '.join(inputs['forced'])}) "
                   f"do not fit the budgets in {infeasible} of {S} scenarios; those scenarios have status "
                   "'infeasible' and no portfolio. Fix: raise the budgets of the periods they spend in, or review "
                   "what is marked mandatory")
        log(message)
        con.execute("DELETE FROM run_notes WHERE run_id = ? AND topic = 'rationing'", [plan.run_id])
        _insert(con, "run_notes", {"topic": ["rationing"], "note": [message]}, plan.run_id)
    best = np.zeros(P, dtype=bool)
    regret = None
    if np.isfinite(objective).any():
        packed, counts = optima.portfolios()
        regrets = RegretTally(packed, counts, inputs["outlay"], n_projects=P)
        for a, b in blocks:
            pw = plan.worth_files.read_block("pw", a, b).T
            regrets.add(pw, objective[a:b], inputs["budgets"], inputs["scenario_class"][a:b])
            del pw
            bar.update()
        regret = regrets.result()
        if regret.best >= 0:
            best = np.asarray(regret.best_selected, dtype=bool)
    bar.close()
    threshold = float(plan.spec.decisions.get("core_share", 0.8))
    _insert(con, "portfolio_summary", {"project_id": ids.tolist(), "selected_share": tally.share(),
                                       "selected_probability": tally.probability(), "in_core": tally.core(threshold),
                                       "in_min_max_regret": best}, plan.run_id)
    K = 0 if regret is None else len(regret.max_regret)
    if K:
        _insert(con, "portfolio_regret", {
            "candidate": np.arange(K, dtype=np.int32), "max_regret": np.asarray(regret.max_regret, dtype=float),
            "mean_regret": np.asarray(regret.mean_regret, dtype=float),
            "scenarios_optimal": np.asarray(regret.optimal_in).astype(np.int32),
            "chosen": np.arange(K) == regret.best}, plan.run_id)
    con.execute("""UPDATE project_summary AS s SET selected_share = ps.selected_share,
                   selected_probability = ps.selected_probability
                   FROM portfolio_summary ps WHERE ps.run_id = s.run_id AND ps.project_id = s.project_id
                   AND s.run_id = ?""", [plan.run_id])
    log(f"capital rationing: shares, core portfolio and regret over {K:,} distinct optima in "
        f"{time.perf_counter() - t0:.1f} s")
