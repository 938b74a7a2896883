"""Write a validated portfolio into the database as one transaction."""
from __future__ import annotations

from datetime import datetime, timezone

import polars as pl

from .. import __version__
from ..load import Portfolio
from .database import transaction

PROJECT_COLUMNS = ["project_key", "project_id", "name", "group_name", "requires", "mandatory", "category",
                   "first_cost", "annual_benefit", "benefit_basis", "benefit_escalation", "annual_cost",
                   "cost_basis", "cost_escalation", "salvage", "life", "depreciation_method", "depreciation_convention",
                   "service_quarter", "recovery_years",
                   "depreciable_basis", "loan_amount", "loan_rate", "loan_term", "source_line", "terminal_value"]
CASH_FLOW_COLUMNS = ["project_id", "period", "amount", "basis", "escalation", "kind", "source", "source_line"]


def store_portfolio(con, portfolio: Portfolio) -> int:
    """Replace the database's portfolio with ``portfolio`` atomically; return the load id.

    Earlier runs and their results stay; each run records the hash of the
    inputs it screened.
    """
    projects = portfolio.projects.with_row_index("project_key").with_columns(
        pl.col("project_key").cast(pl.Int32)).select(PROJECT_COLUMNS)
    flows = portfolio.cash_flows.select(CASH_FLOW_COLUMNS)
    with transaction(con):
        con.execute("DELETE FROM projects")
        con.execute("DELETE FROM cash_flows")
        con.register("incoming_projects", projects.to_arrow())
        con.execute(f"INSERT INTO projects ({', '.join(PROJECT_COLUMNS)}) SELECT * FROM incoming_projects")
        con.unregister("incoming_projects")
        con.register("incoming_flows", flows.to_arrow())
        con.execute(f"INSERT INTO cash_flows ({', '.join(CASH_FLOW_COLUMNS)}) SELECT * FROM incoming_flows")
        con.unregister("incoming_flows")
        load_id = con.execute("SELECT coalesce(max(load_id), 0) + 1 FROM loads").fetchone()[0]
        con.execute("INSERT INTO loads VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)", [
            load_id, datetime.now(timezone.utc).replace(tzinfo=None), portfolio.files.get("projects"),
            portfolio.files.get("cash_flows"), portfolio.inputs_hash, projects.height, flows.height,
            __version__, "\n".join(portfolio.notes)])
    return load_id
