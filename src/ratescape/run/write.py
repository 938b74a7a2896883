"""Writing an evaluated chunk: Arrow tables of its per-project results and its result rows, in two
transactional stages on two writer threads (:class:`ChunkWriter`).
"""
from __future__ import annotations

import threading
import time
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from ratescape.evaluate.irr import STATUS_LABELS
from ratescape.run.cost_only import COST_ONLY
from ratescape.run.evaluation import _per_period_to_annual
from ratescape.run.plan import Plan, utc_now
from ratescape.store.database import DB_THREAD_PREFIX, append_rows, transaction
from ratescape.store.worth_files import BEFORE_TAX

SWITCH_LABELS = {0: "one", 1: "several", 2: "none", 3: "at_base"}

#: Status of a result too large for double precision (beyond about 1.8e308, e.g. an IRR of 900 %
#: a day stated per year): stored NULL, never as infinity, with this word saying why
#: (``irr_results.status``; ``project_summary.measure_status`` names the measures).
OVERFLOW = "overflow"


def overflow_status(summary: dict, P: int, per_scenario: dict | None = None) -> np.ndarray:
    """``measure_status`` (P,) with the measures of each project that came out infinite named:
    'overflow: mirr_base, ...' (after 'cost-only; ' for a cost-only project). Such a value is
    stored NULL; NaN stays what it means elsewhere (the measure does not exist).
    ``per_scenario``: name -> (S, P) results (the profitability index of the result rows), named
    when infinite in any scenario."""
    status = summary.get("measure_status")
    status = np.full(P, None, dtype=object) if status is None else np.asarray(status, dtype=object).copy()
    infinite = {k: np.isinf(np.asarray(v, dtype=float)) for k, v in summary.items()
                if k != "measure_status" and np.asarray(v).dtype.kind == "f"}
    infinite.update({k: np.isinf(v).any(axis=0) for k, v in (per_scenario or {}).items() if v is not None})
    for p in np.flatnonzero(np.any(np.array(list(infinite.values())).reshape(-1, P), axis=0)) if infinite else ():
        named = f"{OVERFLOW}: " + ", ".join(k for k, v in infinite.items() if v[p])
        status[p] = named if status[p] is None else f"{status[p]}; {named}"
    return status


def arrow_labels(codes, names) -> pa.DictionaryArray:
    """A text column from integer codes into ``names`` (DuckDB stores it as VARCHAR) without
    building one Python string per row."""
    return pa.DictionaryArray.from_arrays(pa.array(np.asarray(codes, dtype=np.int32)),
                                          pa.array([str(n) for n in names], type=pa.string()))


def arrow_floats(values) -> pa.Array:
    """An Arrow float column in which NaN and infinities are NULL (never stored silently)."""
    a = np.asarray(values, dtype=float)
    return pa.array(a, mask=~np.isfinite(a))


@dataclass
class ChunkTables:
    """A chunk's per-project tables, ready for its summaries transaction (built off the writer threads)."""

    by_table: dict          # table name -> Arrow table (appended with the run id)
    projects: int


def _irr_status(irr, overflow=None) -> pa.DictionaryArray:
    """IRR status labels; rows of cost-only projects read 'cost-only' (see run/cost_only.py), rows
    whose one root is too large for double precision once stated per year (or in real terms)
    read 'overflow' (the IRR columns are NULL)."""
    names = list(STATUS_LABELS) + [COST_ONLY, OVERFLOW]
    codes = np.asarray(irr.status).astype(int)
    if irr.cost_only is not None and np.any(irr.cost_only):
        codes = np.where(irr.cost_only, len(names) - 2, codes)
    if overflow is not None and np.any(overflow):
        codes = np.where(overflow, len(names) - 1, codes)
    return arrow_labels(codes, names)


