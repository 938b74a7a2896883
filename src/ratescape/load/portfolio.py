"""Read and validate a portfolio (projects CSV + optional cash-flow CSV).

``read_portfolio`` is pure with respect to the database: it returns typed
Polars frames or raises :class:`~ratescape.errors.ValidationError` listing
every problem at once. Parametric project rows are expanded to cash-flow
lines here, so the engine only ever sees long-form cash flows.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from .columns import BASES, CASH_FLOW_COLUMNS, DEPRECIATION_CONVENTIONS, DEPRECIATION_METHODS, KINDS, PARAMETRIC_MONEY, PROJECT_COLUMNS
from ..errors import Issue, ValidationError
from .reader import open_table, read_table
from .validate import Cells, check_unique_ids

CASH_FLOW_SCHEMA = {
    "project_id": pl.String, "period": pl.Int64, "amount": pl.Float64, "basis": pl.String,
    "escalation": pl.Float64, "kind": pl.String, "source": pl.String, "source_line": pl.Int64,
}


@dataclass
class Portfolio:
    """A validated portfolio: one row per project and long-form cash-flow lines."""

    projects: pl.DataFrame
    cash_flows: pl.DataFrame
    inputs_hash: str
    notes: list[str] = field(default_factory=list)
    files: dict = field(default_factory=dict)


def _sha256(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# Cash-flow files up to this size are validated and typed in one read. A bigger
# file is read twice: the first read only validates (memory for one block), the
# second builds the typed rows once the file is known to be good, so refusing a
# file of any size needs memory for one block only.
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
    )


def _flow_stats(parts: list[pl.DataFrame]) -> pl.DataFrame:
    """Per project: sum of absolute amounts and first line, merged over batches."""
    frame = pl.concat(parts, how="vertical")
    return frame.group_by("project_id").agg(pl.col("total").sum(), pl.col("line").min())


def _read_cash_flows(path, issues: list[Issue], notes: list[str], known_ids: set[str] | None,
                     projects_name: str, allow_extreme_rates: bool = False) -> tuple[pl.DataFrame | None, pl.DataFrame | None]:
    """Stream the cash-flow file block by block; return (typed rows or None, per-project stats or None).

    The rows are None whenever an issue was found anywhere (nothing will be
    written then); the stats (``project_id, total, line``) feed the
    cross-file checks and are None only when the file cannot be read as a
    table.
    """
    source = open_table(path, CASH_FLOW_COLUMNS, issues)
    if source is None:
        return None, None
    name = Path(path).name
    counts: dict = {}
    known = pl.Series("known", sorted(known_ids), dtype=pl.String).implode() if known_ids is not None else None
    kept: list[pl.DataFrame] = []
    keep = source.path.stat().st_size <= SINGLE_READ_BYTES
    stats: list[pl.DataFrame] = []

    def unknown_fix(pid: str) -> str:
        return f"add '{pid}' to {projects_name} or correct the id"

    for batch in source.batches():
        cells = Cells(source.name, batch, issues, counts, allow_extreme_rates)
        typed = _typed_flows(cells, name)
        if known is not None:
            unknown = ~typed["project_id"].is_in(known) & (typed["project_id"] != "")
            cells.report(unknown, "project_id", "cash flows for a project not in the projects file", unknown_fix)
        stats.append(typed.group_by("project_id").agg(pl.col("amount").abs().sum().alias("total"),
                                                      pl.col("source_line").min().alias("line")))
        if len(stats) >= 32:
            stats = [_flow_stats(stats)]
        if keep and not issues:
            kept.append(typed)
        else:
            keep, kept = False, []
    source.finish()
    Cells(source.name, pl.DataFrame(), issues, counts).finish()
    notes.extend(source.notes)
    if source.broken:
        return None, None
    if source.rows == 0:
        issues.append(Issue(source.name, 2, None, None, "the file has a header but no data rows",
                            "add at least one data row"))
        return None, None
    merged = _flow_stats(stats)
    if issues:
        return None, merged
    if not keep:  # the file is good but too big to keep during the first read: read it again
        second = open_table(path, CASH_FLOW_COLUMNS, [])
        assert second is not None
        kept = [_typed_flows(Cells(source.name, batch, issues, {}, allow_extreme_rates), name)
                for batch in second.batches()]
    return pl.concat(kept, how="vertical"), merged


def _read_projects(path, issues: list[Issue], notes: list[str],
                   allow_extreme_rates: bool = False) -> tuple[pl.DataFrame | None, Cells | None]:
    table = read_table(path, PROJECT_COLUMNS, issues)
    notes.extend(table.notes)
    if table.frame is None:
        return None, None
    cells = Cells(table.path, table.frame, issues, allow_extreme_rates=allow_extreme_rates)
    ids = cells.identifier("project_id")
    check_unique_ids(cells, ids)
    # group names and required ids are compared like ids: in Unicode normal form C
    cols = [ids, cells.text("name").alias("name"), cells.text("group_name").str.normalize("NFC").alias("group_name"),
            cells.text("requires").str.normalize("NFC").alias("requires"), cells.boolean("mandatory"),
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
    cells.finish()
    frame = pl.DataFrame(cols).with_columns(table.frame["line"].cast(pl.Int64).alias("source_line"))
    any_money = pl.any_horizontal([pl.col(c).is_not_null() & (pl.col(c) != 0) for c in PARAMETRIC_MONEY])
    frame = frame.with_columns(any_money.alias("parametric"))
    no_life = frame.filter(pl.col("parametric") & pl.col("life").is_null())
    for line, pid in no_life.select("source_line", "project_id").iter_rows():
        if not any(i.line == line and i.column == "life" for i in issues):
            issues.append(Issue(cells.path, line, "life", "", "parametric amounts given without a life",
                                "give the life in periods (a whole number >= 1)"))
    if table.broken:   # rows of the wrong shape: cells checked, but no cross-file checks on a partial table
        return None, cells
    return frame, cells


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


def _check_structure(projects: pl.DataFrame, stats: pl.DataFrame | None, ppath: str, cpath: str | None,
                     issues: list[Issue]) -> None:
    """Cross-file checks: projects without flows or with both descriptions, all-zero flows, groups, requires.

    ``stats`` holds one row per project id of the cash-flow file (``total`` =
    sum of absolute amounts, ``line`` = its first line), or None without a
    cash-flow file.
    """
    ids = set(projects["project_id"].to_list())
    line_of = dict(zip(projects["project_id"].to_list(), projects["source_line"].to_list()))
    with_rows: set[str] = set()
    if stats is not None and stats.height:
        with_rows = set(stats.filter(pl.col("project_id") != "")["project_id"].to_list())
        both = projects.filter(pl.col("parametric") & pl.col("project_id").is_in(list(with_rows)))
        for line, pid in both.select("source_line", "project_id").iter_rows():
            issues.append(Issue(ppath, line, "first_cost", pid,
                                "project has both parametric amounts and rows in the cash-flow file",
                                "describe each project one way: clear its parametric columns or remove its cash-flow rows"))
        zero = stats.filter((pl.col("total") == 0) & pl.col("project_id").is_in(list(ids)))
        for pid in zero["project_id"].to_list():
            issues.append(Issue(ppath, line_of.get(pid), "project_id", pid, "all of the project's cash flows are zero",
                                "give the project's cash flows or remove it from the portfolio"))
    no_flows = projects.filter(~pl.col("parametric") & ~pl.col("project_id").is_in(list(with_rows))
                               & (pl.col("project_id") != ""))
    for line, pid in no_flows.select("source_line", "project_id").head(200).iter_rows():
        where = f"rows in {Path(cpath).name}" if cpath else "a cash-flow file (--cash-flows)"
        issues.append(Issue(ppath, line, "project_id", pid, "project has no cash flows",
                            f"give first_cost/annual_benefit/annual_cost/salvage and life, or {where}"))
    # groups of mutually exclusive alternatives
    groups = projects.filter(pl.col("group_name") != "").group_by("group_name").agg(
        pl.len().alias("n"), pl.col("source_line").min().alias("line"),
        pl.col("mandatory").n_unique().alias("mandatory_kinds"))
    for g, n, line, kinds in groups.select("group_name", "n", "line", "mandatory_kinds").iter_rows():
        if n < 2:
            issues.append(Issue(ppath, line, "group", g, "a group with only one member",
                                "give at least two mutually exclusive alternatives the same group, or leave group blank"))
        if kinds > 1:
            issues.append(Issue(ppath, line, "mandatory", g, "members of one group disagree on 'mandatory'",
                                "mark every member of a mandatory group true (or none)"))
    # a terminal value is used only for an alternative cut at a study period
    stray = projects.filter(pl.col("terminal_value").is_not_null() & (pl.col("group_name") == ""))
    for line, value in stray.select("source_line", "terminal_value").head(200).iter_rows():
        issues.append(Issue(ppath, line, "terminal_value", f"{value:g}",
                            "a terminal value on a project outside any group (it is used only when the "
                            "alternatives of a group are compared over a study period)",
                            "leave terminal_value blank, or give the project its group of alternatives"))
    # requires: known ids, no self-reference, no cycles, not within one group
    lower_ids = {i.lower(): i for i in ids}
    graph: dict[str, list[str]] = {}
    group_of = dict(zip(projects["project_id"].to_list(), projects["group_name"].to_list()))
    for pid, req, line in projects.select("project_id", "requires", "source_line").iter_rows():
        if not req:
            continue
        targets = [t.strip() for t in req.split(";") if t.strip()]
        for t in targets:
            if t not in ids:
                hint = f"did you mean '{lower_ids[t.lower()]}'?" if t.lower() in lower_ids else "list existing project ids separated by ';'"
                issues.append(Issue(ppath, line, "requires", t, "requires an unknown project", hint))
            elif t == pid:
                issues.append(Issue(ppath, line, "requires", t, "a project requires itself", "remove the self-reference"))
            elif group_of.get(t) and group_of.get(t) == group_of.get(pid):
                issues.append(Issue(ppath, line, "requires", t,
                                    "requires a mutually exclusive alternative of its own group",
                                    "remove the requirement or the group"))
        graph[pid] = [t for t in targets if t in ids and t != pid]
    cycle = _find_cycle(graph)
    if cycle:
        issues.append(Issue(ppath, line_of.get(cycle[0]), "requires", " -> ".join(cycle),
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


def read_portfolio(projects_path, cash_flows_path=None, *, allow_extreme_rates: bool = False) -> Portfolio:
    """Read, validate and expand a portfolio; raise ValidationError listing every problem.

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
    issues: list[Issue] = []
    notes: list[str] = []
    projects, _ = _read_projects(projects_path, issues, notes, allow_extreme_rates)
    known = set(projects["project_id"].to_list()) if projects is not None else None
    flows, stats = (_read_cash_flows(cash_flows_path, issues, notes, known, Path(projects_path).name,
                                     allow_extreme_rates)
                    if cash_flows_path else (None, None))
    if projects is not None and (cash_flows_path is None or stats is not None):
        _check_structure(projects, stats, str(projects_path), str(cash_flows_path) if cash_flows_path else None, issues)
    if issues:
        raise ValidationError(issues)
    assert projects is not None
    parts = [_expand_parametric(projects, Path(projects_path).name)]
    if flows is not None:
        parts.append(flows.select(list(CASH_FLOW_SCHEMA)).cast(CASH_FLOW_SCHEMA))
    cash_flows = pl.concat(parts, how="vertical")
    h = hashlib.sha256()
    h.update(_sha256(projects_path).encode())
    if cash_flows_path:
        h.update(_sha256(cash_flows_path).encode())
    files = {"projects": str(projects_path), "cash_flows": str(cash_flows_path) if cash_flows_path else None}
    return Portfolio(projects.drop("parametric"), cash_flows, h.hexdigest(), notes, files)
