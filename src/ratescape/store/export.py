"""Export a run's tables to Parquet files for other tools (read-only)."""
from __future__ import annotations

from pathlib import Path

from ..errors import RunError
from .database import connect_read
from .schema import TABLES, VIEWS

# Tables holding rows of a run (every one has a run_id column), in the order they are written.
RUN_TABLES = ("scenarios", "results", "project_summary", "irr_results", "irr_roots", "sensitivity", "spider",
              "group_decisions", "frontiers", "scenario_ranks", "portfolios", "selections", "greedy_selections",
              "portfolio_summary", "portfolio_regret")


def export_run(db_path, out_dir, *, run_id: str | None = None, tables: list[str] | None = None) -> dict:
    """Write each table's rows of a run to ``out_dir/TABLE.parquet``; return {table: rows}.

    ``run_id`` defaults to the newest finished run; ``tables`` to every table of the run.
    """
    chosen = list(tables) if tables else list(RUN_TABLES)
    unknown = [t for t in chosen if t not in RUN_TABLES]
    if unknown:
        raise RunError(f"cannot export table {unknown[0]!r}. Fix: choose among {', '.join(RUN_TABLES)}")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    con = connect_read(db_path)
    try:
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
            rel = con.sql(f"SELECT * EXCLUDE (run_id) FROM {table} WHERE run_id = ?", params=[run_id])
            target = out / f"{table}.parquet"
            tmp = target.with_name(f".{target.name}.tmp")
            rel.write_parquet(str(tmp))
            tmp.replace(target)
            counts[table] = con.execute(f"SELECT count(*) FROM {table} WHERE run_id = ?", [run_id]).fetchall()[0][0]
        return {"run_id": run_id, "tables": counts}
    finally:
        con.close()
