"""Publishing: the whole report as one offline HTML file, and single charts as HTML, PNG, SVG or JSON.
"""
from __future__ import annotations

import datetime as _dt
from collections.abc import Sequence
from pathlib import Path

from ratescape.report import charts
from ratescape.report.escaping import json_script_block
from ratescape.report.explorer_script import EXPLORER_JS
from ratescape.report.chart_files import check_chart_suffix
from ratescape.report.page import build_report_html
from ratescape.report.run_data import ReportError, RunContext, pick_run
from ratescape.report.sections import (
    _decision_sections,
    _drill_projects,
    _drill_sections,
    _headline_sections,
    _portfolio_chart_sections,
    _sensitivity_sections,
    report_sections,
)
from ratescape.store.database import connect_read, reloaded_note
from ratescape.store.outputs import check_output_path, check_parent_folder, write_text_atomically


def write_report(
    db_path: str | Path,
    out_path: str | Path,
    run_id: str | None = None,
    projects: Sequence[str] | None = None,
    *,
    top_n: int = 25,
    compare_to: str | None = None,
) -> Path:
    """Write the offline HTML report of one run.

    Parameters
    ----------
    db_path : str or Path
        The results database; opened read-only.
    out_path : str or Path
        The HTML file to write.
    run_id : str, optional
        Defaults to the latest finished run.
    projects : sequence of str, optional
        Project ids for the drill-down charts (at most
        :data:`MAX_DRILL_PROJECTS`).
    top_n : int
        Rows of each headline table.
    compare_to : str, optional
        An earlier run of the same database: adds the section "What changed since run X".

    Returns
    -------
    Path
        ``out_path``.

    Raises
    ------
    ReportError
        See :func:`report_sections`; also when ``db_path`` does not exist.

    Notes
    -----
    All aggregation runs in DuckDB; only top-N tables, one row per scenario
    for the portfolio chart and the drill-down projects' grids reach
    Python, so the file size does not grow with the number of projects.
    """
    db = Path(db_path)
    if not db.exists():
        raise ReportError(f"no database at {db}; create one with `ratescape load` and `ratescape screen`")
    check_output_path(db, out_path)
    check_parent_folder(out_path)
    con = connect_read(db)
    try:
        parts = report_sections(con, run_id, projects, top_n=top_n, compare_to=compare_to)
        reloaded = reloaded_note(con, pick_run(con, run_id)["run_id"])
    finally:
        con.close()
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    subtitle = f"Written {stamp} from {db.name}."
    if reloaded:
        subtitle += f" Portfolio reloaded since this run: {reloaded}."
    page = build_report_html(parts.sections, title=parts.title, subtitle=subtitle,
                             data_blocks=[json_script_block(parts.explorer, "explorer-data"),
                                          json_script_block(parts.templates, "drill-templates")],
                             scripts=[EXPLORER_JS])
    # written next to the target and renamed: an interrupted write never leaves a partial page
    return write_text_atomically(out_path, page)


#: Chart kinds of ``ratescape chart`` and the stage of the report that draws each.
CHART_KINDS = {
    "acceptance-share": "portfolio",
    "acceptance-vs-inflation": "portfolio",
    "rank-stability": "portfolio",
    "selection-share": "portfolio",
    "worth-curve": "drill",
    "worth-surface": "drill",
    "decision-map": "decision",
    "tornado": "sensitivity",
    "spider": "sensitivity",
}


def write_chart(db_path: str | Path, kind: str, out_path: str | Path, *, run_id: str | None = None,
                projects: Sequence[str] | None = None, group: str | None = None, top_n: int = 25,
                on_pick=None) -> Path:
    """Write one chart of a run to ``out_path`` (.html offline, .png, .svg or .json).

    ``kind`` is one of :data:`CHART_KINDS`; drill-down kinds take ``projects``,
    ``decision-map`` takes ``group``. When the project or group is picked for the caller,
    ``on_pick`` (if given) is called with a sentence saying which. An ``out_path`` that is the
    database, its write-ahead log or worth-file folder, has an unsupported suffix or a missing
    folder is refused before anything is drawn.
    """
    if kind not in CHART_KINDS:
        raise ReportError(f"unknown chart kind {kind!r}; use one of: {', '.join(CHART_KINDS)}")
    stage = CHART_KINDS[kind]
    check_output_path(db_path, out_path)
    check_chart_suffix(out_path)
    check_parent_folder(out_path)
    con = connect_read(db_path)
    try:
        ctx = RunContext(con, pick_run(con, run_id))
        if stage == "portfolio":
            sections = _portfolio_chart_sections(ctx, top_n)
        else:
            _, suggested = _headline_sections(ctx, top_n)
            ids = _drill_projects(ctx, projects, suggested)
            if stage == "drill":
                sections = _drill_sections(ctx, ids[:1])
            elif stage == "decision":
                sections = _decision_sections(ctx, ids)
            else:
                sections = _sensitivity_sections(ctx, ids[:1])
        matching = [sec for sec in sections if sec.chart_kind == kind
                    and (kind != "decision-map" or group is None or sec.subject == group)]
        for sec in matching:
            if sec.chart is not None:
                charts.save_chart(sec.chart, out_path)
                subject = sec.subject or (ids[0] if stage in ("drill", "sensitivity") and ids else None)
                if on_pick is not None and subject and (
                        (stage == "decision" and group is None) or (stage in ("drill", "sensitivity") and not projects)):
                    what = "group" if stage == "decision" else "project"
                    flag = "--group" if stage == "decision" else "--project"
                    on_pick(f"no {flag} given: charted {what} {subject!r} (give {flag} to choose another)")
                return Path(out_path)
        why = next((sec.unavailable for sec in matching if sec.unavailable), None)
        raise ReportError(f"no {kind} chart for this run" + (f": {why}" if why else
                          (f" (group {group!r} not found)" if group else "")))
    finally:
        con.close()
