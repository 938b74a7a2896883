"""Publishing stage: the offline HTML report, its sections and pages, and the charts.

:func:`write_report` writes the whole report of a run; :func:`write_chart` one chart.
Charts are in :mod:`ratescape.report.charts`.
"""
from ratescape.report.publish import CHART_KINDS, write_chart, write_report

__all__ = ["CHART_KINDS", "write_chart", "write_report"]
