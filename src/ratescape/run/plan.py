"""Plan of a run: memory sizing, chunking, line classes and the run's discount tensors.

A :class:`Plan` is everything the chunk loop needs that does not change from chunk to chunk:
the scenario table and weights, the line classes and their per-scenario multipliers, the
discount tensors (before and after tax) and the chunk size that fits the machine's memory.
"""
from __future__ import annotations

import os
from dataclasses import dataclass
from datetime import datetime, timezone

import numpy as np

from ratescape.decide.weights import scenario_weights_from_spec
from ratescape.errors import RunError
from ratescape.evaluate.kinds import multiplier_for  # noqa: F401  (re-exported: the one kind table)
from ratescape.evaluate.kernel import LineClass, discount_tensor, scenario_major_tensor
from ratescape.evaluate.sensitivity import SensitivitySettings
from ratescape.evaluate.timing import discount_exponents
from ratescape.grid import ScenarioTable, build_scenarios
from ratescape.settings import RunSettings
from ratescape.store.worth_files import WorthFiles

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


def utc_now() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None)


# Classes of the lines an after-tax analysis adds (see evaluate/tax.py): the tax shield of loan
# interest and of land written off (nominal, times the tax rate) and loan flows (nominal, present
# only after tax); and, scaled with the asset's cost (multiplier ``asset_cost``, the scenario's cost
# multiplier: a cost overrun raises the depreciable basis too), the tax shield of depreciation and
# of book value written off, and investment tax credits.
TAX_SHIELD_CLASS = ("nominal", 0.0, "tax")
AFTER_TAX_ONLY_CLASS = ("nominal", 0.0, "after_tax_only")
ASSET_SHIELD_CLASS = ("nominal", 0.0, "tax*asset_cost")
ASSET_CREDIT_CLASS = ("nominal", 0.0, "after_tax_only*asset_cost")
#: the classes whose lines a study period moves to its end (see run/decisions.py)
AFTER_TAX_CLASSES = (TAX_SHIELD_CLASS, AFTER_TAX_ONLY_CLASS, ASSET_SHIELD_CLASS, ASSET_CREDIT_CLASS)


def after_tax_classes(con, spec: RunSettings) -> set:
    """Line classes the after-tax lines of staged capital and land need (see run/read.py).

    The tax on a land sale is in the sale line's own (basis, escalation) class, times the tax
    rate. A real-basis asset (investment or land) paid in period k >= 1 has its deductions (and
    tax credit) fixed in the money of period k: a class frozen at k per distinct (escalation, k).
    """
    keys = {(b, float(e), "tax") for b, e in
            con.execute("SELECT DISTINCT basis, escalation FROM cash_flows WHERE kind = 'land'").fetchall()}
    frozen = con.execute("""SELECT DISTINCT escalation, period, kind FROM cash_flows
                            WHERE basis = 'real' AND period >= 1 AND amount < 0
                              AND kind IN ('investment', 'land')""").fetchall()
    credit = float(spec.tax.get("investment_tax_credit", 0.0)) > 0
    for e, k, kind in frozen:
        keys.add(("real", float(e), "tax*asset_cost" if kind == "investment" else "tax", int(k)))
        if credit and kind == "investment":
            keys.add(("real", float(e), "after_tax_only*asset_cost", int(k)))
    return keys


def scenario_multipliers(table: ScenarioTable, after_tax: bool) -> dict:
    """Per-scenario (S,) values of every multiplier name the line classes may use."""
    S = table.size
    out = {name: table.columns[name] for name in ("cost_multiplier", "benefit_multiplier") if name in table.columns}
    tax = table.columns.get("tax_rate", np.zeros(S)) if after_tax else np.zeros(S)
    out.update(tax=tax, after_tax=1.0 - tax, after_tax_only=np.full(S, 1.0 if after_tax else 0.0),
               asset_cost=np.asarray(table.columns.get("cost_multiplier", np.ones(S)), dtype=float))
    return out


