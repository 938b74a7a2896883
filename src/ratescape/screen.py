"""Screen stage: stream projects from DuckDB through the engine and back, chunk by chunk.

Orchestration only; the numbers come from the pure modules in
:mod:`ratescape.evaluate` and :mod:`ratescape.decide`. Each chunk of
projects is evaluated over every scenario and written in ONE transaction
(results, summaries, IRRs and the chunk's completion mark), so an
interrupted run can be resumed with ``--resume RUN_ID`` and ends with exactly
the rows an uninterrupted run would have.
"""
from __future__ import annotations

import os
import threading
import time
import uuid
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import datetime, timezone

import duckdb
import numpy as np
import polars as pl
import pyarrow as pa

from . import __version__
from .errors import RunError
from .evaluate.irr import _STATUS_LABELS, irr_roots
from .evaluate.compiled import column_summaries, index_and_fixed_investment
from .decide.rank_kernel import BaseOrdering, RankTally, column_medians, mean_ranks, rank_rows, ranks_and_tau
from .decide.sensitivity import SensitivitySettings, one_at_a_time
from .evaluate.kernel import (ROLES, LineClass, capital_recovery_factor, discount_tensor,
                              present_worth_scenario_major, scenario_major_tensor, then_current_streams)
from .evaluate.measures import (benefit_cost_ratio, discounted_payback_period, mirr, payback_period,
                                present_worth)
from .evaluate.tax import after_tax_lines
from .evaluate.timing import discount_exponents
from .grid import GridSpec, ScenarioTable, build_scenarios
from .progress import Progress, log
from .store.database import append_rows, fetch_frame, is_interrupt, transaction
from .store.scratch import BEFORE_TAX, RankScratch, WorthScratch, scratch_folder

SWITCH_LABELS = {0: "one", 1: "several", 2: "none", 3: "at_base"}

# Cells (projects x scenarios) evaluated per chunk when no chunk size is given:
# about 1e7 cells keeps a chunk's arrays near 80 MB each whatever the portfolio size, and the
# matrix product cache-friendly (bench/bench_kernel.py).
DEFAULT_CELLS_PER_CHUNK = 10_000_000
# Bytes a chunk needs per project-scenario cell: its PW, PI and outlay matrices, the Arrow row
# columns and the acceptance flags, twice over (one chunk is written while the next is evaluated).
BYTES_PER_CELL = 120
IRR_SEARCH = (-0.99, 10.0)


