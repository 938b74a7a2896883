"""The Python API: the same operations as the command line, returning Polars frames.

The screen's modules (settings, the numeric core) are imported by the functions that need them,
so ``ratescape load`` starts without compiling or importing them (and an early Ctrl-C finds it
outside a long import).
"""
from __future__ import annotations

from pathlib import Path

import polars as pl

from .load import scan_portfolio
from .run.progress import Progress, log
from .store.database import close_when_idle, connect_read, connect_write, fetch_frame
from .store.portfolio_writer import load_streamed


# Inputs at least this big show progress (a bar on a terminal, a line every 10 s otherwise) while
# they are read and checked, and a line before the database is written.
LOAD_PROGRESS_BYTES = 32 << 20


def load_portfolio(projects, cash_flows=None, db=None, *, allow_extreme_rates: bool = False,
                   progress: bool | None = None) -> dict:
    """Validate CSV files and (if ``db`` is given) load them atomically; return counts and notes.

    Raises ValidationError listing every problem (the first of each kind with a count of the
    rest); nothing is written then. Escalation and loan rates above 100 % in size are refused as
    percentage typos unless ``allow_extreme_rates``. The files are read block by block, so memory
    does not grow with their size (see DEVELOPERS.md, "The load"). ``progress``: report progress
    on standard error (default: for inputs of at least :data:`LOAD_PROGRESS_BYTES`).
    """
    sizes = sum(Path(f).stat().st_size for f in (projects, cash_flows) if f and Path(f).is_file())
    show = sizes >= LOAD_PROGRESS_BYTES if progress is None else progress
    bar, tick = _load_progress(sizes) if show else (None, None)
    try:
        if db is None:
            scan = scan_portfolio(projects, cash_flows, allow_extreme_rates=allow_extreme_rates, progress=tick,
                                  log=log if show else None)
            return {"projects": scan.project_count, "cash_flow_rows": scan.cash_flow_rows,
                    "notes": scan.notes, "inputs_hash": scan.inputs_hash}
        created = not Path(db).exists()
        try:
            return load_streamed(db, projects, cash_flows, allow_extreme_rates=allow_extreme_rates,
                                 progress=tick, log=log if show else None)
        except BaseException:
            if created:     # a first load that failed (e.g. at a file-size limit) leaves no database behind
                for path in (Path(db), Path(f"{db}.wal")):
                    path.unlink(missing_ok=True)
            raise
    finally:
        if bar is not None:
            bar.close()


def _load_progress(total_bytes: int):
    """A progress report in MB of input read, and the callback the loader calls with bytes read."""
    mb = 1 << 20
    bar = Progress(max(1, -(-total_bytes // mb)), "load: reading and checking", unit="MB block")
    seen = [0, 0]     # bytes read, whole MB reported

    def tick(n: int) -> None:
        seen[0] += n
        whole = bar.total if seen[0] >= total_bytes else seen[0] // mb
        if whole > seen[1]:
            bar.update(whole - seen[1])
            seen[1] = whole
    return bar, tick


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
    from .settings import make_run_settings, parse_budget, read_settings_toml
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
