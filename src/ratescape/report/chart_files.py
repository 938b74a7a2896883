"""A chart as a file: its Vega-Lite specification as data, and offline HTML, PNG, SVG or JSON.
"""
from __future__ import annotations

from pathlib import Path
from typing import Any

import altair as alt

from ratescape.report.page import Section, build_report_html, vega_lite_version
from ratescape.report.run_data import ReportError
from ratescape.store.outputs import write_bytes_atomically, write_text_atomically

CHART_SUFFIXES = (".html", ".png", ".svg", ".json")


def check_chart_suffix(path: str | Path) -> str:
    """The output's suffix (lower case) when ratescape can write a chart in that format; else ReportError."""
    suffix = Path(path).suffix.lower()
    if suffix not in CHART_SUFFIXES:
        raise ReportError(f"cannot write a chart as {suffix or 'a file without a suffix'} ({path}). "
                          "Fix: end --out with .html, .png, .svg or .json")
    return suffix


def chart_spec(chart: alt.TopLevelMixin) -> dict[str, Any]:
    """The chart's Vega-Lite specification as a validated dict.

    Parameters
    ----------
    chart : altair chart

    Returns
    -------
    dict
    """
    return chart.to_dict(validate=True)



def save_chart(chart: alt.TopLevelMixin, path: str | Path, *, scale: float = 2.0) -> Path:
    """Write a chart to ``.html`` (offline, scripts inlined), ``.png``, ``.svg`` or ``.json``.

    Parameters
    ----------
    chart : altair chart
    path : str or Path
        The suffix chooses the format.
    scale : float
        Pixel scale of PNG output.

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    ReportError
        For any other suffix (a RatescapeError, so the CLI prints the fix), or when the file
        cannot be written (missing folder, read-only location, full disk).

    Notes
    -----
    HTML goes through :func:`standalone_chart_html`, which
    inlines Vega, Vega-Lite and vega-embed and escapes the specification;
    PNG and SVG are rendered by vl-convert without a browser.
    """
    import vl_convert as vlc

    out = Path(path)
    suffix = check_chart_suffix(out)
    spec = chart_spec(chart)
    if suffix == ".html":
        write_text_atomically(out, standalone_chart_html(chart))
    elif suffix == ".png":
        write_bytes_atomically(out, vlc.vegalite_to_png(spec, vl_version=vega_lite_version(), scale=scale))
    elif suffix == ".svg":
        write_text_atomically(out, vlc.vegalite_to_svg(spec, vl_version=vega_lite_version()))
    else:
        import json

        write_text_atomically(out, json.dumps(spec, indent=2, allow_nan=False))
    return out


def standalone_chart_html(chart: Any, *, title: str = "ratescape chart") -> str:
    """One chart as an offline HTML page (scripts inlined, specification escaped).

    Parameters
    ----------
    chart : altair chart
    title : str

    Returns
    -------
    str
    """
    return build_report_html([Section(title, chart=chart)], title=title)