def available_memory() -> int | None:
    """Bytes of memory available to new allocations (Linux MemAvailable), or None if unknown."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def chunk_cells_for_memory(available: int | None = None) -> int:
    """Cells (projects x scenarios) per chunk when no chunk size is given.

    A quarter of the available memory at BYTES_PER_CELL, between 1 million and
    DEFAULT_CELLS_PER_CHUNK cells (beyond ~10 million cells the matrix product gains nothing and
    the chunk's arrays only take memory away from DuckDB and the page cache).
    """
    available = available_memory() if available is None else available
    if not available:
        return DEFAULT_CELLS_PER_CHUNK
    return int(min(DEFAULT_CELLS_PER_CHUNK, max(1_000_000, available // 4 // BYTES_PER_CELL)))
DUCKDB_MEMORY_LIMIT = "1GB"
CHECKPOINT_THRESHOLD = "4GB"


def _now() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None)


def _multiplier_for(kind: str, axes: set[str], after_tax: bool = False) -> str:
    """Per-scenario multiplier of a cash-flow line of this kind (composite names multiply).

    After tax every line but the investment is taxable income, kept at (1 - tax rate);
    the investment is capitalised and recovered through depreciation.
    """
    parts = []
    if after_tax and kind != "investment":
        parts.append("after_tax")
    if kind == "investment" and "cost_multiplier" in axes:
        parts.append("cost_multiplier")
    if kind == "benefit" and "benefit_multiplier" in axes:
        parts.append("benefit_multiplier")
    return "*".join(parts) or "one"


# Classes of the lines an after-tax analysis adds (see evaluate/tax.py): the tax shield of
# depreciation, book value written off and loan interest (nominal, times the tax rate), and
# loan flows and tax credits (nominal, present only after tax).
TAX_SHIELD_CLASS = ("nominal", 0.0, "tax")
AFTER_TAX_ONLY_CLASS = ("nominal", 0.0, "after_tax_only")


def scenario_multipliers(table: ScenarioTable, after_tax: bool) -> dict:
    """Per-scenario (S,) values of every multiplier name the line classes may use."""
    S = table.size
    out = {name: table.columns[name] for name in ("cost_multiplier", "benefit_multiplier") if name in table.columns}
    tax = table.columns.get("tax_rate", np.zeros(S)) if after_tax else np.zeros(S)
    out.update(tax=tax, after_tax=1.0 - tax, after_tax_only=np.full(S, 1.0 if after_tax else 0.0))
    return out


@dataclass
class Plan:
    """What every chunk of a run shares: scenarios, line classes, discount tensor."""

    run_id: str
    spec: GridSpec
    scenarios: ScenarioTable
    classes: list[LineClass]
    class_index: dict
    n_periods: int
    exponents: np.ndarray
    tensor: np.ndarray
    weights: np.ndarray
    project_count: int
    chunk_size: int
    inflation_levels: np.ndarray
    irr_multipliers: dict
    sensitivity: SensitivitySettings
    base_multipliers: dict
    tensor_before_tax: np.ndarray | None = None
    kept: np.ndarray | None = None       # (S,) bool: scenarios whose result rows are stored
    tensor_sm: np.ndarray | None = None  # the tensor as (S, C*T), for scenario-major products
    tensor_before_tax_sm: np.ndarray | None = None
    scenario_key_base: int = 0           # scenario s of this run is stored as scenario_key base + s
    scratch: WorthScratch | None = None  # per-chunk worth files for the rank pass (not sent to workers)

    @property
    def chunk_count(self) -> int:
        return max(1, -(-self.project_count // self.chunk_size))


def _current_inputs(con) -> tuple[str, int, int]:
    row = con.execute("SELECT inputs_hash FROM loads ORDER BY load_id DESC LIMIT 1").fetchone()
    if row is None:
        raise RunError("the database has no portfolio. Fix: run `ratescape load --projects FILE.csv --db DB` first")
    count = con.execute("SELECT count(*) FROM projects").fetchone()[0]
    max_period = con.execute("SELECT coalesce(max(period), 0) FROM cash_flows").fetchone()[0]
    return row[0], int(count), int(max_period)


def _scenario_weights(spec: GridSpec, table: ScenarioTable) -> np.ndarray:
    """Scenario weights (S,) summing to 1: uniform unless the spec gives axis weights."""
    if spec.weights:
        from .decide.weights import scenario_weights_from_spec  # optional module (decisions)
        return scenario_weights_from_spec(spec, table)
    return np.full(table.size, 1.0 / table.size)


def _plan(con, run_id: str, spec: GridSpec, chunk_size: int | None) -> Plan:
    inputs_hash, count, max_period = _current_inputs(con)
    table = build_scenarios(spec)
    axes = {a.name for a in spec.extra_axes}
    if spec.after_tax and "tax_rate" not in axes:
        raise RunError("after-tax screening needs an income-tax rate. Fix: add --tax-rate 0.25 (or a range "
                       "such as 0.15:0.35:5), or `rate = 0.25` under [tax] in the grid TOML")
    rows = con.execute("SELECT DISTINCT basis, escalation, kind FROM cash_flows").fetchall()
    keys = {(b, float(e), _multiplier_for(k, axes, spec.after_tax)) for b, e, k in rows}
    if spec.after_tax:
        keys |= {TAX_SHIELD_CLASS, AFTER_TAX_ONLY_CLASS}
    classes = [LineClass(b, e, m) for b, e, m in sorted(keys)] or [LineClass()]
    class_index = {(c.basis, c.escalation, c.multiplier): n for n, c in enumerate(classes)}
    T = max_period + 1 + (1 if spec.after_tax else 0)   # room for a book-value write-off after the last flow
    tau = discount_exponents(T, spec.timing, spec.periods_per_year)
    multipliers = scenario_multipliers(table, spec.after_tax)
    rates = (table.columns["discount_rate"], table.columns["inflation"])
    with np.errstate(over="ignore", invalid="ignore"):      # overflow is refused just below, cleanly
        tensor = discount_tensor(classes, tau, *rates, multipliers)
    before = None
    if spec.after_tax:
        zero_tax = dict(multipliers, tax=np.zeros(table.size), after_tax=np.ones(table.size),
                        after_tax_only=np.zeros(table.size))
        before = discount_tensor(classes, tau, *rates, zero_tax)
    if not np.all(np.isfinite(tensor)):
        raise RunError("discount factors overflow for this horizon and these rates "
                       f"({T - 1} periods). Fix: narrow the rate range or shorten the horizon")
    if chunk_size is None:
        chunk_size = max(1, min(max(count, 1), chunk_cells_for_memory() // max(table.size, 1)))
    levels = np.unique(table.columns["inflation"])
    base = table.base_index
    base_mult = {name: float(v[base]) for name, v in multipliers.items()}
    irr_mult = {name: np.full(levels.size, v) for name, v in base_mult.items()}
    try:
        sens = SensitivitySettings.from_spec(spec.sensitivity, spec.discount_rates if spec.discount_basis == "nominal"
                                             else list(np.unique(table.columns["discount_rate"])), spec.inflation)
    except ValueError as exc:
        raise RunError(f"[sensitivity] settings: {exc}") from None
    return Plan(run_id, spec, table, classes, class_index, T, tau, tensor, _scenario_weights(spec, table),
                count, int(chunk_size), levels, irr_mult, sens, base_mult, before, kept_scenarios(spec, table),
                scenario_major_tensor(tensor), None if before is None else scenario_major_tensor(before))


def kept_scenarios(spec: GridSpec, table: ScenarioTable) -> np.ndarray:
    """Which scenarios' result rows a run stores: all, none (summary) or a thinned subset.

    ``thinned:K`` keeps every K-th value of each axis (counted from the first) and the base scenario.
    """
    S = table.size
    if spec.keep == "all":
        return np.ones(S, dtype=bool)
    if spec.keep == "summary":
        return np.zeros(S, dtype=bool)
    k = int(spec.keep.split(":", 1)[1])
    keep = np.ones(S, dtype=bool)
    for axis in spec.axes:
        values = np.asarray(axis.values, dtype=float)
        position = np.searchsorted(np.sort(values), table.columns[axis.name])
        keep &= position % k == 0
    keep[table.base_index] = True
    return keep


def _role_index(kind):
    return 0 if kind == "investment" else 1 if kind == "benefit" else 2


def _chunk_amounts(con, plan: Plan, first: int, stop: int):
    """Amounts by role (R, C, P_chunk, T), project ids and horizons for project keys [first, stop).

    Roles (investment, benefit, other) keep the lines apart for one-at-a-time
    sensitivity; the kernel uses their sum.
    """
    frame = fetch_frame(con,
        """SELECT p.project_key, cf.period, cf.basis, cf.escalation, cf.kind, sum(cf.amount) AS amount
           FROM cash_flows cf JOIN projects p USING (project_id)
           WHERE p.project_key >= ? AND p.project_key < ?
           GROUP BY ALL""", [first, stop])
    ids = con.execute("SELECT project_id FROM projects WHERE project_key >= ? AND project_key < ? ORDER BY project_key",
                      [first, stop]).fetchnumpy()["project_id"]
    P = stop - first
    A = np.zeros((len(ROLES), len(plan.classes), P, plan.n_periods))
    horizon = np.ones(P, dtype=np.int64)
    if frame.height:
        axes = {a.name for a in plan.spec.extra_axes}
        uniq = frame.select("basis", "escalation", "kind").unique(maintain_order=True)
        cls = [plan.class_index[(b, float(e), _multiplier_for(k, axes, plan.spec.after_tax))]
               for b, e, k in uniq.iter_rows()]
        roles = [_role_index(k) for _, _, k in uniq.iter_rows()]
        lookup = uniq.with_columns(pl.Series("class_index", cls, dtype=pl.Int64),
                                   pl.Series("role_index", roles, dtype=pl.Int64))
        frame = frame.join(lookup, on=["basis", "escalation", "kind"], how="left")
        k = frame["project_key"].to_numpy() - first
        t = frame["period"].to_numpy()
        c = frame["class_index"].to_numpy()
        r = frame["role_index"].to_numpy()
        np.add.at(A, (r, c, k, t), frame["amount"].to_numpy())
        nz = frame.filter(pl.col("amount") != 0).group_by("project_key").agg(pl.col("period").max())
        horizon[nz["project_key"].to_numpy() - first] = np.maximum(nz["period"].to_numpy(), 1)
    if plan.spec.after_tax:
        _add_tax_lines(con, plan, first, stop, A, horizon)
    return A, np.asarray(ids, dtype=object), horizon


def _add_tax_lines(con, plan: Plan, first: int, stop: int, A: np.ndarray, horizon: np.ndarray) -> None:
    """Add the after-tax lines (depreciation shield, write-off, loan, credits) of a chunk to role "other".

    Depreciable basis: the project's ``depreciable_basis`` or else its investment lines (base-year
    money, placed in service at period 0). Method and recovery period: the project's columns or the
    ``[tax]`` defaults (straight line over the project's horizon). The asset is disposed of at the
    project's horizon, where its remaining book value is written off.
    """
    p = fetch_frame(con, """
        SELECT pr.project_key, pr.depreciation_method, pr.depreciation_convention, pr.service_quarter,
               pr.recovery_years, pr.depreciable_basis, pr.salvage, pr.loan_amount, pr.loan_rate, pr.loan_term,
               coalesce((SELECT -sum(amount) FROM cash_flows c WHERE c.project_id = pr.project_id
                         AND c.kind = 'investment'), 0) AS invested,
               coalesce((SELECT sum(amount) FROM cash_flows c WHERE c.project_id = pr.project_id
                         AND c.kind = 'salvage'), 0) AS salvage_lines
        FROM projects pr WHERE pr.project_key >= ? AND pr.project_key < ? ORDER BY pr.project_key""", [first, stop])
    tax = plan.spec.tax
    default_method = tax.get("default_method", "straight-line")
    methods = np.array([m or default_method for m in p["depreciation_method"].to_list()], dtype=object)
    recovery = np.array([r if r is not None else (tax.get("default_recovery_years") or int(h))
                         for r, h in zip(p["recovery_years"].to_list(), horizon)], dtype=np.int64)
    basis = np.clip(p["depreciable_basis"].fill_null(p["invested"]).to_numpy().astype(float), 0.0, None)
    salvage = np.clip(p["salvage"].fill_null(p["salvage_lines"]).to_numpy().astype(float), 0.0, None)
    loan = p["loan_amount"].fill_null(0.0).to_numpy().astype(float)
    loan_rate = p["loan_rate"].fill_null(0.0).to_numpy().astype(float)
    loan_term = p["loan_term"].fill_null(1).to_numpy().astype(np.int64)
    # the MACRS convention is one value per call: one call per (convention, quarter) present in the chunk
    conventions = [("mid-quarter", int(q or 4)) if c == "mid-quarter" else (None, None)
                   for c, q in zip(p["depreciation_convention"].to_list(), p["service_quarter"].to_list())]
    extra: dict = {}
    for convention, quarter in sorted(set(conventions), key=str):
        rows = np.array([c == (convention, quarter) for c in conventions])
        try:
            part = after_tax_lines(basis[rows], horizon[rows], plan.n_periods, method=methods[rows],
                                   recovery_years=recovery[rows], salvage=salvage[rows], convention=convention,
                                   quarter=quarter, itc_rate=float(tax.get("investment_tax_credit", 0.0)),
                                   loan_amount=loan[rows], loan_rate=loan_rate[rows], loan_term=loan_term[rows])
        except ValueError as exc:
            raise RunError(f"after-tax lines of projects {first}..{stop - 1}: {exc}. Fix: check depreciation_method "
                           "(straight-line, declining-balance, macrs), recovery_years, the convention and the loan "
                           "columns") from None
        for key, amounts in part.items():
            full = extra.setdefault(key, np.zeros((len(conventions), plan.n_periods)))
            full[rows] = amounts
    other = ROLES.index("other")
    for (b, e, m), amounts in extra.items():
        key = TAX_SHIELD_CLASS if m == "tax" else AFTER_TAX_ONLY_CLASS
        if (b, e) != key[:2]:
            raise RunError(f"unexpected after-tax line class {(b, e, m)}")
        A[other, plan.class_index[key]] += amounts


def _reused(buffers: dict | None, name: str, shape: tuple) -> np.ndarray | None:
    """A buffer of ``buffers`` (a caller's dict kept across chunks) of at least this shape, or None."""
    if buffers is None:
        return None
    size = int(np.prod(shape))
    if name not in buffers or buffers[name].size < size:
        buffers[name] = np.empty(size)
    return buffers[name][:size].reshape(shape)


def _nonzero_columns_product(tensor_sm: np.ndarray, amounts: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """(S, C*T) @ (C*T, P) of class-stacked amounts (C, P, T), skipping the (class, period)
    columns that are zero for every project of the chunk (they add exactly zero: the tensor is
    checked finite when the run is planned). Investments sit in a few periods, so their
    product shrinks from C*T columns to a handful."""
    C, P, T = amounts.shape
    flat = amounts[0] if C == 1 else np.ascontiguousarray(amounts.transpose(1, 0, 2)).reshape(P, C * T)
    used = np.flatnonzero(np.any(flat != 0.0, axis=0))
    if used.size == C * T:
        return np.matmul(tensor_sm, flat.T, out=out)
    return np.matmul(np.ascontiguousarray(tensor_sm[:, used]), np.ascontiguousarray(flat[:, used]).T, out=out)


def worth_index_and_investment(plan: Plan, A_by_role: np.ndarray, buffers: dict | None = None) -> tuple:
    """Present worth and profitability index (S, P), scenario-major, of a chunk's amounts
    (R, C, P, T), and each project's investment PW where it is the same in every scenario (P,).

    PI = 1 + PW / (PW of the investment outlays), where the outlay's present worth is positive;
    NaN otherwise (a project without an investment has no PI). The fixed investment is NaN where
    the outlay's PW varies between scenarios or is not positive (see
    :func:`ratescape.evaluate.compiled.index_and_fixed_investment`). With ``buffers`` (a dict
    the caller keeps across chunks and does not read between them) the matrices reuse its arrays.
    """
    shape = (plan.tensor_sm.shape[0], A_by_role.shape[2])
    pw = _nonzero_columns_product(plan.tensor_sm, A_by_role.sum(axis=0), out=_reused(buffers, "pw", shape))
    outlay = _nonzero_columns_product(plan.tensor_sm, A_by_role[0], out=_reused(buffers, "pi", shape))
    pi, fixed = index_and_fixed_investment(pw, outlay, out=outlay)   # in place: the outlay is not needed again
    return pw, pi, fixed


def evaluate_chunk(plan: Plan, A_by_role: np.ndarray, horizon: np.ndarray, buffers: dict | None = None) -> dict:
    """Pure evaluation of one chunk: present worth and PI (S, P), summaries, IRRs, sensitivity.

    ``buffers``: see :func:`worth_index_and_investment` (the in-process evaluator reuses them; a chunk's
    worth matrices are written to its worth files before the next chunk is evaluated)."""
    cols = plan.scenarios.columns
    A = A_by_role.sum(axis=0)
    pw, pi, fixed_investment = worth_index_and_investment(plan, A_by_role, buffers)   # (S, P), (S, P), (P,)
    years = horizon / float(plan.spec.periods_per_year)
    w = plan.weights
    b = plan.scenarios.base_index
    columns = column_summaries(pw, w)                                   # one pass over (S, P)
    summary = {
        "accept_share": columns["accept_share"], "accept_probability": columns["accept_probability"],
        "pw_min": columns["pw_min"], "pw_max": columns["pw_max"], "pw_mean": columns["pw_mean"],
        "pw_expected": columns["pw_expected"], "pw_base": pw[b].copy(), "accepted_base": pw[b] >= 0.0,
        "annual_worth_base": pw[b] * capital_recovery_factor(cols["real_rate"][b], years),
        "horizon": horizon.astype(np.int32), "investment_worth": fixed_investment,
    }
    irr = irr_over_inflation(plan, A)
    F, P = plan.inflation_levels.size, A.shape[1]
    summary.update(base_measures(plan, A_by_role, horizon))
    sens = one_at_a_time(A_by_role, plan.classes, plan.exponents, float(cols["discount_rate"][b]),
                         float(cols["inflation"][b]), plan.sensitivity, plan.base_multipliers)
    pw_before = None
    if plan.tensor_before_tax_sm is not None:
        pw_before = present_worth_scenario_major(A, plan.tensor_before_tax_sm)
        summary["pw_before_tax_base"] = pw_before[b].copy()
    return {"pw": pw, "pw_before_tax": pw_before, "pi": pi, "summary": summary, "irr": irr, "irr_shape": (F, P),
            "sensitivity": sens}


@dataclass
class IrrTable:
    """IRR results laid out as (inflation level, project) rows: F * P rows, roots per period."""

    roots: np.ndarray
    count: np.ndarray
    status: np.ndarray            # IrrStatus codes (int8)
    sign_changes: np.ndarray

    @property
    def labels(self) -> np.ndarray:
        return _STATUS_LABELS[self.status.astype(int)]


def irr_over_inflation(plan: Plan, A: np.ndarray) -> IrrTable:
    """Every IRR root of every project's then-current stream at each inflation level of the grid.

    A project whose lines are all real (constant base-year money) has a then-current stream
    (1+f)^tau R_t, so its nominal roots are (1+i) = (1+f)(1+r) for the roots r of R: its
    IRR is searched once and mapped by the exact Fisher relation to every inflation level.
    Projects with nominal lines are searched at each level.

    Warnings
    --------
    IRRs place period t's flow at its end (t periods from now) whatever the run's timing
    convention; the discount-rate switching value in ``sensitivity`` honours the convention.
    """
    levels = plan.inflation_levels
    F, (_, P, T) = levels.size, A.shape
    nominal = np.array([c.basis == "nominal" for c in plan.classes])
    mixed = np.any(A[nominal] != 0, axis=(0, 2)) if nominal.any() else np.zeros(P, dtype=bool)
    m = float(plan.spec.periods_per_year)
    low, high = IRR_SEARCH
    real_part = then_current_streams(A[:, ~mixed], plan.classes, plan.exponents, [0.0],
                                     {k: v[:1] for k, v in plan.irr_multipliers.items()})[0]
    r = irr_roots(real_part, low=low, high=high)
    growth = np.power(1.0 + levels, 1.0 / m)                                     # per-period inflation factor
    K = max(np.asarray(r.roots).shape[-1], 1)
    parts = {}
    if mixed.any():
        streams = then_current_streams(A[:, mixed], plan.classes, plan.exponents, levels, plan.irr_multipliers)
        q = irr_roots(streams.reshape(F * int(mixed.sum()), T), low=low, high=high)
        K = max(K, np.asarray(q.roots).shape[-1])
        parts["mixed"] = q
    roots = np.full((F, P, K), np.nan)
    count = np.zeros((F, P), dtype=np.int64)
    status = np.zeros((F, P), dtype=np.int8)
    signs = np.zeros((F, P), dtype=np.int64)
    rr = np.asarray(r.roots)
    roots[:, ~mixed, :rr.shape[-1]] = growth[:, None, None] * (1.0 + rr[None]) - 1.0
    count[:, ~mixed] = np.asarray(r.count)[None]
    status[:, ~mixed] = np.asarray(r.status)[None]
    signs[:, ~mixed] = np.asarray(r.sign_changes)[None]
    if mixed.any():
        q = parts["mixed"]
        n = int(mixed.sum())
        qr = np.asarray(q.roots).reshape(F, n, -1)
        roots[:, mixed, :qr.shape[-1]] = qr
        count[:, mixed] = np.asarray(q.count).reshape(F, n)
        status[:, mixed] = np.asarray(q.status).reshape(F, n)
        signs[:, mixed] = np.asarray(q.sign_changes).reshape(F, n)
    return IrrTable(roots.reshape(F * P, K), count.ravel(), status.ravel(), signs.ravel())


def base_measures(plan: Plan, A_by_role: np.ndarray, horizon: np.ndarray) -> dict:
    """Measures of worth of each project at the base scenario, on its then-current cash flows.

    Future worth (at the end of the project's horizon), conventional and modified
    benefit-cost ratios (benefits = benefit lines; O&M = the other lines net of
    salvage; investment = investment lines), simple and discounted payback
    [periods], and MIRR with finance and reinvestment rates equal to the base
    nominal discount rate [fraction per year].
    """
    cols = plan.scenarios.columns
    b = plan.scenarios.base_index
    i, f = float(cols["discount_rate"][b]), float(cols["inflation"][b])
    m = float(plan.spec.periods_per_year)
    mult = {name: np.array([v]) for name, v in plan.base_multipliers.items()}
    by_role = [then_current_streams(A_by_role[r], plan.classes, plan.exponents, [f], mult)[0] for r in range(len(ROLES))]
    invest, benefit, other = by_role
    total = invest + benefit + other
    opts = {"timing": plan.spec.timing, "periods_per_year": m}
    with np.errstate(divide="ignore", invalid="ignore"):
        bc = benefit_cost_ratio(benefit, -other, -invest, i, **opts)
        bc_mod = benefit_cost_ratio(benefit, -other, -invest, i, modified=True, **opts)
        fw = present_worth(total, i, **opts) * np.power(1.0 + i, horizon / m)
        i_per = (1.0 + i) ** (1.0 / m) - 1.0
        mirr_per = mirr(total, i_per, i_per) if total.shape[1] >= 2 else np.full(total.shape[0], np.nan)
    return {
        "future_worth_base": np.asarray(fw, dtype=float),
        "bc_ratio_base": np.asarray(bc, dtype=float),
        "bc_ratio_modified_base": np.asarray(bc_mod, dtype=float),
        "payback_periods": np.asarray(payback_period(total), dtype=float),
        "discounted_payback_base": np.asarray(discounted_payback_period(total, i, **opts), dtype=float),
        "mirr_base": np.asarray(_per_period_to_annual(np.asarray(mirr_per, dtype=float), m), dtype=float),
    }


def _per_period_to_annual(rate, m: float):
    return np.power(1.0 + rate, m) - 1.0


def _labels(codes, names) -> pa.DictionaryArray:
    """A text column from integer codes into ``names`` (DuckDB stores it as VARCHAR) without
    building one Python string per row."""
    return pa.DictionaryArray.from_arrays(pa.array(np.asarray(codes, dtype=np.int32)),
                                          pa.array([str(n) for n in names], type=pa.string()))


def _floats(values) -> pa.Array:
    """An Arrow float column in which NaN and infinities are NULL (never stored silently)."""
    a = np.asarray(values, dtype=float)
    return pa.array(a, mask=~np.isfinite(a))


@dataclass
class ChunkTables:
    """A chunk's per-project tables, ready for its summaries transaction (built off the writer threads)."""

    by_table: dict          # table name -> Arrow table (appended with the run id)
    projects: int


def chunk_tables(plan: Plan, chunk_index: int, first: int, ids: np.ndarray, out: dict) -> ChunkTables:
    """Arrow tables of one evaluated chunk's per-project results; also writes its worth files,
    from which the rank pass and the result-row writer read."""
    P = out["pw"].shape[1]
    summary = pa.table({"project_id": pa.array(ids.tolist(), type=pa.string()),
                        "project_key": pa.array(np.arange(first, first + P, dtype=np.int32)),
                        **{k: pa.array(v, mask=np.isnan(v) if np.asarray(v).dtype.kind == "f" else None)
                           for k, v in out["summary"].items()}})
    irr = out["irr"]
    F, _ = out["irr_shape"]
    m = float(plan.spec.periods_per_year)
    levels = plan.inflation_levels
    roots_nominal = _per_period_to_annual(np.asarray(irr.roots), m) if m != 1 else np.asarray(irr.roots)
    count = np.asarray(irr.count)
    unique_root = np.where(count == 1, roots_nominal[:, 0] if roots_nominal.shape[1] else np.nan, np.nan)
    f_rows = np.repeat(levels, P)
    irr_table = pa.table({
        "project_id": _labels(np.tile(np.arange(P), F), ids),
        "inflation": pa.array(f_rows),
        "root_count": pa.array(count.astype(np.int32)),
        "irr_nominal": pa.array(unique_root, mask=np.isnan(unique_root)),
        "irr_real": pa.array((1 + unique_root) / (1 + f_rows) - 1, mask=np.isnan(unique_root)),
        "status": _labels(irr.status, _STATUS_LABELS),
        "sign_changes": pa.array(np.asarray(irr.sign_changes).astype(np.int32)),
    })
    rr, kk = np.nonzero(np.isfinite(roots_nominal))
    roots_table = pa.table({
        "project_id": _labels(np.tile(np.arange(P), F)[rr], ids),
        "inflation": pa.array(f_rows[rr]),
        "root_index": pa.array(kk.astype(np.int32)),
        "irr_nominal": pa.array(roots_nominal[rr, kk]),
        "irr_real": pa.array((1 + roots_nominal[rr, kk]) / (1 + f_rows[rr]) - 1),
    })
    sens = out["sensitivity"]
    I = len(sens["inputs"])
    K = len(sens["pct_changes"])
    sens_table = pa.table({
        "project_id": _labels(np.tile(np.arange(P), I), ids),
        "input": _labels(np.repeat(np.arange(I), P), sens["inputs"]),
        "base_value": _floats(np.repeat(sens["base_value"], P)),
        "low_value": _floats(np.repeat(sens["low"], P)),
        "high_value": _floats(np.repeat(sens["high"], P)),
        "worth_base": _floats(np.tile(sens["worth_base"], I)),
        "worth_low": _floats(sens["worth_low"].ravel()),
        "worth_high": _floats(sens["worth_high"].ravel()),
        "switching_value": _floats(sens["switching_value"].ravel()),
        "switching_change": _floats(sens["switching_change"].ravel()),
        "switching_status": _labels(sens["switching_status"].ravel(), [SWITCH_LABELS[k] for k in range(len(SWITCH_LABELS))]),
    })
    spider_table = pa.table({
        "project_id": _labels(np.tile(np.repeat(np.arange(P), K), I), ids),
        "input": _labels(np.repeat(np.arange(I), P * K), sens["inputs"]),
        "change": pa.array(np.tile(sens["pct_changes"], I * P)),
        "present_worth": _floats(sens["spider"].ravel()),
    })
    if plan.scratch is not None:                 # before the summaries commit: such a chunk has its files
        plan.scratch.write(chunk_index, out["pw"], out["pi"], out["pw_before_tax"],
                           investment=out["summary"]["investment_worth"])
    return ChunkTables({"sensitivity": sens_table, "spider": spider_table, "project_summary": summary,
                        "irr_results": irr_table, "irr_roots": roots_table}, P)


SUMMARY_TABLES = ("sensitivity", "spider", "project_summary", "irr_results", "irr_roots")


def _write_summaries(con, plan: Plan, chunk_index: int, first: int, tables: ChunkTables, seconds: float) -> None:
    """Stage 1 of a chunk: its per-project tables and its ``run_chunk_summaries`` mark in ONE transaction."""
    with transaction(con):
        for name in SUMMARY_TABLES:
            append_rows(con, name, tables.by_table[name], plan.run_id)
        con.execute("INSERT INTO run_chunk_summaries VALUES (?, ?, ?, ?)",
                    [plan.run_id, chunk_index, _now(), seconds])


class RowColumns:
    """Reused buffers for the result-row columns of one chunk (fresh pages are costly to fault in)."""

    def __init__(self, plan: Plan):
        self.plan = plan
        S = plan.scenarios.size
        self.kept = np.flatnonzero(plan.kept if plan.kept is not None else np.ones(S, dtype=bool))
        self.all_kept = self.kept.size == S
        self.keys = (plan.scenario_key_base + self.kept).astype(np.int32)
        self.cells = self.kept.size * plan.chunk_size
        self.full = None if self.all_kept else np.empty(S * plan.chunk_size)
        self.values = {}
        self.project_key = np.empty(self.cells, dtype=np.int32)
        self.by_width = {}

    def _layout(self, width: int):
        if width not in self.by_width:
            self.by_width[width] = (np.repeat(self.keys, width), np.tile(np.arange(width, dtype=np.int32), self.keys.size))
        return self.by_width[width]

    def table(self, chunk_index: int, con=None) -> tuple[str, pa.Table]:
        """The chunk's result rows (kept scenarios x its projects), scenario-major, from its worth
        files, and the physical table they go to.

        With ``con``, the PI of projects whose investment is the same in every scenario
        (``project_summary.investment_worth``, committed in the chunk's stage 1) is left NULL: the
        ``results`` view derives it exactly as 1 + PW / investment_worth. The rows go to the
        narrowest ``result_rows_*`` table that holds their columns (see :func:`_result_table`).
        """
        scratch = self.plan.scratch
        width = scratch.chunk_width(chunk_index)
        first = chunk_index * self.plan.chunk_size
        derived = np.zeros(width, dtype=bool)
        if con is not None and "pi" in scratch.measures and scratch.stores_index(chunk_index):
            got = con.execute("""SELECT project_key FROM project_summary WHERE run_id = ? AND project_key >= ?
                                 AND project_key < ? AND investment_worth IS NOT NULL""",
                              [self.plan.run_id, first, first + width]).fetchnumpy()["project_key"]
            derived[np.asarray(got, dtype=np.int64) - first] = True
        n = self.kept.size * width
        scenario_key, offsets = self._layout(width)
        project_key = self.project_key[:n]
        np.add(offsets, np.int32(chunk_index * self.plan.chunk_size), out=project_key)
        columns = {"scenario_key": pa.array(scenario_key), "project_key": pa.array(project_key)}
        for column, measure in (("present_worth", "pw"), ("profitability_index", "pi"),
                                ("present_worth_before_tax", BEFORE_TAX)):
            if measure not in scratch.measures or (measure == "pi" and (derived.all()
                                                                       or not scratch.stores_index(chunk_index))):
                continue                       # every PI of the chunk derived: the column stays NULL
            buffer = self.values.setdefault(measure, np.empty(self.cells))[:n]
            if self.all_kept:
                scratch.read_chunk(measure, chunk_index, out=buffer)
            else:
                full = scratch.read_chunk(measure, chunk_index, out=self.full)
                np.take(full, self.kept, axis=0, out=buffer.reshape(self.kept.size, width))
            if measure == "pi" and derived.any():
                buffer.reshape(self.kept.size, width)[:, derived] = np.nan
            if measure == "pi" and np.isnan(buffer).all():
                continue                       # derived, or projects without an investment: no PI
            columns[column] = pa.array(buffer, from_pandas=measure == "pi")     # PI: NaN -> NULL
        return _result_table(set(columns)), pa.table(columns)


def _result_table(columns: set) -> str:
    """The physical table for result rows with these columns: every PI derived (no PI column)
    goes to ``result_rows_pw``, or after tax ``result_rows_after_tax``; a stored PI to
    ``result_rows_full``. An all-NULL column would cost DuckDB as much as one of values."""
    if "profitability_index" in columns:
        return "result_rows_full"
    return "result_rows_after_tax" if "present_worth_before_tax" in columns else "result_rows_pw"


def _write_result_rows(con, plan: Plan, chunk_index: int, first: int, target: str, rows: pa.Table,
                       seconds: float) -> int:
    """Stage 2 of a chunk: its result rows (into ``target``, a ``result_rows_*`` table) and its
    ``run_chunks`` mark (the chunk is done) in ONE transaction."""
    with transaction(con):
        if rows.num_rows:
            con.register("incoming_result_rows", rows)
            names = ", ".join(rows.column_names)
            con.execute(f"INSERT INTO {target} ({names}) SELECT {names} FROM incoming_result_rows")
            con.unregister("incoming_result_rows")
        con.execute("INSERT INTO run_chunks VALUES (?, ?, ?, ?, ?, ?, ?)",
                    [plan.run_id, chunk_index, first, first + plan.scratch.chunk_width(chunk_index) - 1,
                     rows.num_rows, _now(), seconds])
        con.execute("UPDATE runs SET chunks_done = chunks_done + 1 WHERE run_id = ?", [plan.run_id])
    return rows.num_rows


# Cells of the (scenarios x projects) block ranked at once (reused buffers of ~40 MB each).
RANK_BLOCK_CELLS = 5_000_000
# Kendall's tau-b costs a merge sort per scenario and measure (about 15 ms at 100,000 projects);
# above this many projects (default; [decisions] kendall_max_projects) only Spearman's rho
# (nearly free once the ranks are known) is stored.
KENDALL_MAX_PROJECTS = 10_000


def scratch_worths(plan: Plan, A_by_role: np.ndarray) -> tuple:
    """What a chunk's worth files hold: PW, PI and (after tax) the before-tax PW, each (S, P),
    and the fixed investment PW per project (P,) (see :meth:`WorthScratch.write`)."""
    pw, pi, fixed = worth_index_and_investment(plan, A_by_role)
    before = None
    if plan.tensor_before_tax_sm is not None:
        before = present_worth_scenario_major(A_by_role.sum(axis=0), plan.tensor_before_tax_sm)
    return pw, pi, before, fixed


def _ensure_scratch(con, plan: Plan, chunks=None) -> None:
    """Rebuild the worth files of evaluated chunks (``chunks``, default all) that lack them
    (resumed run, cleaned folder)."""
    missing = plan.scratch.missing(chunks)
    if missing:
        log(f"ranks: rebuilding the worth files of {len(missing)} chunk(s)")
    for c in missing:
        first = c * plan.chunk_size
        stop = min(first + plan.chunk_size, plan.project_count)
        A_by_role, _, _ = _chunk_amounts(con, plan, first, stop)
        pw, pi, before, fixed = scratch_worths(plan, A_by_role)
        plan.scratch.write(c, pw, pi, before, investment=fixed)


def rank_statistics(con, plan: Plan):
    """Per-project rank statistics by present worth and by profitability index, per scenario block.

    Reads the run's worth files one block of scenarios at a time (memory bounded by the block,
    not the portfolio), ranks every project within each scenario (1 = largest; ties share the
    smallest rank, "competition ranking"; projects without a PI in every scenario get no PI
    rank statistics), and keeps min, max, the base scenario's rank and the top-K count. Each
    block's ranks go to per-chunk rank files, from which exact medians are taken one chunk at a
    time. Also returns, per scenario, Spearman's rho of its ranking against the base scenario's
    (by PW, and by PI over the projects that have one) and, up to KENDALL_MAX_PROJECTS projects,
    Kendall's tau-b.
    """
    _ensure_scratch(con, plan)
    P, S = plan.project_count, plan.scenarios.size
    base = plan.scenarios.base_index
    k = int(plan.spec.decisions.get("top_k", 10))
    block = max(1, min(S, RANK_BLOCK_CELLS // max(P, 1)))
    tau_limit = int(plan.spec.decisions.get("kendall_max_projects", KENDALL_MAX_PROJECTS))
    with_tau = P <= tau_limit
    if not with_tau:
        log(f"ranks: {P:,} projects; Kendall's tau is computed up to {tau_limit:,} ([decisions] "
            "kendall_max_projects), Spearman's rho is stored for every scenario")
    names = {"pw": "", "pi": "_pi"}
    agreement = {f"{stat}{suffix}": np.full(S, np.nan) for stat in ("kendall_tau", "spearman_rho")
                 for suffix in names.values()}
    stats = {}
    for name in names:
        base_values = plan.scratch.read_block(name, base, base + 1)[0]
        has = np.isfinite(base_values)
        stats[name] = {"tally": RankTally(P, k), "base": np.zeros(P, dtype=np.uint32),
                       "mean_ranks": mean_ranks(base_values), "has": has,
                       "ordering": BaseOrdering(base_values) if with_tau else None,
                       "files": RankScratch(plan.scratch.folder, name, S, P, plan.chunk_size)}
    # file reads and rank-file appends run on an I/O thread, one block ahead of the ranking;
    # two sets of buffers alternate (reused: fresh pages are costly to fault in)
    buffers = [{name: (np.empty((block, P)), np.empty((block, P), dtype=np.uint32)) for name in names}
               for _ in range(2)]
    blocks = [(a, min(S, a + block)) for a in range(0, S, block)]

    def load(n):
        a, b = blocks[n]
        worth = plan.scratch.read_block("pw", a, b, out=buffers[n % 2]["pw"][0])
        plan.scratch.read_block("pi", a, b, out=buffers[n % 2]["pi"][0], worth=worth)   # derived from PW

    def store(n):
        a, b = blocks[n]
        for name in names:
            stats[name]["files"].append(buffers[n % 2][name][1][: b - a])

    # Block n is ranked while block n + 1 is read (reader thread) and block n - 1's ranks are
    # appended to the rank files (writer thread, in block order). Buffer set n % 2 holds block n:
    # its values are free once block n is ranked, its ranks once block n's append is done.
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-rank-read") as reads, \
            ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-rank-write") as writes:
        loaded = reads.submit(load, 0)
        stored = {}
        for n, (a, b) in enumerate(blocks):
            loaded.result()
            if n + 1 < len(blocks):
                loaded = reads.submit(load, n + 1)  # into set (n + 1) % 2: block n - 1 is ranked
            if n - 2 in stored:
                stored.pop(n - 2).result()         # set n % 2's ranks were block n - 2's: appended
            for name, suffix in names.items():
                st = stats[name]
                vals = buffers[n % 2][name][0][: b - a]
                ranks, rho = rank_rows(vals, st["mean_ranks"], st["has"], out=buffers[n % 2][name][1][: b - a],
                                       tally=st["tally"])
                agreement[f"spearman_rho{suffix}"][a:b] = rho
                if with_tau:
                    agreement[f"kendall_tau{suffix}"][a:b] = ranks_and_tau(vals, st["ordering"])[1]
                if a <= base < b:
                    st["base"][:] = ranks[base - a]
            stored[n] = writes.submit(store, n)
        for job in stored.values():
            job.result()
    out = {}
    for name, prefix in (("pw", "rank"), ("pi", "pi_rank")):
        st = stats[name]
        tally = st["tally"]
        ok = st["has"] & ~tally.any_nan          # a value in every scenario
        median = np.empty(P)
        files = st["files"]
        local = threading.local()

        def chunk_median(chunk):
            # each thread reads a chunk's (S, width) ranks into its own buffers, lays them out
            # project-major (blocked transpose) and partitions in place (no fresh pages per chunk)
            if not hasattr(local, "ranks"):
                local.ranks = np.empty(S * plan.chunk_size, dtype=np.uint32)
                local.by_project = np.empty(S * plan.chunk_size, dtype=np.uint32)
            first, chunk_ranks = files.read(chunk, out=local.ranks)
            width = chunk_ranks.shape[1]
            column_medians(chunk_ranks, out=median[first:first + width], work=local.by_project)

        with ThreadPoolExecutor(max_workers=2) as pool:   # NumPy's partition releases the GIL
            list(pool.map(chunk_median, range(files.chunk_count)))
        out[f"{prefix}_min"] = np.where(ok, tally.min.astype(np.int64), -1)
        out[f"{prefix}_max"] = np.where(ok, tally.max.astype(np.int64), -1)
        out[f"{prefix}_median"] = np.where(ok, median, np.nan)
        if name == "pw":
            out["rank_base"] = np.where(ok, st["base"].astype(np.int64), -1)
            out["top_k_share"] = np.where(ok, tally.top / S, np.nan)
    return out, agreement


def result_block(con, plan: Plan, a: int, b: int) -> dict | None:
    """Present worth and profitability index (P, b - a) of scenarios [a, b) for every project.

    Read from the run's worth files (the numbers the chunks produced, whatever ``--keep`` stored).
    """
    _ensure_scratch(con, plan)
    return {column: np.ascontiguousarray(plan.scratch.read_block(name, a, b).T)
            for column, name in (("present_worth", "pw"), ("profitability_index", "pi"))}


def _finalize(con, plan: Plan, writer: "ChunkWriter | None" = None, reader=None) -> None:
    """Rank statistics across all projects per scenario (while ``writer`` still stores result rows),
    the decision stage, then mark the run done."""
    t0 = time.perf_counter()
    stats, agreement = rank_statistics(reader if reader is not None else con, plan)
    log(f"ranks: {plan.project_count:,} projects x {plan.scenarios.size:,} scenarios in "
        f"{time.perf_counter() - t0:.1f} s")
    if writer is not None:
        t0 = time.perf_counter()
        writer.finish()
        log(f"result rows: the last chunks stored {time.perf_counter() - t0:.1f} s after the rank pass")
    t0 = time.perf_counter()
    table = pa.table({"project_key": pa.array(np.arange(plan.project_count, dtype=np.int32)),
                      **{k: pa.array(v, mask=(v < 0) if v.dtype.kind == "i" else ~np.isfinite(v))
                         for k, v in stats.items()}})
    with transaction(con):
        con.register("rank_stats", table)
        con.execute(f"""
            UPDATE project_summary AS s SET {', '.join(f'{c} = r.{c}' for c in stats)}
            FROM rank_stats AS r
            WHERE s.run_id = ? AND s.project_key = r.project_key""", [plan.run_id])
        con.unregister("rank_stats")
        append_rows(con, "scenario_ranks", pa.table({
            "scenario_id": pa.array(np.arange(plan.scenarios.size, dtype=np.int32)),
            **{k: _floats(v) for k, v in agreement.items()}}), plan.run_id)
        run_decisions(con, plan)
        con.execute("UPDATE runs SET status = 'done', finished_at = ?, message = NULL WHERE run_id = ?",
                    [_now(), plan.run_id])
    log(f"decisions and summaries stored in {time.perf_counter() - t0:.1f} s")
    # The run is done: its worth files are deleted (freeing gigabytes of cached pages takes the
    # kernel a second or two) while DuckDB checkpoints the run into the database file, which
    # closing the connection would otherwise do afterwards.
    removing = threading.Thread(target=plan.scratch.remove, name="ratescape-scratch-remove")
    removing.start()
    try:
        con.execute("CHECKPOINT")
    except duckdb.Error:
        pass                            # e.g. another transaction open: the close checkpoints instead
    finally:
        removing.join()


def run_decisions(con, plan: Plan) -> None:
    """Hook for the decision stage (alternatives, rationing, ...); see ratescape.decisions."""
    try:
        from .decisions import decide_run
    except ImportError:
        return
    decide_run(con, plan)


class ChunkReader:
    """Reads the cash flows of the chunks to evaluate on a background thread (its own DuckDB
    connection), ``depth`` chunks ahead: DuckDB's worker threads are shared by every connection,
    so a chunk's read can wait behind the writers' inserts; read ahead, it does not hold up the
    evaluation. Iterating yields (chunk index, (amounts, ids, horizon)) in order."""

    def __init__(self, con, plan: Plan, chunks, depth: int = 2):
        self.con, self.plan = con.cursor(), plan
        self.pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-reader")
        self.chunks = iter(chunks)
        self.queue = deque()
        for _ in range(depth):
            self._next()

    def _next(self) -> None:
        chunk = next(self.chunks, None)
        if chunk is not None:
            self.queue.append((chunk, self.pool.submit(self._read, chunk)))

    def _read(self, chunk: int):
        first = chunk * self.plan.chunk_size
        return _chunk_amounts(self.con, self.plan, first, min(first + self.plan.chunk_size, self.plan.project_count))

    def __iter__(self):
        while self.queue:
            chunk, future = self.queue.popleft()
            self._next()
            yield chunk, future.result()

    def close(self) -> None:
        self.pool.shutdown(wait=True, cancel_futures=True)
        self.queue.clear()
        try:
            self.con.close()
        except Exception:
            pass


class ChunkWriter:
    """Writes evaluated chunks on two background threads, each with its own DuckDB connection,
    while the next chunks are evaluated and, at the end, while the rank pass runs.

    Stage 1 (summaries thread): a chunk's per-project tables, in one transaction marked in
    ``run_chunk_summaries``. Stage 2 (rows thread): once its stage 1 has committed, the chunk's
    result rows, read back from its worth files, in one transaction marked in ``run_chunks``
    (the chunk is done). Both stages commit in chunk order, each whole or not at all, so an
    interruption leaves every chunk not started, summarised, or done, and ``--resume`` takes
    each from where it stood. The Arrow tables and worth files are prepared on the calling
    thread; submitting waits while ``STAGE1_AHEAD`` chunks' stage 1 is pending (so evaluation runs
    at most that far ahead of it) and re-raises any writer error. Result rows, the bulk of the bytes, may
    fall behind: they need no memory while they wait (they are on disk).
    """

    STAGE1_AHEAD = 2      # chunks whose stage 1 may be pending before submitting waits (~20 MB each)

    def __init__(self, con, plan: Plan, bar, pending_rows=()):
        self.plan, self.bar = plan, bar
        self.summary_con, self.rows_con = con.cursor(), con.cursor()
        self.summaries = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-summaries")
        self.rows = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-rows")
        self.pending = deque()                     # stage-1 futures, oldest first
        self.error: BaseException | None = None
        self.stopping = threading.Event()
        self.columns = RowColumns(plan)
        for chunk in pending_rows:                  # resumed: summarised, rows not yet stored
            self.rows.submit(self._store_rows, chunk, time.perf_counter())

    def _summarise(self, key, tables) -> None:
        chunk, first, _, t0 = key
        if self.stopping.is_set() or self.error is not None:
            return                                  # an earlier chunk failed: keep the chunk order
        try:
            _write_summaries(self.summary_con, self.plan, chunk, first, tables, time.perf_counter() - t0)
        except BaseException as exc:
            self.error = exc
            raise
        self.rows.submit(self._store_rows, chunk, t0)

    def _store_rows(self, chunk: int, t0: float) -> None:
        if self.stopping.is_set() or self.error is not None:
            return
        try:
            target, rows = self.columns.table(chunk, self.rows_con)
            _write_result_rows(self.rows_con, self.plan, chunk, chunk * self.plan.chunk_size, target, rows,
                               time.perf_counter() - t0)
            del rows
            self.bar.update()
        except BaseException as exc:               # noqa: BLE001 - re-raised on the main thread
            self.error = exc

    def _check(self) -> None:
        if self.error is not None:
            raise self.error

    def wait_for_summaries(self, keep: int = 0) -> None:
        """Wait until at most ``keep`` chunks' stage 1 is still pending (raising their errors)."""
        while len(self.pending) > keep:
            self.pending.popleft().result()

    def submit(self, key, out) -> None:
        chunk, first, ids, _ = key
        self._check()
        tables = chunk_tables(self.plan, chunk, first, ids, out)   # on this thread: the writers only write
        del out
        self.wait_for_summaries(keep=self.STAGE1_AHEAD - 1)
        self.pending.append(self.summaries.submit(self._summarise, key, tables))

    def finish(self) -> None:
        """Wait for every chunk's two stages; errors are raised here."""
        try:
            self.wait_for_summaries()
        finally:
            self._shut_down()
        self._check()

    def abandon(self) -> None:
        """After an error elsewhere: let transactions in progress commit or roll back, start no
        new one, ignore their outcome."""
        self.stopping.set()
        while self.pending:
            try:
                self.pending.popleft().result()
            except BaseException:
                pass
        self._shut_down()

    def _shut_down(self) -> None:
        """Let both threads finish their queues (stage 1 first: it queues stage 2), then close
        their connections."""
        self.summaries.shutdown(wait=True)
        self.rows.shutdown(wait=True)
        for c in (self.summary_con, self.rows_con):
            try:
                c.close()
            except Exception:
                pass


def screen(con, spec: GridSpec | None = None, *, resume: str | None = None, chunk_size: int | None = None,
           progress: bool = True, stop_after_chunks: int | None = None, cluster: str | None = None,
           workers: int | None = None) -> str:
    """Evaluate every project in every scenario and store the results; return the run id.

    ``resume`` continues an interrupted run with its stored grid and chunk
    size. ``stop_after_chunks`` (testing aid) stops after that many chunks,
    leaving the run resumable. ``cluster`` (a Dask scheduler address) or
    ``workers`` (a local Dask cluster of that many processes) evaluate the
    chunks elsewhere; reading and writing stay in this process.
    """
    con.execute(f"SET memory_limit = '{DUCKDB_MEMORY_LIMIT}'")   # bound DuckDB's buffers; spill beyond
    # The writers commit every chunk twice; with the default 16 MB write-ahead-log threshold the
    # summaries' commits each set off a checkpoint of the growing database. One checkpoint at the end.
    con.execute(f"SET checkpoint_threshold = '{CHECKPOINT_THRESHOLD}'")
    if resume:
        row = con.execute("SELECT status, grid_spec, inputs_hash, chunk_size FROM runs WHERE run_id = ?",
                          [resume]).fetchone()
        if row is None:
            raise RunError(f"no run {resume!r} in this database. Fix: list runs with `ratescape query --db DB runs`")
        status, grid_json, run_hash, stored_chunk = row
        if status == "done":
            raise RunError(f"run {resume} is already done; nothing to resume")
        inputs_hash, _, _ = _current_inputs(con)
        if inputs_hash != run_hash:
            raise RunError(f"the portfolio was reloaded after run {resume} started, so it cannot be resumed. "
                           "Fix: start a new run with `ratescape screen`")
        spec = GridSpec.from_json(grid_json)
        plan = _plan(con, resume, spec, stored_chunk)
        plan.scenario_key_base = int(con.execute("SELECT min(scenario_key) FROM scenarios WHERE run_id = ?",
                                                 [resume]).fetchall()[0][0])
        con.execute("UPDATE runs SET status = 'running', process_id = ?, message = NULL WHERE run_id = ?",
                    [os.getpid(), resume])
        log(f"resuming run {resume}")
    else:
        if spec is None:
            raise RunError("no grid given")
        run_id = f"run-{datetime.now().strftime('%Y%m%d-%H%M%S')}-{uuid.uuid4().hex[:6]}"
        plan = _plan(con, run_id, spec, chunk_size)
        if plan.project_count == 0:
            raise RunError("the portfolio has no projects. Fix: load a projects file first")
        inputs_hash, _, _ = _current_inputs(con)
        cols = plan.scenarios.columns
        S = plan.scenarios.size
        plan.scenario_key_base = int(con.execute("SELECT coalesce(max(scenario_key) + 1, 0) FROM scenarios")
                                     .fetchall()[0][0])
        scenario_keys = plan.scenario_key_base + np.arange(S, dtype=np.int32)
        horizons = np.arange(1, plan.n_periods + 1)
        factors = capital_recovery_factor(cols["real_rate"][None, :],
                                          horizons[:, None] / float(spec.periods_per_year))   # (H, S)
        annual = pa.table({"scenario_key": pa.array(np.tile(scenario_keys, horizons.size)),
                           "horizon": pa.array(np.repeat(horizons.astype(np.int32), S)),
                           "capital_recovery": pa.array(factors.ravel())})
        scen = pa.table({
            "scenario_id": pa.array(cols["scenario_id"].astype(np.int32)),
            "discount_rate": pa.array(cols["discount_rate"]), "real_rate": pa.array(cols["real_rate"]),
            "inflation": pa.array(cols["inflation"]),
            **{k: pa.array(cols[k] if k in cols else np.full(S, np.nan), mask=None if k in cols else np.ones(S, bool))
               for k in ("tax_rate", "cost_multiplier", "benefit_multiplier")},
            "weight": pa.array(plan.weights),
            "is_base": pa.array(cols["scenario_id"] == plan.scenarios.base_index),
            "scenario_key": pa.array(scenario_keys),
        })
        with transaction(con):
            con.execute("INSERT INTO runs VALUES (?, 'running', ?, NULL, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 0, ?, NULL)", [
                run_id, _now(), __version__, inputs_hash, spec.to_json(), spec.discount_basis, spec.timing,
                float(spec.periods_per_year), bool(spec.after_tax), plan.project_count, S,
                plan.scenarios.base_index, plan.chunk_size, plan.chunk_count, os.getpid()])
            con.register("new_scenarios", scen)
            con.execute("INSERT INTO scenarios SELECT ?, * FROM new_scenarios", [run_id])
            con.unregister("new_scenarios")
            con.register("new_annual_factors", annual)
            con.execute("INSERT INTO annual_factors SELECT * FROM new_annual_factors")
            con.unregister("new_annual_factors")
        log(f"run {run_id}: {plan.project_count} projects x {S} scenarios in {plan.chunk_count} chunk(s)")
    plan.scratch = WorthScratch(scratch_folder(con, plan.run_id), plan.scenarios.size, plan.project_count,
                                plan.chunk_size, before_tax=plan.tensor_before_tax_sm is not None)
    done = {r[0] for r in con.execute("SELECT chunk_index FROM run_chunks WHERE run_id = ?", [plan.run_id]).fetchall()}
    summarised = done | {r[0] for r in con.execute("SELECT chunk_index FROM run_chunk_summaries WHERE run_id = ?",
                                                   [plan.run_id]).fetchall()}
    todo = [c for c in range(plan.chunk_count) if c not in summarised]
    rows_todo = sorted(summarised - done)          # resumed: summarised chunks whose rows were not stored
    bar = Progress(plan.chunk_count - len(done), "screen", enabled=progress)
    evaluator = None
    writer = None
    blas_limit = None
    reader = None
    prefetch = None
    try:
        reader = con.cursor()      # the chunk reader's own connection: the writer threads have theirs
        if rows_todo:
            _ensure_scratch(reader, plan, rows_todo)
        if cluster or workers:
            from .cluster import DaskEvaluator
            evaluator = DaskEvaluator(evaluate_chunk, plan, address=cluster, workers=workers)
        else:
            from .cluster import LocalEvaluator
            evaluator = LocalEvaluator(evaluate_chunk, plan)

        started = time.perf_counter()
        # While one thread evaluates and the writer thread's DuckDB insert uses the other core, a
        # multi-threaded BLAS only oversubscribes the cores (its threads spin-wait): one BLAS thread
        from threadpoolctl import threadpool_limits
        blas_limit = threadpool_limits(limits=1, user_api="blas")
        writer = ChunkWriter(con, plan, bar, rows_todo)

        def write(done):
            for key, out in done:
                writer.submit(key, out)

        prefetch = ChunkReader(reader, plan, todo)
        for n, (chunk, (A, ids, horizon)) in enumerate(prefetch):
            if stop_after_chunks is not None and n >= stop_after_chunks:
                prefetch.close()
                write(evaluator.drain())
                writer.finish()
                writer = None
                reader.close()
                blas_limit.restore_original_limits()
                blas_limit = None
                con.execute("UPDATE runs SET status = 'interrupted', message = ? WHERE run_id = ?",
                            [f"stopped after {n} chunks; resume with --resume {plan.run_id}", plan.run_id])
                bar.close()
                return plan.run_id
            evaluator.submit((chunk, chunk * plan.chunk_size, ids, time.perf_counter()), A, horizon)
            write(evaluator.ready())
        prefetch.close()
        write(evaluator.drain())
        writer.wait_for_summaries()                             # the last chunk's summaries are committed
        blas_limit.restore_original_limits()
        blas_limit = None
        log(f"chunks: {len(todo)} evaluated in {time.perf_counter() - started:.1f} s "
            f"(result rows of {plan.chunk_count - len(done) - writer.bar.count} still being stored)")
        evaluator.close()
        evaluator = None
        _finalize(con, plan, writer, reader)       # ranks while the rows thread stores the rest
        writer = None
        reader.close()
        bar.close()
        log(f"screen: done in {time.perf_counter() - started:.1f} s after planning")
    except BaseException as exc:
        if prefetch is not None:
            prefetch.close()
        if writer is not None:
            writer.abandon()       # let chunks already being written commit (or roll back) first
        if blas_limit is not None:
            blas_limit.restore_original_limits()
        bar.close()
        if evaluator is not None:
            try:
                evaluator.close()
            except Exception:
                pass
        if reader is not None:
            try:
                reader.close()
            except Exception:
                pass
        if is_interrupt(exc):
            con.execute("UPDATE runs SET status = 'interrupted', message = ? WHERE run_id = ?",
                        [f"interrupted; resume with --resume {plan.run_id}", plan.run_id])
            if isinstance(exc, KeyboardInterrupt):
                raise
            raise KeyboardInterrupt(str(exc)) from exc
        try:
            con.execute("UPDATE runs SET status = 'failed', message = ? WHERE run_id = ?",
                        [f"{type(exc).__name__}: {exc}"[:500], plan.run_id])
        except Exception:
            pass
        raise
    return plan.run_id
