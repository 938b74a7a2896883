"""Query stage: run named SQL files from ``queries/`` read-only, with bound parameters.

A query file is plain SQL with a comment header::

    -- about: Projects accepted in every scenario of a run.
    -- param: run = latest  (run id; "latest" means the newest finished run)
    SELECT ... WHERE run_id = $run

Parameters are bound by DuckDB (``$name``), never pasted into the SQL text.
Queries run on a read-only connection with external access disabled, and
only a single SELECT (or WITH … SELECT) statement is accepted.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import polars as pl

from .errors import QueryError, RatescapeError
from .store.database import connect_read, fetch_frame

_PARAM = re.compile(r"^--\s*param:\s*(\w+)\s*=\s*(\S*)\s*(?:\((.*)\))?\s*$")
_ABOUT = re.compile(r"^--\s*about:\s*(.*)$")


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


def parse_query_file(path: Path) -> QueryFile:
    text = path.read_text(encoding="utf-8")
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
        return parse_query_file(p)
    candidate = queries_dir() / f"{name_or_file}.sql"
    if not candidate.is_file():
        names = ", ".join(q.name for q in list_queries())
        raise QueryError(f"no query named {name_or_file!r}. Fix: use one of: {names}, or a path to a .sql file")
    return parse_query_file(candidate)


def _coerce(value: str):
    for cast in (int, float):
        try:
            return cast(value)
        except ValueError:
            pass
    return value


def _check_read_only(con, sql: str) -> None:
    try:
        statements = con.extract_statements(sql)
    except duckdb.Error as exc:
        raise QueryError(f"the query does not parse: {exc}") from None
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


def run_query(db_path, name_or_file: str, params: dict | None = None) -> pl.DataFrame:
    """Run a bundled or user query read-only and return a Polars frame."""
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
        _check_read_only(con, q.sql)
        values = {}
        for key, (default, _help) in q.params.items():
            raw = given.get(key, default)
            if key == "run" and raw in ("latest", ""):
                values[key] = latest_run(con)
            else:
                values[key] = _coerce(raw) if isinstance(raw, str) else raw
        used = {k: v for k, v in values.items() if re.search(r"\$" + re.escape(k) + r"\b", q.sql)}
        try:
            return fetch_frame(con, q.sql, used)
        except duckdb.Error as exc:
            raise QueryError(f"query {q.name!r} failed: {str(exc).splitlines()[0]}") from None
    finally:
        con.close()
