"""Write a validated portfolio into the database as one transaction."""
from __future__ import annotations

import os
import socket
import threading
from datetime import datetime, timezone
from pathlib import Path

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
# the columns of a staged cash-flow file: all but ``source``, the name of the one cash-flow file
STAGED_FLOW_COLUMNS = [c for c in CASH_FLOW_COLUMNS if c != "source"]


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
        load_id = _record_load(con, portfolio.files, portfolio.inputs_hash, projects.height, flows.height,
                               portfolio.notes)
    return load_id


def _record_load(con, files: dict, inputs_hash: str, projects: int, lines: int, notes: list[str]) -> int:
    """The ``loads`` row of a load (inside its transaction); returns its load id."""
    load_id = con.execute("SELECT coalesce(max(load_id), 0) + 1 FROM loads").fetchone()[0]
    con.execute("INSERT INTO loads VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)", [
        load_id, datetime.now(timezone.utc).replace(tzinfo=None), files.get("projects"), files.get("cash_flows"),
        inputs_hash, projects, lines, __version__, "\n".join(notes)])
    return load_id


# ---- the streamed load (issue 16, part 1) --------------------------------------------------------------
#
# ``ratescape load`` never holds the portfolio in memory: the files are checked block by block
# (:func:`ratescape.load.scan_portfolio`) and each clean block is written to a Parquet file in a
# staging folder beside the target; only when both files passed every check is the target opened
# and its portfolio replaced in one transaction, by SQL that reads the staged projects (keys in
# file order), expands the parametric ones to cash-flow lines and copies the staged lines. A
# refused input never opens the target (it stays byte for byte as it was); an interrupted load
# rolls back; the staging folder is removed in every case.

# Rows per staged Parquet file (a few tens of MB of typed columns held before each write).
STAGE_ROWS = 1 << 19
# DuckDB's memory while it writes the target: beyond it, it spills to disk.
LOAD_MEMORY_LIMIT = "768MB"
# Disk a loaded line takes, in bytes, for the space check before work starts: the bench
# portfolios took 5.5 (parametric) and 8 (long form) bytes a line in the database once written,
# and about 5 in the staged Parquet files (bench/RESULTS.md, issue 16 part 1); this leaves room
# for DuckDB's writes before its checkpoint and for the lines a reload replaces.
DISK_BYTES_PER_LINE = 32
DISK_BYTES_PER_PROJECT = 200
DISK_MARGIN_BYTES = 64 << 20


class StagingSink:
    """Writes the scan's typed blocks to Parquet files in ``folder`` (``projects_*.parquet``,
    ``flows_*.parquet``), :data:`STAGE_ROWS` rows a file, numbered in file order.

    The files are written by one writing thread while the scan goes on (Polars writes outside the
    interpreter lock); one file at most is being written while the next one's rows gather, so
    memory stays two files' rows. :meth:`close` writes the rest and waits for every write;
    :meth:`shutdown` ends the thread in every case.
    """

    def __init__(self, folder: Path):
        from concurrent.futures import ThreadPoolExecutor
        self.folder = folder
        self.parts: dict[str, list[pl.DataFrame]] = {"projects": [], "flows": []}
        self.rows = {"projects": 0, "flows": 0}
        self.files: dict[str, list[Path]] = {"projects": [], "flows": []}
        self._writer = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-stage")
        self._writing = None
        # the projects and the cash-flow file are read on two threads: one caller at a time
        self._lock = threading.RLock()

    def projects(self, frame: pl.DataFrame) -> None:
        self._add("projects", frame)

    def cash_flows(self, frame: pl.DataFrame) -> None:
        # the file's name, the same on every line, is not staged: the insert writes it
        # (:data:`STAGED_FLOW_COLUMNS`), which spares encoding it 50 million times
        # (and whole numbers are staged as the table's 32-bit integers: no cast in the insert)
        self._add("flows", frame.select(STAGED_FLOW_COLUMNS).with_columns(
            pl.col("period", "source_line").cast(pl.Int32)))

    def _add(self, kind: str, frame: pl.DataFrame) -> None:
        with self._lock:
            self.parts[kind].append(frame)
            self.rows[kind] += frame.height
            if self.rows[kind] >= STAGE_ROWS:
                self._flush(kind)

    def _wait(self) -> None:
        """Wait for the file being written (its error, such as a full disk, is raised here)."""
        if self._writing is not None:
            writing, self._writing = self._writing, None
            writing.result()

    def flush(self, kind: str | None = None) -> None:
        """Start writing the gathered rows (of ``kind``, or of both kinds) as the next file."""
        with self._lock:
            self._flush(kind)

    def _flush(self, kind: str | None) -> None:
        for name in [kind] if kind else list(self.parts):
            parts = self.parts[name]
            if not parts:
                continue
            path = self.folder / f"{name}_{len(self.files[name]):06d}.parquet"
            frame = pl.concat(parts, how="vertical")
            self.parts[name], self.rows[name] = [], 0
            self._wait()
            self._writing = self._writer.submit(frame.write_parquet, path, compression="lz4", statistics=False)
            self.files[name].append(path)

    def close(self) -> None:
        """Write the rows still gathered and wait for every file."""
        with self._lock:
            self._flush(None)
            self._wait()

    def shutdown(self) -> None:
        """End the writing thread once its file is written (rows still gathered are dropped)."""
        self._writer.shutdown(wait=True, cancel_futures=True)