def chunk_tables(plan: Plan, chunk_index: int, first: int, ids: np.ndarray, out: dict) -> ChunkTables:
    """Arrow tables of one evaluated chunk's per-project results; also writes its worth files,
    from which the rank pass and the result-row writer read."""
    P = out["pw"].shape[1]
    out["summary"]["measure_status"] = overflow_status(out["summary"], P, {"profitability_index": out.get("pi")})
    summary = pa.table({"project_id": pa.array(ids.tolist(), type=pa.string()),
                        "project_key": pa.array(np.arange(first, first + P, dtype=np.int32)),
                        **{k: pa.array(v, mask=~np.isfinite(v) if np.asarray(v).dtype.kind == "f" else None)
                           for k, v in out["summary"].items()}})
    irr = out["irr"]
    F, _ = out["irr_shape"]
    m = float(plan.spec.periods_per_year)
    levels = plan.inflation_levels
    roots_nominal = _per_period_to_annual(np.asarray(irr.roots), m) if m != 1 else np.asarray(irr.roots)
    count = np.asarray(irr.count)
    unique_root = np.where(count == 1, roots_nominal[:, 0] if roots_nominal.shape[1] else np.nan, np.nan)
    f_rows = np.repeat(levels, P)
    with np.errstate(over="ignore", invalid="ignore"):
        unique_real = (1 + unique_root) / (1 + f_rows) - 1
    overflow = (count == 1) & ~(np.isfinite(unique_root) & np.isfinite(unique_real))
    irr_table = pa.table({
        "project_id": arrow_labels(np.tile(np.arange(P), F), ids),
        "inflation": pa.array(f_rows),
        "root_count": pa.array(count.astype(np.int32)),
        "irr_nominal": arrow_floats(unique_root),
        "irr_real": arrow_floats(unique_real),
        "status": _irr_status(irr, overflow),
        "sign_changes": pa.array(np.asarray(irr.sign_changes).astype(np.int32)),
    })
    with np.errstate(over="ignore", invalid="ignore"):
        finite_real = np.isfinite((1 + roots_nominal) / (1 + f_rows[:, None]) - 1)
    rr, kk = np.nonzero(np.isfinite(roots_nominal) & finite_real)     # a root too large is not listed
    roots_table = pa.table({
        "project_id": arrow_labels(np.tile(np.arange(P), F)[rr], ids),
        "inflation": pa.array(f_rows[rr]),
        "root_index": pa.array(kk.astype(np.int32)),
        "irr_nominal": pa.array(roots_nominal[rr, kk]),
        "irr_real": pa.array((1 + roots_nominal[rr, kk]) / (1 + f_rows[rr]) - 1),
    })
    sens = out["sensitivity"]
    I = len(sens["inputs"])
    K = len(sens["pct_changes"])
    sens_table = pa.table({
        "project_id": arrow_labels(np.tile(np.arange(P), I), ids),
        "input": arrow_labels(np.repeat(np.arange(I), P), sens["inputs"]),
        "base_value": arrow_floats(np.repeat(sens["base_value"], P)),
        "low_value": arrow_floats(np.repeat(sens["low"], P)),
        "high_value": arrow_floats(np.repeat(sens["high"], P)),
        "worth_base": arrow_floats(np.tile(sens["worth_base"], I)),
        "worth_low": arrow_floats(sens["worth_low"].ravel()),
        "worth_high": arrow_floats(sens["worth_high"].ravel()),
        "switching_value": arrow_floats(sens["switching_value"].ravel()),
        "switching_change": arrow_floats(sens["switching_change"].ravel()),
        "switching_status": arrow_labels(sens["switching_status"].ravel(), [SWITCH_LABELS[k] for k in range(len(SWITCH_LABELS))]),
    })
    spider_table = pa.table({
        "project_id": arrow_labels(np.tile(np.repeat(np.arange(P), K), I), ids),
        "input": arrow_labels(np.repeat(np.arange(I), P * K), sens["inputs"]),
        "change": pa.array(np.tile(sens["pct_changes"], I * P)),
        "present_worth": arrow_floats(sens["spider"].ravel()),
    })
    if plan.worth_files is not None:                 # before the summaries commit: such a chunk has its files
        plan.worth_files.write(chunk_index, out["pw"], out["pi"], out["pw_before_tax"],
                           investment=out["summary"]["investment_worth"])
    return ChunkTables({"sensitivity": sens_table, "spider": spider_table, "project_summary": summary,
                        "irr_results": irr_table, "irr_roots": roots_table}, P)


