"""Read and validate a portfolio (projects CSV + optional cash-flow CSV), block by block.

:func:`scan_portfolio` is the loader's one pass over the files: each block of each
file is checked cell by cell (every fault located by file, line, column and value,
with its fix) and, while the files are clean, handed typed to a *sink*; whole-file
and cross-file checks (duplicate ids, unknown ids, groups, ``requires``, projects
without flows) run at the end on compact per-project key frames, never on the
rows themselves. Memory is bounded by the block size plus those key frames.

* ``ratescape load`` streams into a staging database
  (:mod:`ratescape.store.portfolio_writer`), which expands parametric projects to
  cash-flow lines in SQL;
* :func:`read_portfolio` collects the blocks in memory and expands parametric
  rows here (:func:`_expand_parametric`): the in-memory path, for small inputs,
  the API and the tests that compare the two.

Nothing here writes anywhere; an invalid input raises
:class:`~ratescape.errors.ValidationError` listing every problem (the first of
each kind with a count of the rest).
"""
from __future__ import annotations

import hashlib
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol

import polars as pl

from ..errors import Issue, Issues, ValidationError, count_more, room_for
from .clean_blocks import clean_flow_block, clean_flow_bytes
from .columns import (
    BASES,
    CASH_FLOW_COLUMNS,
    DEPRECIATION_CONVENTIONS,
    DEPRECIATION_METHODS,
    KINDS,
    PARAMETRIC_MONEY,
    PROJECT_COLUMNS,
)
from .reader import open_table
from .validate import Cells, check_unique_id_frame

CASH_FLOW_SCHEMA = {
    "project_id": pl.String, "period": pl.Int64, "amount": pl.Float64, "basis": pl.String,
    "escalation": pl.Float64, "kind": pl.String, "source": pl.String, "source_line": pl.Int64,
}

#: Columns of a typed block of project rows, in order (``parametric``: the row gives parametric amounts).
PROJECT_SCHEMA = {
    "project_id": pl.String, "name": pl.String, "group_name": pl.String, "requires": pl.String,
    "mandatory": pl.Boolean, "category": pl.String, "first_cost": pl.Float64, "annual_benefit": pl.Float64,
    "annual_cost": pl.Float64, "salvage": pl.Float64, "benefit_basis": pl.String, "benefit_escalation": pl.Float64,
    "cost_basis": pl.String, "cost_escalation": pl.Float64, "life": pl.Int64, "depreciation_method": pl.String,
    "depreciation_convention": pl.String, "service_quarter": pl.Int64, "recovery_years": pl.Int64,
    "depreciable_basis": pl.Float64, "loan_amount": pl.Float64, "loan_rate": pl.Float64, "loan_term": pl.Int64,
    "terminal_value": pl.Float64, "source_line": pl.Int64, "parametric": pl.Boolean,
}

# The per-project key frame kept for the whole-file checks (a few tens of bytes a project).
KEY_COLUMNS = ("project_id", "raw_id", "source_line", "parametric", "group_name", "requires", "mandatory",
               "terminal_value")


@dataclass
class Portfolio:
    """A validated portfolio: one row per project and long-form cash-flow lines."""

    projects: pl.DataFrame
    cash_flows: pl.DataFrame
    inputs_hash: str
    notes: list[str] = field(default_factory=list)
    files: dict = field(default_factory=dict)


class PortfolioSink(Protocol):
    """Where :func:`scan_portfolio` hands typed blocks while no fault has been found."""

    def projects(self, frame: pl.DataFrame) -> None:
        """A block of project rows (:data:`PROJECT_SCHEMA`), in file order."""

    def cash_flows(self, frame: pl.DataFrame) -> None:
        """A block of the cash-flow file's lines (:data:`CASH_FLOW_SCHEMA`), in file order."""


@dataclass
class ScanResult:
    """What a clean scan found: counts, notes and the inputs' hash (the rows went to the sink)."""

    project_count: int
    file_flow_rows: int          # lines of the cash-flow file
    parametric_flow_rows: int    # lines the parametric projects expand to
    inputs_hash: str
    notes: list[str] = field(default_factory=list)
    files: dict = field(default_factory=dict)

    @property
    def cash_flow_rows(self) -> int:
        return self.file_flow_rows + self.parametric_flow_rows


