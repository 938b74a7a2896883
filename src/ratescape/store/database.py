"""Opening a ratescape database: read-write for one writer, read-only for everyone else."""
from __future__ import annotations

import re
from contextlib import contextmanager
from pathlib import Path

import duckdb

from ..errors import DatabaseBusyError, RatescapeError
from .schema import SCHEMA_VERSION, create_schema


def _busy_message(path, exc: Exception, *, writing: bool = False) -> str:
    """Who holds the file, truthfully: DuckDB's lock error says when the holder only reads it."""
    text = str(exc)
    m = re.search(r"PID (\d+)", text)
    who = f"process {m.group(1)}" if m else "another process"
    if writing and "read-only mode" in text:
        return (f"database busy: {path} is open for reading by {who} (a query, report, chart or export). "
                f"Fix: wait for it to finish (or stop it), then run again")
    return (f"database busy: {path} is open for writing by {who}. "
            f"Fix: wait for it to finish (or stop it), then run again; read-only queries work once no writer is active")


# A DuckDB database file carries this magic at byte 8 of its header (DuckDB storage format, common practice).
DUCKDB_MAGIC = b"DUCK"


def check_database_file(path: str | Path) -> None:
    """Refuse a path that exists and is not a DuckDB database file (a CSV, a folder, an empty file)."""
    p = Path(path)
    if not p.exists():
        return
    if p.is_dir():
        raise RatescapeError(f"--db {path} is a folder, not a database file. Fix: give a file name, "
                             f"e.g. --db {p / 'plan.duckdb'}")
    try:
        with open(p, "rb") as fh:
            head = fh.read(16)
    except OSError as exc:
        raise RatescapeError(f"cannot read {path}: {exc.strerror}. Fix: check the path and its permissions") from None
    if head[8:12] != DUCKDB_MAGIC:
        what = "an empty file" if not head else "not a DuckDB database (no DuckDB header)"
        raise RatescapeError(f"--db {path} exists and is {what}; it was left untouched. "
                             "Fix: give the name of a ratescape database, or a new file name such as plan.duckdb")


def _check_made_by_ratescape(con, path) -> None:
    """Refuse a DuckDB file another program made: it has tables but no ratescape schema version."""
    tables = {r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()}
    if not tables:
        return
    version = None
    if "meta" in tables:
        try:
            row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchall()
            version = row[0][0] if row else None
        except duckdb.Error:
            version = None
    if version is None:
        raise RatescapeError(f"--db {path} is a DuckDB database made by another program (it has tables but no "
                             "ratescape schema version); ratescape will not add its tables to it. "
                             "Fix: give a new file name for the ratescape database")


def _check_version_readable(con, path) -> None:
    try:
        row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchall()
    except duckdb.Error:
        raise RatescapeError(f"{path} is not a ratescape database (it has no ratescape schema version). "
                             "Fix: give the --db file that `ratescape load` wrote") from None
    if not row:
        raise RatescapeError(f"{path} is not a ratescape database (it has no ratescape schema version). "
                             "Fix: give the --db file that `ratescape load` wrote")
    try:
        version = int(row[0][0])
    except (TypeError, ValueError):
        version = None
    if version is None or version > SCHEMA_VERSION:
        raise RatescapeError(f"{path} has schema version {row[0][0]}, newer than this ratescape reads (version "
                             f"{SCHEMA_VERSION}). Fix: use the ratescape version that wrote it, or upgrade ratescape")


def connect_write(path: str | Path) -> duckdb.DuckDBPyConnection:
    """Open (creating if needed) a database for writing; one writer at a time.

    Refuses a path that exists and is not a DuckDB file, a DuckDB file another program made, and a
    database of another schema version, leaving each untouched.
    """
    check_database_file(path)
    try:
        con = duckdb.connect(str(path))
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise DatabaseBusyError(_busy_message(path, exc, writing=True)) from None
        raise RatescapeError(f"cannot open {path}: {str(exc).splitlines()[0]}. "
                             "Fix: give a ratescape database file or a new file name") from None
    except duckdb.Error as exc:
        raise RatescapeError(f"cannot open {path}: {str(exc).splitlines()[0]}. "
                             "Fix: give a ratescape database file or a new file name") from None
    try:
        _check_made_by_ratescape(con, path)
        create_schema(con)
    except BaseException:
        con.close()
        raise
    return con