def _sql_text(value: str) -> str:
    return "'" + value.replace("'", "''") + "'"


def _parquet(files: list[Path]) -> str:
    return "read_parquet([" + ", ".join(_sql_text(str(f)) for f in files) + "])"


def expansion_sql(source: str, projects: str = "staged_projects") -> str:
    """The parametric projects of the relation ``projects`` as long-form cash-flow lines (one SELECT).

    The same lines as :func:`ratescape.load.portfolio._expand_parametric` (the in-memory path):
    first cost paid at period 0, annual benefit received and annual cost paid at periods
    1..life in their own basis and escalation, salvage received at period ``life``.
    """
    src = _sql_text(source)
    base = f"FROM {projects} WHERE parametric AND life IS NOT NULL"
    return f"""
        SELECT project_id, 0 AS period, -first_cost AS amount, 'real' AS basis, 0.0 AS escalation,
               'investment' AS kind, {src} AS source, source_line
        {base} AND coalesce(first_cost, 0) <> 0
        UNION ALL
        SELECT project_id, unnest(range(1, life + 1)), annual_benefit, benefit_basis, benefit_escalation,
               'benefit', {src}, source_line
        {base} AND coalesce(annual_benefit, 0) <> 0
        UNION ALL
        SELECT project_id, unnest(range(1, life + 1)), -annual_cost, cost_basis, cost_escalation,
               'cost', {src}, source_line
        {base} AND coalesce(annual_cost, 0) <> 0
        UNION ALL
        SELECT project_id, life, salvage, 'real', 0.0, 'salvage', {src}, source_line
        {base} AND coalesce(salvage, 0) <> 0"""


def estimated_disk_bytes(lines: int, projects: int) -> int:
    """Disk a load of ``lines`` cash-flow lines and ``projects`` projects may need (staging and target)."""
    return lines * DISK_BYTES_PER_LINE + projects * DISK_BYTES_PER_PROJECT + DISK_MARGIN_BYTES


def check_disk_space(folder: Path, needed: int, what: str) -> None:
    """Refuse, before the work starts, a load whose estimated size does not fit on the disk of ``folder``."""
    import shutil

    from ..errors import RatescapeError
    free = shutil.disk_usage(folder).free
    if needed > free:
        raise RatescapeError(f"not enough disk space for {what}: it needs about {needed / 2**30:.1f} GB in "
                             f"{folder}, and {free / 2**30:.1f} GB are free; nothing was written. Fix: free disk "
                             "space there, or give --db a path on a disk with more room")


#: File in a staging folder naming the host and process that staged it (a later load removes the
#: folder once that process has ended without removing it: killed, or the machine stopped)
STAGING_OWNER = "owner"


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:          # another user's process: alive
        return True
    return True


def remove_stale_staging(folder: Path, db_name: str) -> int:
    """Remove the staging folders ``.<db_name>.load-*`` in ``folder`` whose owner (a process of this
    host) has ended; return how many. Folders of running loads, of other hosts (a shared disk) and
    without an owner file are kept."""
    import shutil
    removed = 0
    host = socket.gethostname()
    for stale in folder.glob(f".{db_name}.load-*"):
        try:
            owner_host, pid = (stale / STAGING_OWNER).read_text().split()
            if owner_host != host or _process_alive(int(pid)):
                continue
        except (OSError, ValueError):
            continue
        shutil.rmtree(stale, ignore_errors=True)
        removed += 1
    return removed