@dataclass
class Plan:
    """What every chunk of a run shares: scenarios, line classes, discount tensor."""

    run_id: str
    spec: RunSettings
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
    worth_files: WorthFiles | None = None  # per-chunk worth files for the rank pass (not sent to workers)

    @property
    def chunk_count(self) -> int:
        return max(1, -(-self.project_count // self.chunk_size))


def current_inputs(con) -> tuple[str, int, int]:
    row = con.execute("SELECT inputs_hash FROM loads ORDER BY load_id DESC LIMIT 1").fetchone()
    if row is None:
        raise RunError("the database has no portfolio. Fix: run `ratescape load --projects FILE.csv --db DB` first")
    count = con.execute("SELECT count(*) FROM projects").fetchone()[0]
    max_period = con.execute("SELECT coalesce(max(period), 0) FROM cash_flows").fetchone()[0]
    return row[0], int(count), int(max_period)


def _scenario_weights(spec: RunSettings, table: ScenarioTable) -> np.ndarray:
    """Scenario weights (S,) summing to 1: uniform unless the spec gives axis weights."""
    if spec.weights:
        return scenario_weights_from_spec(spec, table)
    return np.full(table.size, 1.0 / table.size)


def make_plan(con, run_id: str, spec: RunSettings, chunk_size: int | None) -> Plan:
    inputs_hash, count, max_period = current_inputs(con)
    table = build_scenarios(spec)
    axes = {a.name for a in spec.extra_axes}
    if spec.after_tax and "tax_rate" not in axes:
        raise RunError("after-tax screening needs an income-tax rate. Fix: add --tax-rate 0.25 (or a range "
                       "such as 0.15:0.35:5), or `rate = 0.25` under [tax] in the grid TOML")
    rows = con.execute("SELECT DISTINCT basis, escalation, kind FROM cash_flows").fetchall()
    keys = {(b, float(e), multiplier_for(k, axes, spec.after_tax)) for b, e, k in rows}
    if spec.after_tax:
        keys |= set(AFTER_TAX_CLASSES) | after_tax_classes(con, spec)
    classes = sorted(LineClass(*k) for k in keys) or [LineClass()]
    class_index = {c.key: n for n, c in enumerate(classes)}
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
        # the discount-rate range is the axis asked for, on the run's own basis (real rates on a real-basis run)
        sens = SensitivitySettings.from_spec(spec.sensitivity, spec.discount_rates, spec.inflation)
    except ValueError as exc:
        raise RunError(f"[sensitivity] settings: {exc}") from None
    return Plan(run_id, spec, table, classes, class_index, T, tau, tensor, _scenario_weights(spec, table),
                count, int(chunk_size), levels, irr_mult, sens, base_mult, before, kept_scenarios(spec, table),
                scenario_major_tensor(tensor), None if before is None else scenario_major_tensor(before))


def kept_scenarios(spec: RunSettings, table: ScenarioTable) -> np.ndarray:
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


def convention_notes(con, spec: RunSettings) -> dict[str, str]:
    """Plain-words notes (topic -> note) on the money conventions this run relies on, for ``run_notes``:
    timing (where tax falls under mid/beginning timing), the discount basis of the sensitivity, and
    contractual escalation of nominal lines when the portfolio has any."""
    notes = {}
    if spec.timing != "end":
        notes["timing"] = (f"Cash flows are placed at the {spec.timing} of each period (period 0 is now) for every "
                           "measure, IRR and MIRR included; after tax, tax effects are placed with the flows they "
                           "arise from (tax paid in instalments through the year), not at year end.")
    if spec.discount_basis == "real":
        notes["discount_basis"] = ("The discount axis is real: sensitivity moves the real discount rate (its switching "
                                   "value is the real IRR) and holds it fixed while inflation moves.")
    if con.execute("SELECT count(*) FROM cash_flows WHERE basis = 'nominal' AND escalation <> 0").fetchall()[0][0]:
        notes["escalation"] = ("Nominal lines with an escalation grow at that fixed contractual rate, "
                               "amount x (1 + e)^t, whatever the general inflation of the scenario.")
    return notes