# DuckDB's own default is 80 % of the machine's memory; queries over a 260-million-row run spill to
# disk beyond this instead.
READ_MEMORY_LIMIT = "2GB"


def connect_read(path: str | Path) -> duckdb.DuckDBPyConnection:
    """Open an existing database read-only (queries and reports)."""
    p = Path(path)
    if not p.is_file():
        raise RatescapeError(f"{path}: no such database. Fix: run `ratescape load` first or check --db")
    check_database_file(p)
    try:
        con = duckdb.connect(str(p), read_only=True)
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise DatabaseBusyError(_busy_message(path, exc)) from None
        raise RatescapeError(f"cannot open {path}: {str(exc).splitlines()[0]}. The file may be damaged. "
                             "Fix: restore it from a copy, or load the portfolio into a new database") from None
    except duckdb.Error as exc:
        raise RatescapeError(f"{path} is not a readable ratescape database ({str(exc).splitlines()[0]}). "
                             "Fix: restore it from a copy, or load the portfolio into a new database") from None
    try:
        con.execute(f"SET memory_limit = '{READ_MEMORY_LIMIT}'")   # large joins spill instead of growing
        _check_version_readable(con, path)
        _name_runs_of_older_databases(con)
    except BaseException:
        con.close()
        raise
    return con


def _name_runs_of_older_databases(con) -> None:
    """A database written before ``run_projects`` has no ``run_project_names`` view and a read-only
    connection cannot add it: a temporary one names every run from today's projects."""
    from .schema import RUN_PROJECT_NAMES_FALLBACK
    present = {r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()}
    if "run_project_names" not in present and {"runs", "projects"} <= present:
        con.execute(RUN_PROJECT_NAMES_FALLBACK)


#: the name prefix of every thread that runs statements on a cursor of a run's connection
DB_THREAD_PREFIX = "ratescape-db-"


def close_when_idle(con, wait_seconds: float = 120.0) -> None:
    """Close a connection whose cursors other ratescape threads may still be using.

    DuckDB refuses to close a connection while one of its cursors runs a statement on another
    thread ("connection is busy"). After an interruption a writer or reader thread can still be
    finishing its transaction (one started in the instant the signal arrived, before its pool
    knew of it): wait for the database threads (named ``ratescape-db-...``; their pools are shut
    down on the way out, so they end) to finish, then close.
    """
    import threading
    import time
    try:
        con.close()
        return
    except duckdb.Error as exc:
        if "busy" not in str(exc).lower():
            raise
    deadline = time.monotonic() + wait_seconds
    for thread in threading.enumerate():
        if thread is not threading.current_thread() and thread.name.startswith(DB_THREAD_PREFIX):
            thread.join(max(0.0, deadline - time.monotonic()))
    con.close()


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


#: What the report and the queries say of a run screened on a portfolio that has been replaced since.
PORTFOLIO_RELOADED = ("the portfolio was reloaded after this run was screened: project names and inputs shown "
                      "beside its results are today's, not necessarily those it screened")

#: The same for a run that kept the names of the portfolio it screened (run_projects).
PORTFOLIO_RELOADED_KEPT = ("the portfolio was reloaded after this run was screened: project names and groups "
                           "shown are those it screened (kept with the run); today's portfolio may differ")


def portfolio_reloaded_since(con, run_id: str) -> bool:
    """True when the database's current portfolio (latest load) is not the one ``run_id`` screened."""
    row = con.execute("SELECT r.inputs_hash, (SELECT l.inputs_hash FROM loads l ORDER BY l.load_id DESC LIMIT 1) "
                      "FROM runs r WHERE r.run_id = ?", [run_id]).fetchall()
    return bool(row) and row[0][0] is not None and row[0][0] != row[0][1]


def reloaded_note(con, run_id: str) -> str | None:
    """What to say of ``run_id`` when the portfolio was reloaded since it (None when it was not):
    whether the names shown are the run's own or today's."""
    if not portfolio_reloaded_since(con, run_id):
        return None
    kept = con.execute("SELECT bool_or(from_snapshot) FROM run_project_names WHERE run_id = ?",
                       [run_id]).fetchall()
    return PORTFOLIO_RELOADED_KEPT if kept and kept[0][0] else PORTFOLIO_RELOADED
