"""Altair charts of screening results: small, pre-aggregated Polars frames in, chart objects out.

One import for every chart of the package. Every function takes frames whose columns use the
glossary's names (``project_id``, ``name``, ``discount_rate``, ``real_rate``, ``inflation``,
``present_worth``, ``accept_share``, ``rank_min`` ...) and returns an Altair chart that can be
shown in a notebook, tested as data with ``to_dict()``, embedded in the offline report or
written to disk with :func:`save_chart`.

Aggregate before charting: each chart carries its data inline, so the functions refuse frames
longer than ``max_rows`` (default :data:`MAX_CHART_ROWS`) with a message giving both counts and
the fix.

The charts live by subject: :mod:`.project_charts` (one project or group),
:mod:`.portfolio_charts` (the whole portfolio), :mod:`.contours` (iso-worth lines),
:mod:`.chart_style` (colours, titles, formats) and :mod:`.chart_files` (files and specs).
"""
from ratescape.report.chart_files import chart_spec, save_chart, standalone_chart_html
from ratescape.report.chart_style import (
                                               CATEGORY_COLOURS,
                                               MAX_CHART_ROWS,
                                               worth_colour_scale,
)
from ratescape.report.contours import contour_lines, nice_levels, surface_contours
from ratescape.report.portfolio_charts import (
                                               acceptance_share_bars,
                                               acceptance_vs_inflation,
                                               rank_intervals,
                                               selection_share_bars,
)
from ratescape.report.project_charts import (
                                               decision_map,
                                               spider,
                                               tornado,
                                               worth_curve,
                                               worth_surface,
)

__all__ = [
    "CATEGORY_COLOURS",
    "MAX_CHART_ROWS",
    "acceptance_share_bars",
    "acceptance_vs_inflation",
    "chart_spec",
    "contour_lines",
    "decision_map",
    "nice_levels",
    "rank_intervals",
    "save_chart",
    "selection_share_bars",
    "spider",
    "standalone_chart_html",
    "surface_contours",
    "tornado",
    "worth_colour_scale",
    "worth_curve",
    "worth_surface",
]