def load_streamed(db, projects_path, cash_flows_path=None, *, allow_extreme_rates: bool = False,
                  progress=None, log=None) -> dict:
    """Check the CSV files block by block, stage them, then replace the database's portfolio atomically.

    Returns the counts, notes, inputs hash and load id. Raises ValidationError (every problem,
    the first of each kind with a count of the rest) without opening ``db``; ``progress`` is
    called with the bytes read since its last call, ``log`` with a line before the write.
    """
    import shutil
    import tempfile
    import time

    from ..load.portfolio import scan_portfolio
    from .database import check_database_file, connect_write

    db = Path(db)
    check_database_file(db)
    folder = db.resolve().parent
    sizes = sum(Path(p).stat().st_size for p in (projects_path, cash_flows_path) if p and Path(p).is_file())
    # before reading: a long-form file stages about as many lines as it has (~30 bytes a line)
    check_disk_space(folder, estimated_disk_bytes(sizes // 30, 0), f"loading {sizes / 2**20:.0f} MB of CSV")
    removed = remove_stale_staging(folder, db.name)
    if removed and log is not None:
        log(f"load: removed {removed} staging folder(s) left beside {db.name} by a load that was killed")
    work = Path(tempfile.mkdtemp(prefix=f".{db.name}.load-", dir=folder))
    (work / STAGING_OWNER).write_text(f"{socket.gethostname()} {os.getpid()}\n")
    try:
        sink = StagingSink(work)
        try:
            scan = scan_portfolio(projects_path, cash_flows_path, allow_extreme_rates=allow_extreme_rates,
                                  sink=sink, progress=progress, log=log)
            sink.close()
        finally:
            sink.shutdown()
        check_disk_space(folder, estimated_disk_bytes(scan.cash_flow_rows, scan.project_count),
                         f"{scan.cash_flow_rows:,} cash-flow lines")
        if log is not None:
            log(f"load: writing {scan.project_count:,} projects and {scan.cash_flow_rows:,} cash-flow lines "
                f"into {db} ...")
        start = time.monotonic()
        con = connect_write(db)
        try:
            con.execute(f"SET memory_limit = '{LOAD_MEMORY_LIMIT}'")
            # insertion order kept (DuckDB's default): the lines land in the same order on every load of
            # the same files, so sums over them (and every result) repeat to the last bit
            # DuckDB's progress is read (query_progress) for the lines before and during the write; its
            # own bar is never printed
            con.execute("SET enable_progress_bar = true")
            con.execute("SET enable_progress_bar_print = false")
            con.execute(f"SET temp_directory = {_sql_text(str(work / 'spill'))}")
            run = _Statements(con, log, scan.cash_flow_rows)
            try:
                load_id = _replace_portfolio(con, scan, sink.files, Path(projects_path).name, run)
            finally:
                for setting in ("memory_limit", "temp_directory", "enable_progress_bar",
                                "enable_progress_bar_print"):
                    con.execute(f"RESET {setting}")
        finally:
            con.close()
        if log is not None:
            log(f"load: written in {time.monotonic() - start:.1f} s")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return {"projects": scan.project_count, "cash_flow_rows": scan.cash_flow_rows, "notes": scan.notes,
            "inputs_hash": scan.inputs_hash, "load_id": load_id}


# Seconds between the lines that report the write's progress (DuckDB's own estimate, per statement).
WRITE_REPORT_SECONDS = 10.0


class _Statements:
    """Runs the write's statements; with ``log``, each long one on a worker thread while this thread
    reports DuckDB's progress of it with the time left (``query_progress``), every
    :data:`WRITE_REPORT_SECONDS`. Ctrl-C interrupts the statement (the transaction then rolls back)."""

    def __init__(self, con, log, lines: int):
        self.con, self.log, self.lines = con, log, lines

    def __call__(self, sql: str, what: str | None = None) -> None:
        if self.log is None or what is None:
            self.con.execute(sql)
            return
        import threading
        import time
        box: dict = {}

        def work() -> None:
            try:
                self.con.execute(sql)
            except BaseException as exc:      # noqa: BLE001  (re-raised on the caller's thread)
                box["error"] = exc
        thread = threading.Thread(target=work, name="load write", daemon=True)
        start = last = time.monotonic()
        thread.start()
        try:
            while thread.is_alive():
                thread.join(0.5)
                now = time.monotonic()
                if thread.is_alive() and now - last >= WRITE_REPORT_SECONDS:
                    last = now
                    try:
                        pct = float(self.con.query_progress())
                    except Exception:                  # noqa: BLE001  (no estimate is no error)
                        pct = -1.0
                    if 0 < pct < 100:
                        left = (now - start) * (100 - pct) / pct
                        self.log(f"load: writing {what}: {pct:.0f} % done, {now - start:.0f} s elapsed, "
                                 f"about {left:.0f} s left")
        except BaseException:
            self.con.interrupt()
            thread.join()
            raise
        if "error" in box:
            raise box["error"]


def _replace_portfolio(con, scan, files: dict[str, list[Path]], projects_source: str, run=None) -> int:
    """One transaction: the staged projects (keys in file order), their parametric lines, the staged lines."""
    run = run or _Statements(con, None, 0)
    cols = [c for c in PROJECT_COLUMNS if c != "project_key"]
    flows = ", ".join(CASH_FLOW_COLUMNS)
    with transaction(con):
        con.execute("DELETE FROM projects")
        con.execute("DELETE FROM cash_flows")
        con.execute(f"INSERT INTO projects (project_key, {', '.join(cols)}) "
                    f"SELECT CAST(row_number() OVER (ORDER BY source_line) - 1 AS INTEGER), {', '.join(cols)} "
                    f"FROM {_parquet(files['projects'])} ORDER BY source_line")
        if scan.parametric_flow_rows:
            run(f"INSERT INTO cash_flows ({flows}) {expansion_sql(projects_source, _parquet(files['projects']))}",
                f"{scan.parametric_flow_rows:,} lines of parametric projects")
        if scan.file_flow_rows:
            name = _sql_text(Path(scan.files["cash_flows"]).name)
            staged = ", ".join(f"{name} AS source" if c == "source" else c for c in CASH_FLOW_COLUMNS)
            run(f"INSERT INTO cash_flows ({flows}) SELECT {staged} FROM {_parquet(files['flows'])}",
                f"{scan.file_flow_rows:,} lines of the cash-flow file")
        load_id = _record_load(con, scan.files, scan.inputs_hash, scan.project_count, scan.cash_flow_rows,
                               scan.notes)
    return load_id
