"""The Python API: the same operations as the command line, returning Polars frames."""
from __future__ import annotations

from pathlib import Path

import polars as pl

from .settings import make_run_settings, parse_budget, read_settings_toml
from .load import read_portfolio
from .store.database import close_when_idle, connect_read, connect_write, fetch_frame
from .store.portfolio_writer import store_portfolio


def load_portfolio(projects, cash_flows=None, db=None, *, allow_extreme_rates: bool = False) -> dict:
    """Validate CSV files and (if ``db`` is given) load them atomically; return counts and notes.

    Raises ValidationError listing every problem; nothing is written then. Escalation and loan
    rates above 100 % in size are refused as percentage typos unless ``allow_extreme_rates``.
    """
    portfolio = read_portfolio(projects, cash_flows, allow_extreme_rates=allow_extreme_rates)
    info = {"projects": portfolio.projects.height, "cash_flow_rows": portfolio.cash_flows.height,
            "notes": portfolio.notes, "inputs_hash": portfolio.inputs_hash}
    if db is not None:
        created = not Path(db).exists()
        con = connect_write(db)
        try:
            info["load_id"] = store_portfolio(con, portfolio)
            con.close()
        except BaseException:
            try:
                con.close()
            except Exception:
                pass
            if created:     # a first load that failed (e.g. at a file-size limit) leaves no database behind
                for path in (Path(db), Path(f"{db}.wal")):
                    path.unlink(missing_ok=True)
            raise
    return info


def screen_portfolio(db, *, grid=None, discount_rates=None, inflation=None, discount_basis=None, budgets=None,
                     timing=None, periods_per_year=None, after_tax=None, tax_rate=None, keep=None, chunk_size=None,
                     resume=None, cluster=None, workers=None, alternatives_basis=None, study_period=None,
                     progress=False, stop_after_chunks=None, state_tax_rate=None, federal_tax_rate=None,
                     losses=None, allow_extreme_rates=None, settings=None) -> str:
    """Screen the loaded portfolio over a grid (TOML path and/or overrides); return the run id.

    ``settings``: run settings already made by :func:`ratescape.settings.make_run_settings`
    (then the grid arguments are not read again).
    """
    from .run.screen import screen
    spec = settings
    if not resume and spec is None:
        toml_settings = read_settings_toml(grid) if grid else None
        budget_map = parse_budget(budgets) if budgets and isinstance(budgets, (list, tuple)) else budgets
        spec = make_run_settings(toml_settings=toml_settings, discount_rates=discount_rates, inflation=inflation,
                              discount_basis=discount_basis, budgets=budget_map or None, timing=timing,
                              periods_per_year=periods_per_year, after_tax=after_tax, tax_rate=tax_rate,
                              keep=keep, state_tax_rate=state_tax_rate, federal_tax_rate=federal_tax_rate,
                              losses=losses, allow_extreme_rates=allow_extreme_rates,
                              alternatives_basis=alternatives_basis, study_period=study_period)
    con = connect_write(db)
    try:
        return screen(con, spec, resume=resume, chunk_size=chunk_size, progress=progress,
                      stop_after_chunks=stop_after_chunks, cluster=cluster, workers=workers)
    finally:
        close_when_idle(con)


def read_table(db, sql: str, params=None) -> pl.DataFrame:
    """Run a read-only SQL statement against a ratescape database and return a Polars frame."""
    con = connect_read(db)
    try:
        return fetch_frame(con, sql, params)
    finally:
        con.close()
