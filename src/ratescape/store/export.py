"""Export a run's tables to Parquet files for other tools (read-only)."""
from __future__ import annotations

import os
import shutil
from pathlib import Path

import duckdb

from ..errors import RunError
from .database import connect_read, fetch_frame
from .outputs import OutputPathError, check_output_path, neutralise_frame, os_error_message
from .schema import TABLES, VIEWS

# Tables holding rows of a run (every one has a run_id column), in the order they are written.
RUN_TABLES = ("scenarios", "results", "project_summary", "irr_results", "irr_roots", "sensitivity", "spider",
              "group_decisions", "frontiers", "scenario_ranks", "portfolios", "selections", "greedy_selections",
              "portfolio_summary", "portfolio_regret")


def export_run(db_path, out_dir, *, run_id: str | None = None, tables: list[str] | None = None,
               fmt: str = "parquet", raw_csv: bool = False) -> dict:
    """Write each table's rows of a run to ``out_dir/TABLE.parquet`` (or ``.csv``); return {table: rows}.

    ``run_id`` defaults to the newest finished run; ``tables`` to every table of the run. The files
    are written into a temporary folder beside ``out_dir`` and moved into place when all are
    written, so a failure (disk full, read-only location, Ctrl-C) leaves no partial folder. CSV
    text cells a spreadsheet would run as formulas get a leading ``'`` unless ``raw_csv``.
    An ``out_dir`` that is the database, its write-ahead log or its worth-file folder is refused.
    """
    chosen = list(tables) if tables else list(RUN_TABLES)
    unknown = [t for t in chosen if t not in RUN_TABLES]
    if unknown:
        raise RunError(f"cannot export table {unknown[0]!r}. Fix: choose among {', '.join(RUN_TABLES)}")
    if fmt not in ("parquet", "csv"):
        raise RunError(f"cannot export as {fmt!r}. Fix: use parquet or csv")
    check_output_path(db_path, out_dir)
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise OutputPathError(f"--out {out_dir} is a file, not a folder. Fix: give a folder name, e.g. --out ./run-export")
    staging = out.parent / f".{out.name}.{os.getpid()}.partial"
    con = connect_read(db_path)
    try:
        try:
            staging.mkdir(parents=True, exist_ok=False)
        except FileExistsError:
            shutil.rmtree(staging)
            staging.mkdir(parents=True)
        counts = _write_tables(con, staging, chosen, run_id, fmt, raw_csv)
        _move_into_place(staging, out)
        return counts
    except OSError as exc:
        raise OutputPathError(os_error_message(exc, out_dir)) from None
    except duckdb.Error as exc:     # DuckDB wraps the operating system's refusal (disk full, read-only)
        raise OutputPathError(f"cannot write {out_dir}: {str(exc).splitlines()[0]}. "
                              "Fix: choose a folder you can write to on a disk with free space") from None
    finally:
        con.close()
        shutil.rmtree(staging, ignore_errors=True)


def _move_into_place(staging: Path, out: Path) -> None:
    """Rename the finished staging folder to ``out``, or move its files into an existing ``out``."""
    if not out.exists():
        os.replace(staging, out)
        return
    for f in sorted(staging.iterdir()):
        os.replace(f, out / f.name)


def _write_tables(con, out: Path, chosen, run_id, fmt, raw_csv) -> dict:
    """Write each chosen table of the run into ``out``; return the run id and row counts."""
    if run_id is None:
        row = con.execute("SELECT run_id FROM runs WHERE status = 'done' "
                          "ORDER BY finished_at DESC LIMIT 1").fetchall()
        if not row:
            raise RunError("the database has no finished run. Fix: run `ratescape screen` first")
        run_id = row[0][0]
    elif not con.execute("SELECT count(*) FROM runs WHERE run_id = ?", [run_id]).fetchall()[0][0]:
        raise RunError(f"no run {run_id!r} in this database. Fix: list runs with `ratescape query --db DB runs`")
    counts = {}
    for table in chosen:
        assert table in TABLES or table in VIEWS  # names come from the fixed list above, never from user text
        sql = f"SELECT * EXCLUDE (run_id) FROM {table} WHERE run_id = ?"
        target = out / f"{table}.{fmt}"
        if fmt == "parquet":
            con.sql(sql, params=[run_id]).write_parquet(str(target))
        else:
            frame = fetch_frame(con, sql, [run_id])
            (frame if raw_csv else neutralise_frame(frame)).write_csv(str(target))
        counts[table] = con.execute(f"SELECT count(*) FROM {table} WHERE run_id = ?", [run_id]).fetchall()[0][0]
    return {"run_id": run_id, "tables": counts}
