"""What the report reads of a run, through the read-only connection: the run's row, its settings
and small aggregates computed in DuckDB (never a projects x scenarios matrix in Python).
"""
from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import duckdb
import polars as pl

from ratescape.errors import RatescapeError

#: The one status ``runs.status`` holds for a finished run (written by ``run/screen.py``).
DONE_STATUS = "done"


class ReportError(RatescapeError, ValueError):
    """The report cannot be built from this database or with these arguments."""


def table_names(con: duckdb.DuckDBPyConnection) -> set[str]:
    return {r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables").fetchall()}


def column_names(con: duckdb.DuckDBPyConnection, table: str) -> list[str]:
    return [r[0] for r in con.execute(
        "SELECT column_name FROM information_schema.columns WHERE table_name = ? "
        "ORDER BY ordinal_position", [table]).fetchall()]


def query_frame(con: duckdb.DuckDBPyConnection, sql: str, params: Sequence[Any] = ()) -> pl.DataFrame:
    # every execute() in this module is fetched to the end (fetchall), as DuckDB requires
    # before the next relation query on the same connection
    return con.sql(sql, params=list(params) or None).pl()


def quote_ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def pick_run(con: duckdb.DuckDBPyConnection, run_id: str | None) -> dict[str, Any]:
    if run_id is None:
        row = con.execute(
            "SELECT run_id FROM runs WHERE status = ? "
            "ORDER BY finished_at DESC NULLS LAST, started_at DESC NULLS LAST LIMIT 1", [DONE_STATUS]).fetchall()
        if not row:
            seen = con.execute("SELECT run_id, status FROM runs ORDER BY started_at").fetchall()
            raise ReportError(
                "no finished run in the database (runs: "
                + (", ".join(f"{r} [{s}]" for r, s in seen) or "none")
                + "); finish one with `ratescape screen` (or `--resume RUN_ID`) or pass --run")
        run_id = row[0][0]
    frame = query_frame(con, "SELECT * FROM runs WHERE run_id = ?", [run_id])
    if frame.height == 0:
        known = [r[0] for r in con.execute("SELECT run_id FROM runs ORDER BY started_at").fetchall()]
        raise ReportError(f"no run {run_id!r} in the database; known runs: {known or 'none'}")
    run = frame.row(0, named=True)
    if run["status"] != DONE_STATUS:
        raise ReportError(f"run {run_id!r} is {run['status']!r}, not finished; finish it with "
                          f"`ratescape screen --resume {run_id}` or pick a finished run with --run")
    return run


def thin_levels(levels: list[float], keep: int) -> list[float]:
    """At most ``keep`` levels, evenly spaced by index, first and last kept."""
    if len(levels) <= keep:
        return levels
    idx = sorted({round(i * (len(levels) - 1) / (keep - 1)) for i in range(keep)})
    return [levels[i] for i in idx]


class RunContext:
    """Shared context of one report: connection, run row, scenario axes."""

    def __init__(self, con: duckdb.DuckDBPyConnection, run: dict[str, Any]):
        self.con = con
        self.run = run
        self.run_id = run["run_id"]
        self.tables = table_names(con)
        basis = str(run.get("discount_basis") or "nominal").lower()
        self.x = "real_rate" if basis == "real" else "discount_rate"
        self.y = "inflation"
        self.scenario_count = con.execute(
            "SELECT count(*) FROM scenarios WHERE run_id = ?", [self.run_id]).fetchall()[0][0]
        self.project_count = con.execute(
            "SELECT count(*) FROM project_summary WHERE run_id = ?", [self.run_id]).fetchall()[0][0]
        self.base = self._base_scenario()
        self.plane_filter, self.plane_params = self._plane_filter()
        self.narrow = self._has_narrow_rows()

    def _has_narrow_rows(self) -> bool:
        """True when the run's rows are in `result_rows` (schema 2): read them there, joining the
        run's scenarios by key, instead of through the `results` view's wider joins."""
        if "result_rows" not in self.tables or "scenario_key" not in column_names(self.con, "scenarios"):
            return False
        return bool(self.con.execute("SELECT count(*) FROM scenarios WHERE run_id = ? AND scenario_key IS NOT NULL",
                                     [self.run_id]).fetchall()[0][0])

    def rows(self, *, projects: list[str] | None = None) -> tuple[str, list[Any]]:
        """A relation of the run's result rows: scenario_id, project_id, present_worth, accepted.

        Returns SQL (for a FROM clause) and its parameters; ``projects`` restricts it to those ids
        (filtered by project key before the join, so the other rows are never joined).
        """
        if not self.narrow:
            where = " AND list_contains(?, project_id)" if projects is not None else ""
            return (f"(SELECT scenario_id, project_id, present_worth, accepted FROM results "
                    f"WHERE run_id = ?{where})", [self.run_id] + ([projects] if projects is not None else []))
        keys = ""
        params: list[Any] = [self.run_id, self.run_id]
        if projects is not None:
            keys = " AND list_contains(?, ps.project_id)"
            params.append(projects)
        return (f"""(SELECT sc.scenario_id, ps.project_id, x.present_worth, x.present_worth >= 0 AS accepted
                    FROM result_rows x
                    JOIN (SELECT scenario_key, scenario_id FROM scenarios WHERE run_id = ?) sc
                      ON sc.scenario_key = x.scenario_key
                    JOIN (SELECT project_key, project_id FROM project_summary ps WHERE run_id = ?{keys}) ps
                      ON ps.project_key = x.project_key)""", params)

    def _base_scenario(self) -> dict[str, Any] | None:
        f = query_frame(self.con, "SELECT * FROM scenarios WHERE run_id = ? ORDER BY is_base DESC, scenario_id LIMIT 1"
               if "is_base" in column_names(self.con, "scenarios") else
               "SELECT * FROM scenarios WHERE run_id = ? ORDER BY scenario_id LIMIT 1", [self.run_id])
        if self.run.get("base_scenario_id") is not None:
            g = query_frame(self.con, "SELECT * FROM scenarios WHERE run_id = ? AND scenario_id = ?",
                   [self.run_id, self.run["base_scenario_id"]])
            if g.height:
                return g.row(0, named=True)
        return f.row(0, named=True) if f.height else None

    def _plane_filter(self) -> tuple[str, list[Any]]:
        """SQL keeping the x-y plane through the base scenario when other axes exist."""
        known = {"run_id", "scenario_id", "discount_rate", "real_rate", "inflation", "weight", "is_base",
                 "scenario_key"}
        others = [c for c in column_names(self.con, "scenarios") if c not in known]
        if not others or self.base is None:
            return "TRUE", []
        cond = " AND ".join(f"s.{quote_ident(c)} IS NOT DISTINCT FROM ?" for c in others)
        return cond, [self.base[c] for c in others]

    def levels(self, column: str) -> list[float]:
        rows = self.con.execute(
            f"SELECT DISTINCT s.{quote_ident(column)} FROM scenarios s WHERE s.run_id = ? AND "
            f"{self.plane_filter} AND s.{quote_ident(column)} IS NOT NULL ORDER BY 1",
            [self.run_id, *self.plane_params]).fetchall()
        return [r[0] for r in rows]


def project_table(ctx: RunContext, where: str, order: str, columns: str, params: Sequence[Any],
                   limit: int) -> tuple[pl.DataFrame, int]:
    base = (f"FROM project_summary ps LEFT JOIN run_project_names p ON p.run_id = ps.run_id AND p.project_id = ps.project_id "
            f"WHERE ps.run_id = ? AND ({where})")
    count = ctx.con.execute(f"SELECT count(*) {base}", [ctx.run_id, *params]).fetchall()[0][0]
    frame = query_frame(ctx.con, f"SELECT {columns} {base} ORDER BY {order} LIMIT ?", [ctx.run_id, *params, limit])
    return frame, count


def bundled_sql(name: str) -> str:
    """Text of a bundled query file (``queries/NAME.sql``), so the report and ``ratescape query`` share
    one definition (e.g. of failing under high inflation)."""
    from pathlib import Path

    here = Path(__file__).resolve().parents[1]
    for folder in (here / "_queries", here.parents[1] / "queries"):
        path = folder / f"{name}.sql"
        if path.is_file():
            return path.read_text(encoding="utf-8")
    raise ReportError(f"the bundled query {name!r} is missing from this installation")
