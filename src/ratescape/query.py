"""Query stage: run named SQL files from ``queries/`` read-only, with bound parameters.

A query file is plain SQL with a comment header::

    -- about: Projects accepted in every scenario of a run.
    -- param: run = latest  (run id; "latest" means the newest finished run)
    SELECT ... WHERE run_id = $run

Parameters are bound by DuckDB (``$name``), never pasted into the SQL text.
Queries run on a read-only connection with external access disabled, and
only a single SELECT (or WITH … SELECT) statement is accepted. A query is
stopped after a time limit (:data:`DEFAULT_TIMEOUT_SECONDS` unless the caller
gives another), so a runaway query (a recursive CTE without end) cannot hold
the database for ever.
"""
from __future__ import annotations

import re
import threading
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import polars as pl

from .errors import QueryError, RatescapeError
from .store.database import connect_read, fetch_frame

_PARAM = re.compile(r"^--\s*param:\s*(\w+)\s*=\s*(\S*)\s*(?:\((.*)\))?\s*$")
_ABOUT = re.compile(r"^--\s*about:\s*(.*)$")

#: Seconds a query may run before it is stopped (``ratescape query --timeout``; 0 = no limit).
DEFAULT_TIMEOUT_SECONDS = 300.0


def queries_dir() -> Path:
    """Folder of the bundled queries (the repository's ``queries/`` or the installed copy)."""
    here = Path(__file__).resolve().parent
    for candidate in (here / "_queries", here.parents[1] / "queries"):
        if candidate.is_dir():
            return candidate
    raise RatescapeError("the bundled queries folder is missing from this installation")


@dataclass
class QueryFile:
    name: str
    path: Path
    sql: str
    about: str = ""
    params: dict = field(default_factory=dict)   # name -> (default, help)


def parse_query_file(path: Path, shown: str | None = None) -> QueryFile:
    """Read a query file; errors name it as ``shown`` (the path given), never quote its content."""
    shown = shown or path.name
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise QueryError(f"{shown}: not a UTF-8 text file. Fix: give a .sql file of UTF-8 text") from None
    except OSError as exc:
        raise QueryError(f"{shown}: cannot read the query file ({exc.strerror}). Fix: check the path") from None
    q = QueryFile(path.stem, path, text)
    for line in text.splitlines():
        if m := _ABOUT.match(line.strip()):
            q.about = (q.about + " " + m.group(1)).strip()
        elif m := _PARAM.match(line.strip()):
            q.params[m.group(1)] = (m.group(2), (m.group(3) or "").strip())
    return q


def list_queries() -> list[QueryFile]:
    return [parse_query_file(p) for p in sorted(queries_dir().glob("*.sql"))]


def find_query(name_or_file: str) -> QueryFile:
    p = Path(name_or_file)
    if p.suffix == ".sql":
        if not p.is_file():
            raise QueryError(f"{name_or_file}: no such query file. Fix: check the path")
        return parse_query_file(p, name_or_file)
    candidate = queries_dir() / f"{name_or_file}.sql"
    if not candidate.is_file():
        names = ", ".join(q.name for q in list_queries())
        raise QueryError(f"no query named {name_or_file!r}. Fix: use one of: {names}, or a path to a .sql file")
    return parse_query_file(candidate)


def _coerce(value: str, key: str = "value"):
    for cast in (int, float):
        try:
            return cast(value)
        except ValueError:
            pass
    m = re.fullmatch(r"\s*([-+]?\d+(?:\.\d*)?|[-+]?\.\d+)\s*%\s*", value)
    if m:
        fraction = float(m.group(1)) / 100
        raise QueryError(f"--param {key}={value}: rates are fractions, and {value} is {fraction:g}. "
                         f"Fix: --param {key}={fraction:g}")
    return value


def _check_read_only(con, sql: str, shown: str = "the query") -> None:
    try:
        statements = con.extract_statements(sql)
    except duckdb.Error:
        # The parser's message quotes the offending text; a file reached through a link could be
        # anything on the machine, so only its name is shown.
        raise QueryError(f"{shown}: the query does not parse as SQL. "
                         "Fix: check the file's SQL (run it in a DuckDB shell to see where)") from None
    if len(statements) != 1:
        raise QueryError(f"a query file must hold exactly one statement, found {len(statements)}")
    kind = statements[0].type
    if kind != duckdb.StatementType.SELECT:
        raise QueryError(f"queries may only read: a {kind.name} statement was refused. "
                         "Fix: write a SELECT (or WITH ... SELECT) query")


def latest_run(con) -> str:
    row = con.execute("SELECT run_id FROM runs WHERE status = 'done' ORDER BY finished_at DESC, started_at DESC LIMIT 1").fetchone()
    if row is None:
        raise QueryError("the database has no finished run. Fix: run `ratescape screen --db DB` first")
    return row[0]


def _check_run_exists(con, run_id) -> None:
    if not con.execute("SELECT count(*) FROM runs WHERE run_id = ?", [str(run_id)]).fetchone()[0]:
        raise QueryError(f"no run {run_id!r} in this database. "
                         "Fix: list runs with `ratescape query --db DB runs`, or leave out --param run (the newest)")


def run_query(db_path, name_or_file: str, params: dict | None = None, *,
              timeout: float | None = DEFAULT_TIMEOUT_SECONDS) -> pl.DataFrame:
    """Run a bundled or user query read-only and return a Polars frame.

    The query is stopped after ``timeout`` seconds (None or 0: no limit) by interrupting the
    connection from a timer thread (DuckDB's ``interrupt()``); a ``run`` parameter must name a
    run in the database.
    """
    q = find_query(name_or_file)
    given = dict(params or {})
    unknown = set(given) - set(q.params)
    if unknown:
        known = ", ".join(f"{k} (default {v[0]})" for k, v in q.params.items()) or "none"
        raise QueryError(f"query {q.name!r} has no parameter {sorted(unknown)[0]!r}. Fix: its parameters are: {known}")
    con = connect_read(db_path)
    try:
        con.execute("SET enable_external_access = false")
        con.execute("SET lock_configuration = true")
        _check_read_only(con, q.sql, name_or_file)
        values = {}
        for key, (default, _help) in q.params.items():
            raw = given.get(key, default)
            if key == "run" and raw in ("latest", ""):
                values[key] = latest_run(con)
            else:
                values[key] = _coerce(raw, key) if isinstance(raw, str) else raw
                if key == "run":
                    _check_run_exists(con, values[key])
        used = {k: v for k, v in values.items() if re.search(r"\$" + re.escape(k) + r"\b", q.sql)}
        expired = threading.Event()

        def stop():
            expired.set()
            con.interrupt()

        timer = threading.Timer(timeout, stop) if timeout else None
        if timer is not None:
            timer.daemon = True
            timer.start()
        try:
            return fetch_frame(con, q.sql, used)
        except duckdb.Error as exc:
            if expired.is_set():
                raise QueryError(f"query {q.name!r} was stopped after {timeout:g} s, its time limit. Fix: narrow "
                                 "the query, or give a longer limit with --timeout SECONDS (0 = none)") from None
            raise QueryError(f"query {q.name!r} failed: {str(exc).splitlines()[0]}") from None
        finally:
            if timer is not None:
                timer.cancel()
    finally:
        con.close()