SUMMARY_TABLES = ("sensitivity", "spider", "project_summary", "irr_results", "irr_roots")


def write_summaries(con, plan: Plan, chunk_index: int, first: int, tables: ChunkTables, seconds: float) -> None:
    """Stage 1 of a chunk: its per-project tables and its ``run_chunk_summaries`` mark in ONE transaction."""
    with transaction(con):
        for name in SUMMARY_TABLES:
            append_rows(con, name, tables.by_table[name], plan.run_id)
        con.execute("INSERT INTO run_chunk_summaries VALUES (?, ?, ?, ?)",
                    [plan.run_id, chunk_index, utc_now(), seconds])


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
        narrowest ``result_rows_*`` table that holds their columns (see :func:`result_table_for`).
        """
        files = self.plan.worth_files
        width = files.chunk_width(chunk_index)
        first = chunk_index * self.plan.chunk_size
        derived = np.zeros(width, dtype=bool)
        if con is not None and "pi" in files.measures and files.stores_index(chunk_index):
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
            if measure not in files.measures or (measure == "pi" and (derived.all()
                                                                       or not files.stores_index(chunk_index))):
                continue                       # every PI of the chunk derived: the column stays NULL
            buffer = self.values.setdefault(measure, np.empty(self.cells))[:n]
            if self.all_kept:
                files.read_chunk(measure, chunk_index, out=buffer)
            else:
                full = files.read_chunk(measure, chunk_index, out=self.full)
                np.take(full, self.kept, axis=0, out=buffer.reshape(self.kept.size, width))
            if measure == "pi" and derived.any():
                buffer.reshape(self.kept.size, width)[:, derived] = np.nan
            if measure == "pi" and np.isnan(buffer).all():
                continue                       # derived, or projects without an investment: no PI
            columns[column] = pa.array(buffer, mask=~np.isfinite(buffer))     # NaN, +-inf -> NULL (PI: no investment)
        return result_table_for(set(columns)), pa.table(columns)


def result_table_for(columns: set) -> str:
    """The physical table for result rows with these columns: every PI derived (no PI column)
    goes to ``result_rows_pw``, or after tax ``result_rows_after_tax``; a stored PI to
    ``result_rows_full``. An all-NULL column would cost DuckDB as much as one of values."""
    if "profitability_index" in columns:
        return "result_rows_full"
    return "result_rows_after_tax" if "present_worth_before_tax" in columns else "result_rows_pw"


def write_result_rows(con, plan: Plan, chunk_index: int, first: int, target: str, rows: pa.Table,
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
                    [plan.run_id, chunk_index, first, first + plan.worth_files.chunk_width(chunk_index) - 1,
                     rows.num_rows, utc_now(), seconds])
        con.execute("UPDATE runs SET chunks_done = chunks_done + 1 WHERE run_id = ?", [plan.run_id])
    return rows.num_rows


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
        self.summaries = ThreadPoolExecutor(max_workers=1, thread_name_prefix=f"{DB_THREAD_PREFIX}summaries")
        self.rows = ThreadPoolExecutor(max_workers=1, thread_name_prefix=f"{DB_THREAD_PREFIX}rows")
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
            write_summaries(self.summary_con, self.plan, chunk, first, tables, time.perf_counter() - t0)
        except BaseException as exc:
            self.error = exc
            raise
        self.rows.submit(self._store_rows, chunk, t0)

    def _store_rows(self, chunk: int, t0: float) -> None:
        if self.stopping.is_set() or self.error is not None:
            return
        try:
            target, rows = self.columns.table(chunk, self.rows_con)
            write_result_rows(self.rows_con, self.plan, chunk, chunk * self.plan.chunk_size, target, rows,
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
