"""Opening a ratescape database: read-write for one writer, read-only for everyone else."""
from __future__ import annotations

import re
from contextlib import contextmanager
from pathlib import Path

import duckdb

from ..errors import DatabaseBusyError, RatescapeError
from .schema import create_schema


def _busy_message(path, exc: Exception) -> str:
    text = str(exc)
    m = re.search(r"PID (\d+)", text)
    who = f"process {m.group(1)}" if m else "another process"
    return (f"database busy: {path} is open for writing by {who}. "
            f"Fix: wait for it to finish (or stop it), then run again; read-only queries work once no writer is active")


def connect_write(path: str | Path) -> duckdb.DuckDBPyConnection:
    """Open (creating if needed) a database for writing; one writer at a time."""
    try:
        con = duckdb.connect(str(path))
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise DatabaseBusyError(_busy_message(path, exc)) from None
        raise RatescapeError(f"cannot open {path}: {exc}") from None
    create_schema(con)
    return con


# DuckDB's own default is 80 % of the machine's memory; queries over a 260-million-row run spill to
# disk beyond this instead.
READ_MEMORY_LIMIT = "2GB"


def connect_read(path: str | Path) -> duckdb.DuckDBPyConnection:
    """Open an existing database read-only (queries and reports)."""
    p = Path(path)
    if not p.is_file():
        raise RatescapeError(f"{path}: no such database. Fix: run `ratescape load` first or check --db")
    try:
        con = duckdb.connect(str(p), read_only=True)
        con.execute(f"SET memory_limit = '{READ_MEMORY_LIMIT}'")   # large joins spill instead of growing
        return con
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise DatabaseBusyError(_busy_message(path, exc)) from None
        raise RatescapeError(f"cannot open {path}: {exc}") from None
    except duckdb.Error as exc:
        raise RatescapeError(f"{path} is not a ratescape database ({exc})") from None


def is_interrupt(exc: BaseException) -> bool:
    """True for Ctrl-C, including DuckDB's own form of it (a query interrupted by SIGINT)."""
    text = str(exc).lower()
    return isinstance(exc, KeyboardInterrupt) or (
        isinstance(exc, (RuntimeError, duckdb.Error)) and ("interrupted" in text or "keyboardinterrupt" in text))


@contextmanager
def transaction(con):
    """BEGIN … COMMIT, or ROLLBACK on any exception (including KeyboardInterrupt).

    DuckDB reports Ctrl-C during a query as an "interrupted" error; it is re-raised as
    KeyboardInterrupt so callers treat it as the user's interruption, not a failure.
    """
    con.execute("BEGIN TRANSACTION")
    try:
        yield con
    except BaseException as exc:
        con.execute("ROLLBACK")
        if is_interrupt(exc) and not isinstance(exc, KeyboardInterrupt):
            raise KeyboardInterrupt(str(exc)) from exc
        raise
    else:
        con.execute("COMMIT")


def fetch_frame(con, sql: str, params=None):
    """Run ``sql`` with bound ``params`` and return a Polars frame (DuckDB 2 has no cursor ``.pl()``)."""
    import warnings

    import polars as pl

    with warnings.catch_warnings():  # DuckDB 2 warns that DB-API Arrow output copies rows; ours are small
        warnings.simplefilter("ignore", UserWarning)
        table = con.execute(sql, params if params else []).to_arrow_table()
    return pl.from_arrow(table)


def append_rows(con, table: str, rows, run_id: str) -> None:
    """Append an Arrow table's rows to ``table`` with the run id in front (inside the caller's transaction).

    Columns are matched by name, so the Arrow table may hold any subset of the table's columns.
    ``table`` comes from the code, never from user text.
    """
    if rows.num_rows == 0:
        return
    view = f"incoming_{table}"
    names = ", ".join(rows.column_names)
    con.register(view, rows)
    try:
        con.execute(f"INSERT INTO {table} (run_id, {names}) SELECT ?, {names} FROM {view}", [run_id])
    finally:
        con.unregister(view)
