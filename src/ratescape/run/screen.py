"""The screen: stream projects from DuckDB through the engine and back, chunk by chunk.

Orchestration only. Each chunk of projects is evaluated over every scenario and committed in two
stages (its per-project tables, then its result rows), so an interrupted run can be resumed with
``--resume RUN_ID`` and ends with exactly the rows an uninterrupted run would have. When every
chunk is stored, the rank pass and the decision stage run and the run is marked done in one
transaction.
"""
from __future__ import annotations

import os
import threading
import time
import uuid
from datetime import datetime

import duckdb
import numpy as np
import pyarrow as pa

from ratescape import __version__
from ratescape.errors import RunError
from ratescape.evaluate.kernel import capital_recovery_factor
from ratescape.run.decisions import check_alternatives, decide_groups, decide_run
from ratescape.run.evaluation import evaluate_chunk
from ratescape.run.plan import (
    CHECKPOINT_THRESHOLD,
    DUCKDB_MEMORY_LIMIT,
    Plan,
    current_inputs,
    convention_notes,
    make_plan,
    utc_now,
)
from ratescape.run.progress import Progress, log
from ratescape.run.rationing_stage import check_rationing_fits, ration_stage
from ratescape.run.ranks import ensure_worth_files, rank_statistics
from ratescape.run.read import ChunkReader
from ratescape.run.write import ChunkWriter, arrow_floats
from ratescape.settings import RunSettings
from ratescape.store.database import append_rows, is_interrupt, transaction
from ratescape.run.notes import write_overflow_note, write_run_notes
from ratescape.store.worth_files import WorthFiles, worth_files_folder


def _finalize(con, plan: Plan, writer: "ChunkWriter | None" = None, reader=None, progress: bool = True) -> None:
    """Rank statistics across all projects per scenario (while ``writer`` still stores result rows),
    capital rationing (committed block by block), the groups' decisions (committed a batch of groups
    at a time), then the summaries and the run marked done in one transaction."""
    t0 = time.perf_counter()
    stats, agreement = rank_statistics(reader if reader is not None else con, plan, progress=progress)
    log(f"ranks: {plan.project_count:,} projects x {plan.scenarios.size:,} scenarios in "
        f"{time.perf_counter() - t0:.1f} s")
    if writer is not None:
        t0 = time.perf_counter()
        writer.finish()
        log(f"result rows: the last chunks stored {time.perf_counter() - t0:.1f} s after the rank pass")
    ration_stage(con, plan, progress=progress)
    t0 = time.perf_counter()
    decide_groups(con, plan, progress=progress)
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
            **{k: arrow_floats(v) for k, v in agreement.items()}}), plan.run_id)
        decide_run(con, plan, progress=progress)
        overflow = write_overflow_note(con, plan.run_id)
        con.execute("UPDATE runs SET status = 'done', finished_at = ?, message = NULL WHERE run_id = ?",
                    [utc_now(), plan.run_id])
    log(f"decisions and summaries stored in {time.perf_counter() - t0:.1f} s")
    if overflow:
        log(f"note: {overflow}")
    # The run is done: its worth files are deleted (freeing gigabytes of cached pages takes the
    # kernel a second or two) while DuckDB checkpoints the run into the database file, which
    # closing the connection would otherwise do afterwards.
    removing = threading.Thread(target=plan.worth_files.remove, name="ratescape-worth-files-remove")
    removing.start()
    try:
        con.execute("CHECKPOINT")
    except duckdb.Error:
        pass                            # e.g. another transaction open: the close checkpoints instead
    finally:
        removing.join()


def screen(con, spec: RunSettings | None = None, *, resume: str | None = None, chunk_size: int | None = None,
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
        inputs_hash, _, _ = current_inputs(con)
        if inputs_hash != run_hash:
            raise RunError(f"the portfolio was reloaded after run {resume} started, so it cannot be resumed. "
                           "Fix: start a new run with `ratescape screen`")
        spec = RunSettings.from_json(grid_json)
        plan = make_plan(con, resume, spec, stored_chunk)
        check_rationing_fits(plan)
        plan.scenario_key_base = int(con.execute("SELECT min(scenario_key) FROM scenarios WHERE run_id = ?",
                                                 [resume]).fetchall()[0][0])
        con.execute("UPDATE runs SET status = 'running', process_id = ?, message = NULL WHERE run_id = ?",
                    [os.getpid(), resume])
        log(f"resuming run {resume}")
    else:
        if spec is None:
            raise RunError("no grid given")
        run_id = f"run-{datetime.now().strftime('%Y%m%d-%H%M%S')}-{uuid.uuid4().hex[:6]}"
        plan = make_plan(con, run_id, spec, chunk_size)
        check_alternatives(con, spec)           # before anything of the run is written
        check_rationing_fits(plan)              # refused before any work that could not finish
        if plan.project_count == 0:
            raise RunError("the portfolio has no projects. Fix: load a projects file first")
        inputs_hash, _, _ = current_inputs(con)
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
        notes = convention_notes(con, spec)
        with transaction(con):
            con.execute("INSERT INTO runs VALUES (?, 'running', ?, NULL, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 0, ?, NULL)", [
                run_id, utc_now(), __version__, inputs_hash, spec.to_json(), spec.discount_basis, spec.timing,
                float(spec.periods_per_year), bool(spec.after_tax), plan.project_count, S,
                plan.scenarios.base_index, plan.chunk_size, plan.chunk_count, os.getpid()])
            # the portfolio this run screens, as its queries and report will name it after a reload
            con.execute("INSERT INTO run_projects SELECT ?, project_id, project_key, name, group_name, category "
                        "FROM projects", [run_id])
            for topic, note in notes.items():
                con.execute("INSERT OR REPLACE INTO run_notes VALUES (?, ?, ?)", [run_id, topic, note]).fetchall()
            con.register("new_scenarios", scen)
            con.execute("INSERT INTO scenarios SELECT ?, * FROM new_scenarios", [run_id])
            con.unregister("new_scenarios")
            con.register("new_annual_factors", annual)
            con.execute("INSERT INTO annual_factors SELECT * FROM new_annual_factors")
            con.unregister("new_annual_factors")
            write_run_notes(con, plan)
        log(f"run {run_id}: {plan.project_count} projects x {S} scenarios in {plan.chunk_count} chunk(s)")
    plan.worth_files = WorthFiles(worth_files_folder(con, plan.run_id), plan.scenarios.size, plan.project_count,
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
            ensure_worth_files(reader, plan, rows_todo)
        if cluster or workers:
            from ratescape.run.cluster import DaskEvaluator
            evaluator = DaskEvaluator(evaluate_chunk, plan, address=cluster, workers=workers)
        else:
            from ratescape.run.cluster import LocalEvaluator
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
        _finalize(con, plan, writer, reader, progress)       # ranks while the rows thread stores the rest
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
