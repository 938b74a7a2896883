"""A chart as a file: its Vega-Lite specification as data, and offline HTML, PNG, SVG or JSON.
"""
from __future__ import annotations

from pathlib import Path
from typing import Any

import altair as alt

from ratescape.report.page import Section, build_report_html, vega_lite_version


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
    ValueError
        For any other suffix.

    Notes
    -----
    HTML goes through :func:`standalone_chart_html`, which
    inlines Vega, Vega-Lite and vega-embed and escapes the specification;
    PNG and SVG are rendered by vl-convert without a browser.
    """
    import vl_convert as vlc

    out = Path(path)
    suffix = out.suffix.lower()
    spec = chart_spec(chart)
    if suffix == ".html":
        out.write_text(standalone_chart_html(chart), encoding="utf-8")
    elif suffix == ".png":
        out.write_bytes(vlc.vegalite_to_png(spec, vl_version=vega_lite_version(), scale=scale))
    elif suffix == ".svg":
        out.write_text(vlc.vegalite_to_svg(spec, vl_version=vega_lite_version()), encoding="utf-8")
    elif suffix == ".json":
        import json

        out.write_text(json.dumps(spec, indent=2, allow_nan=False), encoding="utf-8")
    else:
        raise ValueError(f"cannot save a chart as {suffix or 'a file without suffix'!r}; "
                         "use a path ending in .html, .png, .svg or .json")
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
