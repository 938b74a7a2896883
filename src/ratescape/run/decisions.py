"""Decision stage of a run (after every chunk is stored).

Orchestration only: reads what it needs from DuckDB, calls the pure functions
of :mod:`ratescape.decide`, and writes

* :func:`decide_groups`, before the run's final transaction, committed a batch of whole groups
  at a time (a resumed run deletes the run's rows and decides every group again):
  ``group_decisions``, the preferred alternative of every group in every scenario, its
  runner-up and margin (an implicit "do nothing" competes unless the group is mandatory), and
  ``frontiers``, the indifference frontier of every group on the plane of the discount axis
  and inflation (other axes at their base values), root-found, not a staircase;
* :func:`decide_run`, inside the run's final transaction, with budgets: ``portfolio_summary``
  and ``portfolio_regret`` and the selection shares and weighted probabilities in
  ``project_summary`` (capital rationing itself, ``portfolios``, ``selections`` and
  ``greedy_selections``, was stored block by block before, by
  :func:`ratescape.run.rationing_stage.ration_stage`).
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
from ratescape.decide.equal_service import (
    annual_worth,
    cut_at_study_period,
    lives_differ,
    straight_line_terminal_value,
)
from ratescape.decide.frontier import indifference_frontier
from ratescape.errors import RunError
from ratescape.evaluate.kernel import (
    LineClass,
    discount_tensor,
    present_worth_classes,
)
from ratescape.evaluate.tax import carry_forward_adjustment
from ratescape.run.evaluation import carries_losses
from ratescape.run.plan import AFTER_TAX_CLASSES, multiplier_for, scenario_multipliers
from ratescape.run.progress import Progress, log
from ratescape.run.rationing_stage import ration_summary
from ratescape.run.read import chunk_amounts
from ratescape.store.database import append_rows, fetch_frame, transaction

DO_NOTHING_LABEL = "do nothing"
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


BASIS_WORDS = {
    "annual-worth": "equivalent annual worth, PW x (A/P, real rate, own life N), in base-year money per year "
                    "(the repeatability assumption: each alternative is taken as repeated with the same "
                    "base-year cash flows until the lives end together)",
    "study-period": "present worth over a study period of {T} periods: each alternative's cash flows are cut at "
                    "period {T} and its terminal value put in their place there (the value given in the projects "
                    "file's terminal_value column, or else the straight-line unrecovered investment "
                    "I - (I - S) x T / N)",
    "present-worth": "present worth over each alternative's own life",
}


def _horizons_by_group(con) -> dict:
    """group -> [(project id, horizon in periods)], the horizon being the last period with a non-zero flow."""
    rows = con.execute("""
        SELECT p.group_name, p.project_id,
               greatest(coalesce(max(cf.period) FILTER (WHERE cf.amount <> 0), 1), 1) AS horizon
        FROM projects p LEFT JOIN cash_flows cf USING (project_id)
        WHERE p.group_name <> '' GROUP BY ALL ORDER BY p.group_name, min(p.project_key)""").fetchall()
    out: dict = {}
    for group, pid, horizon in rows:
        out.setdefault(group, []).append((pid, int(horizon)))
    return out


def check_alternatives(con, spec) -> None:
    """Refuse, before a run is written, a study period longer than an alternative's life.

    Under the study-period basis a group whose lives differ is compared over ``study_period``
    periods; an alternative that ends before then would leave part of the study period without
    service, and ratescape does not assume how that service continues (repeating it, leasing,
    contracting out): the run is refused with a message naming the group and the lives.
    """
    if spec.alternatives_basis != "study-period" or spec.study_period is None:
        return
    T = int(spec.study_period)
    for group, members in sorted(_horizons_by_group(con).items()):
        lives = [h for _, h in members]
        if not lives_differ(lives):
            continue
        short = [(pid, h) for pid, h in members if h < T]
        if short:
            pid, h = short[0]
            raise RunError(
                f"{spec.sources.get('alternatives_study_period', '--study-period')}: the study period of {T} periods "
                f"is longer than the life of alternative {pid!r} of group {group!r} ({h} periods; the group's lives "
                f"are {', '.join(f'{p}={n}' for p, n in members)}). ratescape does not assume how its service "
                f"continues after its life. Fix: give a study period of at most {min(lives)} periods (the shortest "
                "life in the group), extend the alternative's cash flows to the study period (e.g. with its "
                "replacement), or compare by annual worth (--alternatives-basis annual-worth, the repeatability "
                "assumption)")


def decide_groups(con, plan, *, progress: bool = True) -> None:
    """Decisions and frontiers of every group of alternatives (outside any transaction: each batch
    of whole groups is committed, so that memory stays bounded; the run is marked done later).
    ``progress``: a bar, or off a terminal a line every 10 s, with the time left."""
    projects = _projects(con)
    groups = _group_members(projects)
    if groups:
        t0 = time.perf_counter()
        bar = Progress(len(groups), "alternatives", unit="group", enabled=progress)
        try:
            _decide_groups(con, plan, groups, chunk_amounts, bar.update)
        finally:
            bar.close()
        log(f"alternatives: {len(groups):,} groups decided over {plan.scenarios.size:,} scenarios in "
            f"{time.perf_counter() - t0:.1f} s")


def decide_run(con, plan, *, progress: bool = True) -> None:
    """The rationing summary (inside the run's final transaction; capital rationing itself was
    solved and stored block by block before it, by :func:`ratescape.run.rationing_stage.ration_stage`,
    and the groups decided by :func:`decide_groups`)."""
    if plan.spec.budgets:
        ration_summary(con, plan, progress=progress)


def _group_members(projects) -> dict:
    out = {}
    for key, pid, group, _req, mandatory in projects.iter_rows():
        if group:
            g = out.setdefault(group, {"keys": [], "ids": [], "mandatory": False})
            g["keys"].append(key)
            g["ids"].append(pid)
            g["mandatory"] = g["mandatory"] or bool(mandatory)
    return out


class _MemberAmounts:
    """The amounts of every group member, read once in blocks of ``plan.chunk_size`` consecutive
    project keys (one query per block that holds a member, not one per member: 10,000 members of
    a 100,000-project portfolio are a few dozen queries instead of 10,000). Kept per member: its
    amounts summed over roles (C, T), its investment lines summed over classes (T,), its horizon."""

    def __init__(self, con, plan, keys, reader):
        keys = np.unique(np.asarray(list(keys), dtype=np.int64))
        self.rows: dict[int, tuple] = {}
        size = max(int(plan.chunk_size), 1)
        for block in np.unique(keys // size):
            first = int(block) * size
            stop = min(first + size, plan.project_count)
            A_by_role, _, horizon = reader(con, plan, first, stop)
            mine = keys[(keys >= first) & (keys < stop)]
            j = mine - first
            total = A_by_role.sum(axis=0)[:, j, :]                      # (C, m, T): members only
            invest = A_by_role[0].sum(axis=0)[j]                        # (m, T)
            for n, key in enumerate(mine.tolist()):
                self.rows[key] = (total[:, n, :], invest[n], int(np.asarray(horizon)[j[n]]))

    def of(self, keys) -> tuple:
        """Amounts (C, A, T) of these members (summed over roles), their investment lines (A, T)
        summed over classes, and their horizons (A,) in periods."""
        parts = [self.rows[int(k)] for k in keys]
        return (np.stack([p[0] for p in parts], axis=1), np.stack([p[1] for p in parts]),
                np.array([p[2] for p in parts], dtype=np.int64))


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


def _point_evaluator(plan, y_axis: str, classes=None, years=None):
    """worth(A (C, A, T), x (n,), y (n,)) -> (A, n): exact worth at points of a decision-map plane.

    ``classes`` (default: the plan's line classes) match the amounts' class axis; with ``years``
    (A,) the worth is the equivalent annual worth over those lives at the point's real rate."""
    classes = plan.classes if classes is None else classes
    cols = plan.scenarios.columns
    base = plan.scenarios.base_index
    f_base = float(cols["inflation"][base])
    x_is_nominal = plan.spec.discount_basis == "nominal"
    carried = carries_losses(plan)

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
            if y_axis == "cost_multiplier":
                mult["asset_cost"] = y          # the assets' depreciation and credits scale with their cost
        w = present_worth_classes(A, discount_tensor(classes, plan.exponents, i, f, mult))
        if carried:                     # the grid's worths carry each alternative's losses forward too
            w = w + carry_forward_adjustment(A, classes, plan.exponents, i, f, mult).T
        return w if years is None else annual_worth(w, years, (1.0 + i) / (1.0 + f) - 1.0)
    return worth


def _group_extras(con, plan) -> dict:
    """project id -> (terminal value or None, salvage, cost-only) for the members of groups."""
    rows = con.execute("""
        SELECT p.project_id, p.terminal_value,
               coalesce(p.salvage, (SELECT sum(amount) FROM cash_flows c WHERE c.project_id = p.project_id
                                    AND c.kind = 'salvage'), 0) AS salvage,
               coalesce(starts_with(s.measure_status, 'cost-only'), false) AS cost_only
        FROM projects p LEFT JOIN project_summary s ON s.run_id = ? AND s.project_id = p.project_id
        WHERE p.group_name <> ''""", [plan.run_id]).fetchall()
    return {pid: (tv, float(salvage), bool(cost_only)) for pid, tv, salvage, cost_only in rows}


def _study_period_group(plan, A, invest, horizon, extras):
    """Amounts cut at the study period with a terminal-value class appended, and that class.

    Terminal value of an alternative whose life N exceeds T: its ``terminal_value`` if given,
    else the straight-line unrecovered investment I - (I - S) T / N (I: its investment lines up
    to T, S: its salvage), in base-year money at period T (a real line without escalation, taxed
    like salvage after tax). After tax the depreciation shield and loan lines after T are moved
    to T (disposal at T writes the remaining tax book value off; the loan is paid off).
    """
    T = int(plan.spec.study_period)
    collapse = np.array([(c.basis, c.escalation, c.multiplier) in AFTER_TAX_CLASSES
                         for c in plan.classes])
    cut = cut_at_study_period(A, T, collapse)
    first_cost = -invest[:, :T + 1].sum(axis=1)
    salvage = np.array([e[1] for e in extras])
    given = np.array([np.nan if e[0] is None else float(e[0]) for e in extras])
    default = straight_line_terminal_value(first_cost, salvage, horizon, T)
    terminal = np.where(horizon > T, np.where(np.isnan(given), default, given), 0.0)
    axes = {a.name for a in plan.spec.extra_axes}
    tv_class = LineClass("real", 0.0, multiplier_for("salvage", axes, plan.spec.after_tax))
    row = np.zeros((1,) + cut.shape[1:])
    row[0, :, T] = terminal
    return np.concatenate([cut, row]), tv_class, terminal


def _group_measure(plan, A, invest, horizon, extras, basis, tv_tensor):
    """The decision measure (A, S) of a group, the amounts and classes the frontier evaluates, the
    annual-worth lives (or None) and the terminal values (or None)."""
    def carried(amounts, classes):
        """(A, S) worth of each alternative's losses carried forward (zero unless the run carries them),
        so that the group decides on the worths the results table holds."""
        if not carries_losses(plan):
            return 0.0
        cols = plan.scenarios.columns
        return carry_forward_adjustment(amounts, classes, plan.exponents, cols["discount_rate"], cols["inflation"],
                                        scenario_multipliers(plan.scenarios, True)).T

    if basis == "study-period":
        A2, tv_class, terminal = _study_period_group(plan, A, invest, horizon, extras)
        tensor = np.concatenate([plan.tensor, tv_tensor()])
        classes = plan.classes + [tv_class]
        return present_worth_classes(A2, tensor) + carried(A2, classes), A2, classes, None, terminal
    pw = present_worth_classes(A, plan.tensor) + carried(A, plan.classes)   # (A, S)
    if basis == "annual-worth":
        years = horizon / float(plan.spec.periods_per_year)
        return annual_worth(pw, years, plan.scenarios.columns["real_rate"]), A, plan.classes, years, None
    return pw, A, plan.classes, None, None


#: group-decision rows gathered before they are committed (with the batch's frontier points): a
#: row held as Python objects takes a few hundred bytes, 3,333 groups x 2,601 scenarios are 8.7
#: million rows, and DuckDB holds the Arrow batches of a transaction until it ends (measured: about
#: 80 bytes a row), so they are neither gathered whole nor kept in one transaction
GROUP_ROWS_PER_INSERT = 250_000


def _decide_groups(con, plan, groups: dict, reader, done=lambda n: None) -> None:
    S = plan.scenarios.size
    spec = plan.spec
    x_name = "discount_rate" if spec.discount_basis == "nominal" else "real_rate"
    x_axis = np.asarray(spec.discount_rates, dtype=float)
    planes = _planes(plan) if x_axis.size >= 2 else []
    cols = plan.scenarios.columns
    extras_of = _group_extras(con, plan)
    tv_cache: list = []

    def tv_tensor():
        if not tv_cache:
            axes = {a.name for a in spec.extra_axes}
            cls = LineClass("real", 0.0, multiplier_for("salvage", axes, spec.after_tax))
            tv_cache.append(discount_tensor([cls], plan.exponents, cols["discount_rate"], cols["inflation"],
                                            scenario_multipliers(plan.scenarios, spec.after_tax)))
        return tv_cache[0]

    rows = {k: [] for k in ("group_name", "scenario_id", "preferred", "runner_up", "margin", "preferred_worth",
                            "basis", "least_cost")}
    fr = {k: [] for k in ("group_name", "alternative_a", "alternative_b", "x_axis", "x", "y_axis", "y", "segment",
                          "point", "kind", "residual", "converged")}
    statements: list[str] = []
    members = _MemberAmounts(con, plan, [k for g in groups.values() for k in g["keys"]], reader)
    with transaction(con):           # a resumed run decides every group again
        con.execute("DELETE FROM group_decisions WHERE run_id = ?", [plan.run_id])
        con.execute("DELETE FROM frontiers WHERE run_id = ?", [plan.run_id])

    def commit(rows, fr, note: str | None = None) -> None:
        with transaction(con):
            _insert(con, "group_decisions", rows, plan.run_id)
            _insert(con, "frontiers", fr, plan.run_id)
            if note is not None:   # one note per run and topic: a resumed run replaces its note
                con.execute("DELETE FROM run_notes WHERE run_id = ? AND topic = 'alternatives'", [plan.run_id])
                _insert(con, "run_notes", {"topic": ["alternatives"], "note": [note]}, plan.run_id)

    for name, g in sorted(groups.items()):
        A, invest, horizon = members.of(g["keys"])                           # (C, A, T), (A, T), (A,)
        extras = [extras_of.get(pid, (None, 0.0, False)) for pid in g["ids"]]
        differ = lives_differ(horizon)
        basis = spec.alternatives_basis if differ else "present-worth"
        measure, A_eval, classes, years, terminal = _group_measure(plan, A, invest, horizon, extras, basis, tv_tensor)
        least_cost = all(e[2] for e in extras)
        lives = ", ".join(f"{pid} {int(n)}" for pid, n in zip(g["ids"], horizon))
        statements.append(_group_statement(name, basis, differ, least_cost, g["mandatory"], lives, terminal, g["ids"]))
        if differ and basis == "present-worth":
            log(f"alternatives: group {name!r} has different lives ({lives} periods) and is compared by present "
                "worth over its own lives, as asked; that favours the alternative serving longer or shorter, "
                "not the better one (compare by annual worth or over a study period)")
        optional = not (g["mandatory"] or least_cost)
        pref = preferred_alternative(measure, do_nothing=optional)
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
        rows["preferred_worth"] += np.where(best >= 0, measure[np.clip(best, 0, None), np.arange(S)], 0.0).tolist()
        rows["basis"] += [basis] * S
        rows["least_cost"] += [least_cost] * S
        names = list(g["ids"]) + ([DO_NOTHING_LABEL] if optional else [])
        for plane in planes:   # a decision map per plane; other axes at their base values
            y_values = plane["y"]
            grid_pw = measure[:, plane["mask"]].reshape(n_alt, y_values.size, x_axis.size)
            if optional:
                grid_pw = np.concatenate([grid_pw, np.zeros((1,) + grid_pw.shape[1:])])
            evaluate = _point_evaluator(plan, plane["y_axis"], classes, years)

            def worth_at(x, y, A=A_eval, evaluate=evaluate, optional=optional):
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
        if len(rows["scenario_id"]) >= GROUP_ROWS_PER_INSERT:   # bounded memory with thousands of groups
            commit(rows, fr)
            rows, fr = {k: [] for k in rows}, {k: [] for k in fr}
        done(1)
    commit(rows, fr, _alternatives_note(spec, statements))


def _group_statement(name, basis, differ, least_cost, mandatory, lives, terminal, ids) -> str:
    """One sentence on how a group was compared."""
    if not differ:
        text = f"group {name} (equal lives: {lives} periods) by present worth, the same decision under every basis"
    elif basis == "present-worth":
        text = (f"NOTE: group {name} has different lives ({lives} periods) but is compared by present worth over "
                "its own lives, as asked; this compares unequal periods of service")
    elif basis == "annual-worth":
        text = f"group {name} (lives {lives} periods) by equivalent annual worth"
    else:
        tv = ", ".join(f"{pid} {v:,.2f}" for pid, v in zip(ids, terminal) if v != 0) or "none"
        text = f"group {name} (lives {lives} periods) over the study period, terminal values {tv}"
    if least_cost:
        text += ("; every alternative is cost-only (no benefit lines), so the group is a least-cost choice "
                 "among its alternatives and doing nothing is not compared"
                 + ("" if mandatory else " (mark the group mandatory to say so in the projects file)"))
    return text


def _alternatives_note(spec, statements: list[str]) -> str:
    words = BASIS_WORDS[spec.alternatives_basis].format(T=spec.study_period)
    return (f"Alternatives whose lives differ are compared by {words}; alternatives of equal lives by present "
            "worth over their common life (every basis then gives the same decision). Decision maps and "
            "frontiers use the same measure. By group: " + "; ".join(statements) + ".")