def _sha256(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# Cash-flow files up to this size are collected during the one read of :func:`read_portfolio`. A
# bigger file is read twice there: the first read only validates (memory for one block), the
# second collects the rows once the file is known to be good, so refusing a file of any size needs
# memory for one block only. (``ratescape load`` reads once: it stages the rows in a scratch
# database instead of memory.)
SINGLE_READ_BYTES = 16 << 20


def _typed_flows(cells: Cells, source: str) -> pl.DataFrame:
    """Parse and check one batch of cash-flow cells; bad cells become nulls and issues."""
    project_id = cells.identifier("project_id")
    period = cells.integer("period", required=True, minimum=0, what="a period index (0 = now)")
    amount = cells.money("amount", required=True)
    basis = cells.choice("basis", BASES, default="real")
    escalation = cells.rate("escalation")
    kind = cells.choice("kind", KINDS, default="")
    frame = pl.DataFrame([project_id, period, amount, basis, escalation, kind,
                          cells.frame["line"].cast(pl.Int64).alias("source_line")])
    # A blank kind is inferred: money out at period 0 is investment, other money
    # in is benefit, other money out is cost (documented in the README).
    return frame.with_columns(
        pl.when(pl.col("kind") != "").then(pl.col("kind"))
        .when((pl.col("period") == 0) & (pl.col("amount") < 0)).then(pl.lit("investment"))
        .when(pl.col("amount") >= 0).then(pl.lit("benefit"))
        .otherwise(pl.lit("cost")).alias("kind"),
        pl.lit(source).alias("source"),
    ).select(list(CASH_FLOW_SCHEMA))


def _flow_stats(parts: list[pl.DataFrame]) -> pl.DataFrame:
    """Per project: sum of absolute amounts and first line, merged over batches."""
    frame = pl.concat(parts, how="vertical")
    return frame.group_by("project_id").agg(pl.col("total").sum(), pl.col("line").min())


def _typed_projects(cells: Cells) -> pl.DataFrame:
    """Parse and check one batch of project cells (:data:`PROJECT_SCHEMA`)."""
    ids = cells.identifier("project_id")
    # group names and required ids are compared like ids: in Unicode normal form C
    cols = [ids, cells.text("name").alias("name"), cells.normal_text("group_name"),
            cells.normal_text("requires"), cells.boolean("mandatory"),
            cells.text("category").alias("category")]
    money = {c: cells.money(c, required=False, what="a non-negative amount of money") for c in PARAMETRIC_MONEY}
    for c, series in money.items():
        cells.report((series < 0).fill_null(False), c, "negative amount",
                     "give parametric amounts as positive numbers; ratescape applies the signs "
                     "(first_cost and annual_cost are paid, annual_benefit and salvage received)")
    cols += list(money.values())
    cols += [cells.choice("benefit_basis", BASES, default="real"), cells.rate("benefit_escalation"),
             cells.choice("cost_basis", BASES, default="real"), cells.rate("cost_escalation"),
             cells.integer("life", required=False, minimum=1, what="a life in periods")]
    cols += [cells.choice("depreciation_method", DEPRECIATION_METHODS, default=""),
             cells.choice("depreciation_convention", DEPRECIATION_CONVENTIONS, default=""),
             cells.integer("service_quarter", required=False, minimum=1, maximum=4,
                           what="the quarter the asset is placed in service (1-4)"),
             cells.integer("recovery_years", required=False, minimum=1, maximum=100, what="a recovery period in years"),
             cells.money("depreciable_basis", required=False),
             cells.money("loan_amount", required=False),
             cells.rate("loan_rate"),
             cells.integer("loan_term", required=False, minimum=1, what="a loan term in periods"),
             cells.number("terminal_value", required=False,
                          what="the value at the end of a study period (base-year money, + received)")]
    frame = pl.DataFrame(cols).with_columns(cells.frame["line"].cast(pl.Int64).alias("source_line"))
    any_money = pl.any_horizontal([pl.col(c).is_not_null() & (pl.col(c) != 0) for c in PARAMETRIC_MONEY])
    frame = frame.with_columns(any_money.alias("parametric"))
    # a blank life beside parametric amounts (a life written but refused is reported as such)
    cells.report(frame["parametric"] & frame["life"].is_null() & (cells.text("life") == ""), "life",
                 "parametric amounts given without a life", "give the life in periods (a whole number >= 1)")
    return frame.select(list(PROJECT_SCHEMA))


def _parametric_lines(frame: pl.DataFrame) -> int:
    """Cash-flow lines the parametric rows of ``frame`` expand to (see :func:`_expand_parametric`)."""
    p = frame.filter(pl.col("parametric") & pl.col("life").is_not_null())
    if p.height == 0:
        return 0
    nz = {c: (p[c].fill_null(0) != 0) for c in PARAMETRIC_MONEY}
    life = p["life"]
    return int(nz["first_cost"].sum() + nz["salvage"].sum()
               + (life * nz["annual_benefit"].cast(pl.Int64)).sum() + (life * nz["annual_cost"].cast(pl.Int64)).sum())


def _key_frame(frame: pl.DataFrame, raw_ids: pl.Series) -> pl.DataFrame:
    """The compact per-project columns the whole-file checks need (raw id only where it is not NFC)."""
    raw = pl.lit(raw_ids)
    return frame.with_columns(pl.when(raw != pl.col("project_id")).then(raw).otherwise(None).alias("raw_id")) \
        .select(list(KEY_COLUMNS))


Progress = Callable[[int], None]


def scan_portfolio(projects_path, cash_flows_path=None, *, allow_extreme_rates: bool = False,
                   sink: PortfolioSink | None = None, progress: Progress | None = None,
                   log: Callable[[str], None] | None = None) -> ScanResult:
    """Validate the files block by block, handing typed blocks to ``sink`` while they are clean.

    The projects file is read on a thread of its own while this one reads the cash-flow file (the
    files are checked on their own; what one says of the other, such as ids of cash flows that no
    project has, is checked once both are read). Raises ValidationError listing every problem
    (the first of each kind, with a count of the rest) once both files have been read; the sink's
    rows must then be discarded. ``progress`` is called with the bytes read since its last call,
    ``log`` with a line before the cash-flow file is read a second time (only to list the lines of
    ids that no project has).
    """
    import threading
    from concurrent.futures import ThreadPoolExecutor

    issues = Issues()
    notes: list[str] = []
    pname = Path(projects_path).name
    if progress is not None:                 # called from both reading threads
        lock, report = threading.Lock(), progress

        def progress(n: int) -> None:       # the same callback, one call at a time
            with lock:
                report(n)
    flows: _FlowScan | None = None
    if cash_flows_path:
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-projects") as pool:
            projects_scan = pool.submit(_scan_projects, projects_path, allow_extreme_rates, sink, progress)
            try:
                flows = _scan_cash_flows(cash_flows_path, allow_extreme_rates, sink, progress)
            finally:
                projects = projects_scan.result()
    else:
        projects = _scan_projects(projects_path, allow_extreme_rates, sink, progress)
    # the projects file's issues first, then the cash-flow file's: the order of a reading in turn
    issues.merge(projects.issues)
    notes.extend(projects.notes)
    key = projects.key
    if flows is not None:
        issues.merge(flows.issues)
        notes.extend(flows.notes)
        if key is not None and flows.seen is not None:
            _report_unknown_ids(cash_flows_path, flows.seen, key, pname, allow_extreme_rates, issues, log)
    stats = flows.stats if flows is not None else None
    if key is not None and (cash_flows_path is None or stats is not None):
        _check_structure(key, stats, str(projects_path), str(cash_flows_path) if cash_flows_path else None, issues)
    if issues:
        raise ValidationError(issues)
    assert key is not None
    h = hashlib.sha256()
    hashes = [projects.digest] + ([flows.digest] if flows is not None else [])
    for path, digest in zip([projects_path, cash_flows_path], hashes):
        h.update((digest or _sha256(path)).encode())
    files = {"projects": str(projects_path), "cash_flows": str(cash_flows_path) if cash_flows_path else None}
    flow_rows = flows.rows if flows is not None else 0
    return ScanResult(key.height, flow_rows, projects.parametric_rows, h.hexdigest(), notes, files)


@dataclass
class _ProjectScan:
    """What reading the projects file found: its own issues and notes, the per-project key frame
    (None when the file cannot be used), the parametric lines it describes and its hash."""
    issues: Issues
    notes: list[str]
    key: pl.DataFrame | None
    parametric_rows: int
    digest: str | None


@dataclass
class _FlowScan:
    """What reading the cash-flow file found: its issues and notes, its rows, the per-project
    stats for the cross-file checks (None when the file cannot be read whole as a table), the
    stats of every block read (``seen``, for the ids check, even of a file broken part-way) and
    its hash."""
    issues: Issues
    notes: list[str]
    rows: int
    stats: pl.DataFrame | None
    seen: pl.DataFrame | None
    digest: str | None


def _scan_projects(path, allow_extreme_rates: bool, sink: PortfolioSink | None,
                   progress: Progress | None) -> _ProjectScan:
    """Read and check the projects file block by block (the whole-file id checks included)."""
    issues = Issues()
    notes: list[str] = []
    parametric_rows = 0
    keys: list[pl.DataFrame] = []
    source = open_table(path, PROJECT_COLUMNS, issues)
    usable = False
    digest = None
    if source is not None:
        counts: dict = {}
        done = 0
        for batch, plain, spaceless, read in source.read_ahead():
            cells = Cells(source.name, batch, issues, counts, allow_extreme_rates, plain, spaceless)
            frame = _typed_projects(cells)
            keys.append(_key_frame(frame, cells.text("project_id")))
            parametric_rows += _parametric_lines(frame)
            if sink is not None and not issues:
                sink.projects(frame)
            if progress is not None:
                progress(read - done)
                done = read
        source.finish()
        notes.extend(source.notes)
        if source.rows == 0 and not source.broken:
            issues.append(Issue(source.name, 2, None, None, "the file has a header but no data rows",
                                "add at least one data row"))
        digest = source.sha256
        usable = source.rows > 0 and not source.broken
    key = pl.concat(keys, how="vertical") if keys else None
    del keys
    if key is not None and key.height:
        check_unique_id_frame(str(path), key.select(pl.col("source_line").alias("line"),
                                                    pl.col("project_id").alias("id"),
                                                    pl.col("raw_id").alias("raw")), issues)
    return _ProjectScan(issues, notes, key if usable else None, parametric_rows, digest)


UNKNOWN_PROJECT = "cash flows for a project not in the projects file"


def _scan_cash_flows(path, allow_extreme_rates: bool, sink: PortfolioSink | None,
                     progress: Progress | None) -> _FlowScan:
    """Stream the cash-flow file block by block: its own checks, the rows to the sink, per-project stats.

    The stats (``project_id, total, line``) feed the cross-file checks and are None only when
    the file cannot be read as a table.
    """
    issues = Issues()
    notes: list[str] = []
    source = open_table(path, CASH_FLOW_COLUMNS, issues)
    if source is None:
        return _FlowScan(issues, notes, 0, None, None, None)
    name = Path(path).name
    counts: dict = {}
    stats: list[pl.DataFrame] = []
    merged = pending = 0
    done = 0
    for batch, plain, spaceless, read, done_ahead in _checked_blocks(source, name, allow_extreme_rates):
        if done_ahead is None:        # a block with a fault (or not plain ASCII): checked cell by cell
            typed = _typed_flows(Cells(source.name, batch, issues, counts, allow_extreme_rates, plain, spaceless),
                                 name)
            block_stats = _block_stats(typed)
        else:
            typed, block_stats = done_ahead
        stats.append(block_stats)
        pending += stats[-1].height
        if len(stats) >= 32 and pending >= max(merged, 1 << 16):   # merge when the new rows are as many as
            stats = [_flow_stats(stats)]                            # the merged ones: linear in the file
            merged, pending = stats[0].height, 0
        if sink is not None and not issues:
            sink.cash_flows(typed)
        if progress is not None:
            progress(read - done)
            done = read
    source.finish()
    notes.extend(source.notes)
    seen = _flow_stats(stats) if stats else None
    if source.broken:
        return _FlowScan(issues, notes, source.rows, None, seen, None)
    if source.rows == 0:
        issues.append(Issue(source.name, 2, None, None, "the file has a header but no data rows",
                            "add at least one data row"))
        return _FlowScan(issues, notes, 0, None, seen, None)
    return _FlowScan(issues, notes, source.rows, seen, seen, source.sha256)


def _report_unknown_ids(path, seen: pl.DataFrame, key: pl.DataFrame, projects_name: str,
                        allow_extreme_rates: bool, issues: Issues, log: Callable[[str], None] | None = None) -> None:
    """Report each cash-flow line whose project id is not in the projects file.

    The ids come from the blocks' stats (one anti-join once both files are read); only when some
    are unknown is the cash-flow file read again, to report each such line with its line number
    and value, as the cell checks do. A good file is never read twice.
    """
    unknown = (seen.lazy().filter(pl.col("project_id").is_not_null() & (pl.col("project_id") != ""))
               .join(key.lazy().select("project_id"), on="project_id", how="anti")
               .select("project_id").unique().collect()["project_id"])
    if unknown.len() == 0:
        return
    source = open_table(path, CASH_FLOW_COLUMNS, Issues())      # its faults are reported already
    if source is None:
        return
    if log is not None:
        log(f"load: {unknown.len():,} project id(s) in {Path(path).name} are not in {projects_name}; "
            "reading the file again to list their lines ...")

    def fix(pid: str) -> str:
        return f"add '{pid}' to {projects_name} or correct the id"

    wanted = unknown.implode()
    counts: dict = {}
    for batch, plain, spaceless, _read, _typed in source.read_parallel(lambda *_: None, workers=2):
        # the ids as the cell checks read them (stripped, NFC), their own faults left out
        ids = Cells(source.name, batch, Issues(), {}, allow_extreme_rates, plain, spaceless).identifier("project_id")
        Cells(source.name, batch, issues, counts, allow_extreme_rates, plain, spaceless).report(
            ids.is_in(wanted), "project_id", UNKNOWN_PROJECT, fix)


def _block_stats(typed: pl.DataFrame) -> pl.DataFrame:
    """Per project of a typed block: sum of absolute amounts and first line.

    A file usually lists a project's lines together: the block is summed run by run (a run is
    consecutive lines of one project, numbered by ``rle_id``, whose grouping by an integer is
    about twice as fast as by the id's text), and only when the runs are many (a file in another
    order) are they grouped again by id. The result may hold a project more than once when its
    lines are apart; :func:`_flow_stats` merges them.
    """
    runs = (typed.lazy()
            .group_by(pl.col("project_id").rle_id().alias("__run"))
            .agg(pl.col("project_id").first(), pl.col("amount").abs().sum().alias("total"),
                 pl.col("source_line").min().alias("line"))
            .drop("__run").collect())
    if runs.height * 8 > typed.height:
        runs = runs.group_by("project_id").agg(pl.col("total").sum(), pl.col("line").min())
    return runs


# Most worker threads typing cash-flow blocks, whatever the cores: the reading thread reads and
# hashes the file in order for all of them (measured on two cores only).
READ_WORKERS = 4


def _checked_blocks(source, name: str, allow_extreme_rates: bool) -> Iterator[tuple]:
    """``(frame, plain_ascii, spaceless, bytes_read, done_ahead)`` of each block in file order, parsed
    and typed on worker threads (:meth:`CsvSource.read_parallel`). ``done_ahead`` is the block typed
    by :func:`clean_flow_bytes` (frame None) or :func:`clean_flow_block` with its
    :func:`_block_stats`, or None when the block has a fault to report cell by cell."""
    def typer(frame, plain, spaceless):
        typed = clean_flow_block(frame, source=name, plain_ascii=plain, spaceless=spaceless,
                                 allow_extreme_rates=allow_extreme_rates)
        return None if typed is None else (typed, _block_stats(typed))

    def direct(block, columns, first_line, lines):
        typed = clean_flow_bytes(block, columns, first_line, lines, source=name,
                                 allow_extreme_rates=allow_extreme_rates)
        return None if typed is None else (typed, _block_stats(typed))
    # one worker more than the cores: a worker waiting for the interpreter lock leaves its core to
    # another (50 million lines checked in 11.9 s with three workers on two cores, 12.2 s with two)
    workers = max(2, min(READ_WORKERS, (os.cpu_count() or 1) + 1))
    return source.read_parallel(typer, workers=workers, ahead=2 * workers, direct=direct)


def _expand_parametric(projects: pl.DataFrame, source: str) -> pl.DataFrame:
    """Long-form lines for projects described by parametric columns."""
    p = projects.filter(pl.col("parametric") & pl.col("life").is_not_null())
    if p.height == 0:
        return pl.DataFrame(schema=CASH_FLOW_SCHEMA)
    base = p.select("project_id", "life", "source_line", *PARAMETRIC_MONEY,
                    "benefit_basis", "benefit_escalation", "cost_basis", "cost_escalation")
    parts = []
    invest = base.filter(pl.col("first_cost").fill_null(0) != 0).select(
        "project_id", pl.lit(0, pl.Int64).alias("period"), (-pl.col("first_cost")).alias("amount"),
        pl.lit("real").alias("basis"), pl.lit(0.0).alias("escalation"), pl.lit("investment").alias("kind"),
        "source_line")
    parts.append(invest)
    for money, basis, esc, kind, sign in (("annual_benefit", "benefit_basis", "benefit_escalation", "benefit", 1.0),
                                          ("annual_cost", "cost_basis", "cost_escalation", "cost", -1.0)):
        rows = base.filter(pl.col(money).fill_null(0) != 0).with_columns(
            pl.int_ranges(1, pl.col("life") + 1).alias("period")).explode("period")
        parts.append(rows.select("project_id", pl.col("period").cast(pl.Int64), (sign * pl.col(money)).alias("amount"),
                                 pl.col(basis).alias("basis"), pl.col(esc).alias("escalation"),
                                 pl.lit(kind).alias("kind"), "source_line"))
    salv = base.filter(pl.col("salvage").fill_null(0) != 0).select(
        "project_id", pl.col("life").cast(pl.Int64).alias("period"), pl.col("salvage").alias("amount"),
        pl.lit("real").alias("basis"), pl.lit(0.0).alias("escalation"), pl.lit("salvage").alias("kind"),
        "source_line")
    parts.append(salv)
    out = pl.concat(parts, how="vertical_relaxed").with_columns(pl.lit(source).alias("source"))
    return out.select(list(CASH_FLOW_SCHEMA)).cast(CASH_FLOW_SCHEMA)


def _listed(issues: list[Issue], frame: pl.DataFrame, path: str, column: str, problem: str) -> pl.DataFrame:
    """The rows of ``frame`` to list as issues of one kind; the others are counted (see Issues)."""
    room = room_for(issues, path, column, problem)
    if room is None or frame.height <= room:
        return frame
    count_more(issues, path, column, problem, frame.height - room)
    return frame.head(room)


def _check_structure(projects: pl.DataFrame, stats: pl.DataFrame | None, ppath: str, cpath: str | None,
                     issues: list[Issue]) -> None:
    """Cross-file checks: projects without flows or with both descriptions, all-zero flows, groups, requires.

    ``projects`` is the compact key frame (:data:`KEY_COLUMNS`, one row per project, file order);
    ``stats`` holds one row per project id of the cash-flow file (``total`` = sum of absolute
    amounts, ``line`` = its first line), or None without a cash-flow file. Joins, not Python
    sets: a million projects are checked in memory of the same order as the key frame.
    """
    ids = projects.select("project_id", "source_line", "group_name").unique("project_id", keep="first")
    with_rows = pl.DataFrame(schema={"project_id": pl.String})
    if stats is not None and stats.height:
        with_rows = stats.filter(pl.col("project_id") != "").select("project_id")
        both = projects.filter(pl.col("parametric")).join(with_rows, on="project_id", how="semi")
        problem = "project has both parametric amounts and rows in the cash-flow file"
        for line, pid in _listed(issues, both, ppath, "first_cost", problem).select("source_line", "project_id").iter_rows():
            issues.append(Issue(ppath, line, "first_cost", pid, problem,
                                "describe each project one way: clear its parametric columns or remove its cash-flow rows"))
        zero = stats.filter(pl.col("total") == 0).join(ids, on="project_id", how="inner").sort("source_line")
        problem = "all of the project's cash flows are zero"
        for pid, line in _listed(issues, zero, ppath, "project_id", problem).select("project_id", "source_line").iter_rows():
            issues.append(Issue(ppath, line, "project_id", pid, problem,
                                "give the project's cash flows or remove it from the portfolio"))
    no_flows = projects.filter(~pl.col("parametric") & (pl.col("project_id") != "")).join(
        with_rows, on="project_id", how="anti")
    problem = "project has no cash flows"
    for line, pid in _listed(issues, no_flows, ppath, "project_id", problem).select("source_line", "project_id").iter_rows():
        where = f"rows in {Path(cpath).name}" if cpath else "a cash-flow file (--cash-flows)"
        issues.append(Issue(ppath, line, "project_id", pid, problem,
                            f"give first_cost/annual_benefit/annual_cost/salvage and life, or {where}"))
    # groups of mutually exclusive alternatives
    groups = projects.filter(pl.col("group_name") != "").group_by("group_name").agg(
        pl.len().alias("n"), pl.col("source_line").min().alias("line"),
        pl.col("mandatory").n_unique().alias("mandatory_kinds")).sort("line")
    for g, n, line, kinds in groups.select("group_name", "n", "line", "mandatory_kinds").iter_rows():
        if n < 2:
            issues.append(Issue(ppath, line, "group", g, "a group with only one member",
                                "give at least two mutually exclusive alternatives the same group, or leave group blank"))
        if kinds > 1:
            issues.append(Issue(ppath, line, "mandatory", g, "members of one group disagree on 'mandatory'",
                                "mark every member of a mandatory group true (or none)"))
    # a terminal value is used only for an alternative cut at a study period
    stray = projects.filter(pl.col("terminal_value").is_not_null() & (pl.col("group_name") == ""))
    problem = ("a terminal value on a project outside any group (it is used only when the "
               "alternatives of a group are compared over a study period)")
    for line, value in _listed(issues, stray, ppath, "terminal_value", problem).select("source_line", "terminal_value").iter_rows():
        issues.append(Issue(ppath, line, "terminal_value", f"{value:g}", problem,
                            "leave terminal_value blank, or give the project its group of alternatives"))
    # requires: known ids, no self-reference, no cycles, not within one group
    req = projects.filter(pl.col("requires") != "").select("project_id", "requires", "source_line", "group_name")
    if req.height == 0:
        return
    targets = req.with_columns(pl.col("requires").str.split(";").alias("target")).explode("target") \
        .with_columns(pl.col("target").str.strip_chars()).filter(pl.col("target") != "")
    known = targets.join(ids.select("project_id", pl.col("group_name").alias("target_group"), pl.lit(True).alias("known")),
                         left_on="target", right_on="project_id", how="left", maintain_order="left")
    lower = ids.select(pl.col("project_id").str.to_lowercase().alias("lower"), pl.col("project_id").alias("suggest")) \
        .unique("lower", keep="last")
    known = known.with_columns(pl.col("target").str.to_lowercase().alias("lower")).join(
        lower, on="lower", how="left", maintain_order="left")
    graph: dict[str, list[str]] = {}
    for pid, line, group, t, ok, tgroup, suggest in known.select(
            "project_id", "source_line", "group_name", "target", "known", "target_group", "suggest").iter_rows():
        if not ok:
            hint = f"did you mean '{suggest}'?" if suggest is not None else "list existing project ids separated by ';'"
            issues.append(Issue(ppath, line, "requires", t, "requires an unknown project", hint))
        elif t == pid:
            issues.append(Issue(ppath, line, "requires", t, "a project requires itself", "remove the self-reference"))
        else:
            if tgroup and tgroup == group:
                issues.append(Issue(ppath, line, "requires", t,
                                    "requires a mutually exclusive alternative of its own group",
                                    "remove the requirement or the group"))
            graph.setdefault(pid, []).append(t)
    cycle = _find_cycle(graph)
    if cycle:
        line = ids.filter(pl.col("project_id") == cycle[0])["source_line"].to_list()
        issues.append(Issue(ppath, line[0] if line else None, "requires", " -> ".join(cycle),
                            "'requires' dependencies form a cycle", "break the cycle: a project cannot depend on itself through others"))


def _find_cycle(graph: dict[str, list[str]]) -> list[str] | None:
    """Return one dependency cycle as a path [a, b, ..., a], or None (iterative DFS)."""
    state: dict[str, int] = {}
    for start in graph:
        if state.get(start):
            continue
        stack = [(start, iter(graph.get(start, ())))]
        path = [start]
        state[start] = 1
        while stack:
            node, it = stack[-1]
            nxt = next(it, None)
            if nxt is None:
                state[node] = 2
                stack.pop()
                path.pop()
                continue
            if state.get(nxt) == 1:
                return path[path.index(nxt):] + [nxt]
            if not state.get(nxt):
                state[nxt] = 1
                stack.append((nxt, iter(graph.get(nxt, ()))))
                path.append(nxt)
    return None


class _Collect:
    """A sink that keeps every block in memory (the in-memory path of :func:`read_portfolio`)."""

    def __init__(self, flows: bool = True):
        self.project_parts: list[pl.DataFrame] = []
        self.flow_parts: list[pl.DataFrame] = []
        self.keep_flows = flows

    def projects(self, frame: pl.DataFrame) -> None:
        self.project_parts.append(frame)

    def cash_flows(self, frame: pl.DataFrame) -> None:
        if self.keep_flows:
            self.flow_parts.append(frame)


def read_portfolio(projects_path, cash_flows_path=None, *, allow_extreme_rates: bool = False) -> Portfolio:
    """Read, validate and expand a portfolio in memory; raise ValidationError listing every problem.

    The same checks as ``ratescape load`` (:func:`scan_portfolio`); the rows are collected in
    memory instead of staged in a database, so this is for portfolios that fit in memory (the
    API, tests, and the reference the streamed load is compared with).

    Parameters
    ----------
    projects_path : path of the projects CSV (at least ``project_id,name``).
    cash_flows_path : optional path of the long-form cash-flow CSV.
    allow_extreme_rates : accept escalation and loan rates above 100 % in size (refused
        otherwise as percentage typos).

    Returns
    -------
    Portfolio with ``projects`` (one row per project) and ``cash_flows``
    (long form, signed amounts; parametric rows expanded).
    """
    once = not cash_flows_path or not Path(cash_flows_path).is_file() or \
        Path(cash_flows_path).stat().st_size <= SINGLE_READ_BYTES
    sink = _Collect(flows=once)
    scan = scan_portfolio(projects_path, cash_flows_path, allow_extreme_rates=allow_extreme_rates, sink=sink)
    if not once:   # the file is good but was too big to keep during the first read: read it again
        sink = _Collect()
        scan = scan_portfolio(projects_path, cash_flows_path, allow_extreme_rates=allow_extreme_rates, sink=sink)
    projects = pl.concat(sink.project_parts, how="vertical")
    parts = [_expand_parametric(projects, Path(projects_path).name)] + sink.flow_parts
    cash_flows = pl.concat(parts, how="vertical")
    return Portfolio(projects.drop("parametric"), cash_flows, scan.inputs_hash, scan.notes, scan.files)
