"""Charts of one project or one group: worth curve against a rate, worth surface with iso-worth
contours, decision map with the indifference frontier, tornado and spider.

Small, pre-aggregated Polars frames in, Altair chart objects out.
"""
from __future__ import annotations

from collections.abc import Sequence

import altair as alt
import numpy as np
import polars as pl

from ratescape.report.chart_style import (
    ChartRows,
    CATEGORY_COLOURS,
    MAX_CHART_ROWS,
    MONEY_LABEL_EXPR,
    WORTH_ABOVE,
    WORTH_BELOW,
    WORTH_ZERO,
    clipped_worth_domain,
    SEQUENTIAL_SCHEME,
    add_cell_edges,
    axis_format,
    axis_title,
    check_identifier,
    inline_values,
    project_selector,
    require_columns,
    short_label,
    slider_param,
    with_project_label,
)
from ratescape.report.contours import contour_label_points, place_contour_labels, surface_contours


def worth_curve(
    frame: pl.DataFrame,
    irr_points: pl.DataFrame | None = None,
    *,
    x: str = "discount_rate",
    measure: str = "present_worth",
    series: str = "inflation",
    irr_column: str | None = None,
    title: str | None = None,
    width: int = 560,
    height: int = 320,
    max_rows: int = MAX_CHART_ROWS,
) -> alt.LayerChart:
    """Worth of a project against the discount rate, one line per inflation level.

    Parameters
    ----------
    frame : polars.DataFrame
        Columns ``project_id``, ``x`` (default ``discount_rate``),
        ``series`` (default ``inflation``), ``measure`` (default
        ``present_worth``); ``name`` optional. Several projects give a
        project dropdown.
    irr_points : polars.DataFrame, optional
        Columns ``project_id``, ``series`` and ``irr_column``: each IRR
        root, drawn as a diamond on the zero line. Rows with a null root,
        or a root outside the range of ``x`` in ``frame``, are dropped.
    x, measure, series : str
        Column names of the horizontal axis, the worth and the line levels.
    irr_column : str, optional
        Defaults to ``irr_real`` when ``x`` is ``real_rate``, else ``irr_nominal``.
    title : str, optional
    width, height : int
        Plot size [pixels].
    max_rows : int
        Refuse frames longer than this.

    Returns
    -------
    altair.LayerChart
        Layers: lines (colour by ``series``, viridis), hover points with
        tooltips, the zero rule and the IRR diamonds. Hovering a line
        highlights it and its IRR marks.

    Examples
    --------
    >>> f = pl.DataFrame({"project_id": ["A"] * 4, "discount_rate": [0.0, 0.1] * 2,
    ...                   "inflation": [0.0, 0.0, 0.05, 0.05],
    ...                   "present_worth": [10.0, -2.0, 12.0, -1.0]})
    >>> [layer["mark"]["type"] for layer in worth_curve(f).to_dict()["layer"]]
    ['line', 'point', 'rule']
    """
    for c, what in ((x, "x"), (measure, "measure"), (series, "series")):
        check_identifier(c, what)
    require_columns(frame, ["project_id", x, series, measure], "worth_curve")
    if irr_column is None:
        irr_column = "irr_real" if x == "real_rate" else "irr_nominal"
    frame = with_project_label(frame)
    cols = ["project_id", "label", x, series, measure]
    data = frame.select(cols).sort(["project_id", series, x])
    project = project_selector(frame)
    hover = alt.selection_point(name="hover_level", fields=[series], on="pointerover",
                                nearest=True, clear="pointerout")
    colour = alt.Color(f"{series}:Q", title=axis_title(series),
                       scale=alt.Scale(scheme=SEQUENTIAL_SCHEME),
                       legend=alt.Legend(format=axis_format(series)))
    x_enc = alt.X(f"{x}:Q", title=axis_title(x), axis=alt.Axis(format=axis_format(x)))
    tooltip = [
        alt.Tooltip("label:N", title="Project"),
        alt.Tooltip(f"{x}:Q", title=axis_title(x), format=axis_format(x)),
        alt.Tooltip(f"{series}:Q", title=axis_title(series), format=axis_format(series)),
        alt.Tooltip(f"{measure}:Q", title=axis_title(measure), format=",.2f"),
    ]
    base = alt.Chart(inline_values(data, "worth_curve", max_rows))
    if project is not None:
        base = base.transform_filter(alt.datum.project_id == project)
    lines = base.mark_line(strokeWidth=2).encode(
        x=x_enc,
        y=alt.Y(f"{measure}:Q", title=axis_title(measure), axis=alt.Axis(labelExpr=MONEY_LABEL_EXPR)),
        color=colour,
        detail=alt.Detail(f"{series}:N"),
        opacity=alt.when(hover).then(alt.value(1.0)).otherwise(alt.value(0.35)),
    )
    points = base.mark_point(size=30, filled=True).encode(
        x=x_enc, y=f"{measure}:Q", color=colour, tooltip=tooltip,
        opacity=alt.when(hover).then(alt.value(0.9)).otherwise(alt.value(0.0)),
    ).add_params(hover)
    zero = alt.Chart().mark_rule(color="#333333", strokeDash=[4, 3]).encode(y=alt.datum(0))
    layers = [lines, points, zero]
    if irr_points is not None:
        require_columns(irr_points, ["project_id", series, irr_column], "worth_curve", "irr_points")
        names = frame.select(pl.col("project_id").cast(pl.String), "label").unique("project_id")
        roots = (
            irr_points.select(pl.col("project_id").cast(pl.String), series,
                              pl.col(irr_column).cast(pl.Float64).fill_nan(None))
            .drop_nulls(irr_column)
            .filter(pl.col(irr_column).is_between(data[x].min(), data[x].max()))
            .join(names, on="project_id", how="left")
            .with_columns(pl.col("label").fill_null(pl.col("project_id")))
            .select(["project_id", "label", series, irr_column])
        )
        irr = alt.Chart(inline_values(roots, "worth_curve", max_rows))
        if project is not None:
            irr = irr.transform_filter(alt.datum.project_id == project)
        irr = irr.mark_point(shape="diamond", size=110, filled=True, stroke="#000000",
                             strokeWidth=1).encode(
            x=alt.X(f"{irr_column}:Q"),
            y=alt.datum(0),
            color=colour,
            opacity=alt.when(hover).then(alt.value(1.0)).otherwise(alt.value(0.5)),
            tooltip=[
                alt.Tooltip("label:N", title="Project"),
                alt.Tooltip(f"{series}:Q", title=axis_title(series), format=axis_format(series)),
                alt.Tooltip(f"{irr_column}:Q", title=axis_title(irr_column), format=".3%"),
            ],
        )
        layers.append(irr)
    chart = alt.layer(*layers).properties(
        title=title or f"{axis_title(measure)} against {short_label(x)}, one line per {short_label(series)} level; "
                       "diamonds mark the IRR",
        width=width, height=height,
    )
    if project is not None:
        chart = chart.add_params(project)
    return chart


def worth_surface(
    frame: pl.DataFrame,
    contours: pl.DataFrame | None = None,
    *,
    x: str = "discount_rate",
    y: str = "inflation",
    value: str = "present_worth",
    levels: Sequence[float] | np.ndarray | None = None,
    slider: str | None = None,
    title: str | None = None,
    width: int = 480,
    height: int = 360,
    max_rows: int = MAX_CHART_ROWS,
) -> alt.LayerChart:
    """Worth over two inputs: a heat surface with labelled iso-worth lines.

    Parameters
    ----------
    frame : polars.DataFrame
        One row per grid point, columns ``x``, ``y``, ``value`` (and
        ``slider``); a rectangular grid.
    contours : polars.DataFrame, optional
        Columns ``level``, ``line``, ``point``, ``x``, ``y`` (and
        ``slider``), as from :func:`contour_lines`; by default traced from
        ``frame`` by :func:`surface_contours` at ``levels``.
    x, y, value : str
        Column names of the axes and the surface.
    levels : array_like, optional
        Worth levels when contours are traced here (default: round levels).
    slider : str, optional
        A third-axis column; a slider picks its value.
    title : str, optional
    width, height : int
        Plot size [pixels].
    max_rows : int

    Returns
    -------
    altair.LayerChart
        Layers: rect (colour by :func:`worth_colour_scale`, tooltip with
        exact values), contour lines, contour labels.

    Examples
    --------
    >>> f = pl.DataFrame({"discount_rate": [0.0, 0.1, 0.0, 0.1],
    ...                   "inflation": [0.0, 0.0, 0.1, 0.1],
    ...                   "present_worth": [-1.0, 1.0, -1.0, 1.0]})
    >>> [l["mark"]["type"] for l in worth_surface(f, levels=[0.0]).to_dict()["layer"]]
    ['rect', 'line', 'text']
    """
    for c, what in ((x, "x"), (y, "y"), (value, "value")):
        check_identifier(c, what)
    keys = [] if slider is None else [check_identifier(slider, "slider")]
    require_columns(frame, [x, y, value, *keys], "worth_surface")
    if contours is None:
        contours = surface_contours(frame, x=x, y=y, value=value, levels=levels, by=keys or None)
    require_columns(contours, ["level", "line", "point", "x", "y", *keys], "worth_surface", "contours")
    cells = add_cell_edges(add_cell_edges(frame.select([x, y, value, *keys]), x), y)
    filt = None
    params = []
    if slider is not None:
        param, filt = slider_param(frame, slider, axis_title(slider))
        params.append(param)
    # symmetric about zero, clipped at the 2nd-98th percentile (chart_style.clipped_worth_domain)
    clip, _beyond = clipped_worth_domain(frame[value].cast(pl.Float64).to_numpy())
    colour = alt.Color(f"{value}:Q", title=f"{axis_title(value)} (colour clipped at ±{clip:,.0f})",
                       scale=alt.Scale(type="linear", domain=[-clip, 0.0, clip], clamp=True,
                                       range=[WORTH_BELOW, WORTH_ZERO, WORTH_ABOVE]),
                       legend=alt.Legend(labelExpr=MONEY_LABEL_EXPR))
    rect = alt.Chart(inline_values(cells, "worth_surface", max_rows)).mark_rect().encode(
        x=alt.X(f"{x}_lo:Q", title=axis_title(x), axis=alt.Axis(format=axis_format(x)),
                scale=alt.Scale(nice=False, zero=False)),
        x2=f"{x}_hi:Q",
        y=alt.Y(f"{y}_lo:Q", title=axis_title(y), axis=alt.Axis(format=axis_format(y)),
                scale=alt.Scale(nice=False, zero=False)),
        y2=f"{y}_hi:Q",
        color=colour,
        tooltip=[
            alt.Tooltip(f"{x}:Q", title=axis_title(x), format=axis_format(x)),
            alt.Tooltip(f"{y}:Q", title=axis_title(y), format=axis_format(y)),
            alt.Tooltip(f"{value}:Q", title=axis_title(value), format=",.2f"),
        ],
    )
    line_data = contours.select(["level", "line", "point", "x", "y", *keys]).sort(["line", "point"])
    lines = alt.Chart(inline_values(line_data, "worth_surface", max_rows)).mark_line(
        color="#1a1a1a", strokeWidth=1.2).encode(
        x="x:Q", y="y:Q", detail="line:N", order="point:Q",
        tooltip=[alt.Tooltip("level:Q", title=f"{axis_title(value)} on this line", format=",.2f")],
    )
    if keys:
        label_data = contour_label_points(line_data, keys)
    else:   # one label per line where it keeps clear of the others
        span = [float(frame[c].max() - frame[c].min()) or 1.0 for c in (x, y)]
        label_data = place_contour_labels(line_data, x_span=span[0], y_span=span[1])
    labels = alt.Chart(inline_values(label_data, "worth_surface", max_rows)).mark_text(
        fontSize=10, fontWeight="bold", color="#1a1a1a", dy=-6).encode(
        x="x:Q", y="y:Q", text="text:N")
    if filt is not None:
        rect, lines, labels = (c.transform_filter(filt) for c in (rect, lines, labels))
    chart = alt.layer(rect, lines, labels).properties(
        title=title or f"{axis_title(value)} over {short_label(x)} and {short_label(y)}; lines join equal worth",
        width=width, height=height,
    )
    if params:
        chart = chart.add_params(*params)
    return chart


def _four_digits(values: np.ndarray) -> np.ndarray:
    """Values rounded to four significant digits (NaN kept)."""
    v = np.asarray(values, dtype=float)
    out = v.copy()
    nz = np.isfinite(v) & (v != 0)
    k = np.floor(np.log10(np.abs(v[nz]))) - 3
    mant = np.round(v[nz] / 10.0 ** k)
    out[nz] = np.where(k >= 0, mant * 10.0 ** np.maximum(k, 0), mant / 10.0 ** np.maximum(-k, 0))
    return out


def decision_map(
    frame: pl.DataFrame,
    frontier: pl.DataFrame | None = None,
    *,
    x: str = "discount_rate",
    y: str = "inflation",
    title: str | None = None,
    width: int = 480,
    height: int = 360,
    max_rows: int = MAX_CHART_ROWS,
) -> ChartRows:
    """Which alternative is preferred where, with the indifference frontier.

    Parameters
    ----------
    frame : polars.DataFrame
        One row per grid point: ``x``, ``y``, ``preferred`` (alternative
        id or name), ``margin`` [currency] (worth of the preferred over the
        runner-up); ``runner_up`` optional.
    frontier : polars.DataFrame, optional
        Columns ``alternative_a``, ``alternative_b``, ``segment``,
        ``point``, ``x``, ``y``: the root-found lines where two
        alternatives have equal worth, drawn in ``point`` order.
    x, y : str
        Column names of the axes in ``frame``.
    title : str, optional
    width, height : int
    max_rows : int

    Returns
    -------
    ChartRows
        A layered chart on named data (its rows join in ``to_dict``): rect regions (categorical
        colour-blind-safe colours; clicking a legend entry highlights that alternative), and the
        frontier lines.

    Examples
    --------
    >>> f = pl.DataFrame({"discount_rate": [0.0, 0.1], "inflation": [0.0, 0.0],
    ...                   "preferred": ["A", "B"], "margin": [5.0, 1.0]})
    >>> decision_map(f).to_dict()["layer"][0]["mark"]["type"]
    'rect'
    """
    check_identifier(x, "x")
    check_identifier(y, "y")
    require_columns(frame, [x, y, "preferred", "margin"], "decision_map")
    extra = ["runner_up"] if "runner_up" in frame.columns else []
    cells = add_cell_edges(add_cell_edges(frame.select([x, y, "preferred", "margin", *extra]), x), y)
    cells = cells.with_columns(pl.col("preferred").cast(pl.String))
    alternatives = sorted(cells["preferred"].drop_nulls().unique().to_list())
    palette = [CATEGORY_COLOURS[i % len(CATEGORY_COLOURS)] for i in range(len(alternatives))]
    pick = alt.selection_point(name="pick_alternative", fields=["preferred"], bind="legend")
    tooltip = [
        alt.Tooltip(f"{x}:Q", title=axis_title(x), format=axis_format(x)),
        alt.Tooltip(f"{y}:Q", title=axis_title(y), format=axis_format(y)),
        alt.Tooltip("preferred:N", title="Preferred"),
    ]
    if extra:
        tooltip.append(alt.Tooltip("runner_up:N", title="Runner-up"))
    tooltip.append(alt.Tooltip("margin:Q", title=axis_title("margin"), format=",.4r"))
    # names once, cells by code (a lookup restores them in the browser): a tenth of the bytes
    names = sorted(set(alternatives) | (set(cells["runner_up"].cast(pl.String).drop_nulls().to_list())
                                        if extra else set()))
    code = {n: i for i, n in enumerate(names)}
    coded = cells.with_columns(
        pl.col("preferred").replace_strict(code, default=None, return_dtype=pl.Int64).alias("p"),
        *([pl.col("runner_up").cast(pl.String).replace_strict(code, default=None, return_dtype=pl.Int64).alias("r")]
          if extra else []),
        *[pl.col(c).round(6) for c in (x, y, f"{x}_lo", f"{x}_hi", f"{y}_lo", f"{y}_hi")],
        pl.col("margin").map_batches(lambda m: pl.Series(_four_digits(m.to_numpy())), return_dtype=pl.Float64),
    ).drop("preferred", *extra)
    datasets = {"decision_cells": inline_values(coded, "decision_map", max_rows)["values"]}
    lookup = alt.LookupData(data=alt.InlineData(values=[{"code": i, "name": n} for i, n in enumerate(names)]),
                            key="code", fields=["name"])
    rect = alt.Chart(alt.NamedData(name="decision_cells")).transform_lookup(
        lookup="p", from_=lookup, as_=["preferred"])
    if extra:
        rect = rect.transform_lookup(lookup="r", from_=lookup, as_=["runner_up"])
    rect = rect.mark_rect().encode(
        x=alt.X(f"{x}_lo:Q", title=axis_title(x), axis=alt.Axis(format=axis_format(x)),
                scale=alt.Scale(nice=False, zero=False)),
        x2=f"{x}_hi:Q",
        y=alt.Y(f"{y}_lo:Q", title=axis_title(y), axis=alt.Axis(format=axis_format(y)),
                scale=alt.Scale(nice=False, zero=False)),
        y2=f"{y}_hi:Q",
        color=alt.Color("preferred:N", title="Preferred alternative",
                        scale=alt.Scale(domain=alternatives, range=palette)),
        opacity=alt.when(pick).then(alt.value(0.85)).otherwise(alt.value(0.25)),
        tooltip=tooltip,
    ).add_params(pick)
    layers = [rect]
    if frontier is not None:
        require_columns(frontier, ["alternative_a", "alternative_b", "segment", "point", "x", "y"],
                 "decision_map", "frontier")
        fr = frontier.select(["alternative_a", "alternative_b", "segment", "point", "x", "y"]).with_columns(
            pl.col("alternative_a").cast(pl.String), pl.col("alternative_b").cast(pl.String)
        ).sort(["alternative_a", "alternative_b", "segment", "point"])
        datasets["decision_frontier"] = inline_values(fr, "decision_map", max_rows)["values"]
        line = alt.Chart(alt.NamedData(name="decision_frontier")).mark_line(
            color="#000000", strokeWidth=2.5).encode(
            x="x:Q", y="y:Q",
            detail=["alternative_a:N", "alternative_b:N", "segment:N"],
            order="point:Q",
            tooltip=[alt.Tooltip("alternative_a:N", title="Equal worth:"),
                     alt.Tooltip("alternative_b:N", title="and")],
        )
        layers.append(line)
    return ChartRows(alt.layer(*layers).properties(
        title=title or "Preferred alternative; the black line is where two alternatives are worth the same",
        width=width, height=height,
    ), datasets)


def tornado(
    frame: pl.DataFrame,
    *,
    title: str | None = None,
    width: int = 480,
    max_rows: int = 2_000,
) -> alt.LayerChart:
    """Tornado chart: present worth at the low and high value of each input, widest swing on top.

    Parameters
    ----------
    frame : polars.DataFrame
        Columns ``project_id``, ``input`` (plain name of the input),
        ``worth_low`` and ``worth_high`` [currency] (worth with the input
        at its low / high value, the others at base) and ``base_worth``
        [currency]; ``name`` optional. Several projects give a dropdown.
    title : str, optional
    width : int
    max_rows : int

    Returns
    -------
    altair.LayerChart
        Two bars per input from the base worth (input low / input high),
        sorted by swing = |worth_high - worth_low|, a rule at the base worth.

    Examples
    --------
    >>> f = pl.DataFrame({"project_id": ["a", "a"], "input": ["MARR", "life"],
    ...                   "worth_low": [10.0, -5.0], "worth_high": [-8.0, 3.0],
    ...                   "base_worth": [1.0, 1.0]})
    >>> tornado(f).to_dict()["layer"][0]["mark"]["type"]
    'bar'
    """
    require_columns(frame, ["project_id", "input", "worth_low", "worth_high", "base_worth"], "tornado")
    f = with_project_label(frame).with_columns(
        (pl.col("worth_high") - pl.col("worth_low")).abs().alias("swing"))
    keep = ["project_id", "label", "input", "base_worth", "swing"]
    long = pl.concat([
        f.select([*keep, pl.col("worth_low").alias("worth"), pl.lit("input at low value").alias("setting")]),
        f.select([*keep, pl.col("worth_high").alias("worth"), pl.lit("input at high value").alias("setting")]),
    ]).with_columns(pl.col("input").cast(pl.String))
    project = project_selector(frame)
    base = alt.Chart(inline_values(long, "tornado", max_rows))
    if project is not None:
        base = base.transform_filter(alt.datum.project_id == project)
    y = alt.Y("input:N", title="Input", sort=alt.EncodingSortField(field="swing", op="max", order="descending"))
    bars = base.mark_bar(opacity=0.9).encode(
        x=alt.X("base_worth:Q", title="Present worth", axis=alt.Axis(labelExpr=MONEY_LABEL_EXPR)),
        x2="worth:Q",
        y=y,
        color=alt.Color("setting:N", title="",
                        scale=alt.Scale(domain=["input at low value", "input at high value"],
                                        range=[CATEGORY_COLOURS[5], CATEGORY_COLOURS[0]])),
        tooltip=[alt.Tooltip("label:N", title="Project"), alt.Tooltip("input:N", title="Input"),
                 alt.Tooltip("setting:N", title="Setting"),
                 alt.Tooltip("worth:Q", title="Present worth", format=",.2f"),
                 alt.Tooltip("base_worth:Q", title="Base present worth", format=",.2f"),
                 alt.Tooltip("swing:Q", title="Swing", format=",.2f")],
    )
    rule = base.mark_rule(color="#000000", strokeWidth=1.5).encode(x="mean(base_worth):Q")
    chart = alt.layer(bars, rule).properties(
        title=title or "Tornado: present worth with each input at its low and high value",
        width=width, height=alt.Step(22))
    if project is not None:
        chart = chart.add_params(project)
    return chart


def spider(
    frame: pl.DataFrame,
    *,
    title: str | None = None,
    width: int = 480,
    height: int = 320,
    max_rows: int = MAX_CHART_ROWS,
) -> alt.LayerChart:
    """Spider chart: present worth as each input moves from its base value, one line per input.

    Parameters
    ----------
    frame : polars.DataFrame
        Columns ``input``, ``pct_change`` [fraction: 0.1 = 10 % above
        base], ``present_worth`` [currency]; ``project_id`` and ``name``
        optional (several projects give a dropdown).
    title : str, optional
    width, height : int
    max_rows : int

    Returns
    -------
    altair.LayerChart
        Lines and points coloured by input (categorical palette); clicking
        a legend entry highlights that input; a zero-worth rule.

    Examples
    --------
    >>> f = pl.DataFrame({"input": ["MARR"] * 3, "pct_change": [-0.1, 0.0, 0.1],
    ...                   "present_worth": [5.0, 1.0, -2.0]})
    >>> [l["mark"]["type"] for l in spider(f).to_dict()["layer"]]
    ['line', 'rule']
    """
    require_columns(frame, ["input", "pct_change", "present_worth"], "spider")
    if "project_id" not in frame.columns:
        frame = frame.with_columns(pl.lit("project").alias("project_id"))
    data = with_project_label(frame).select(["project_id", "label", "input", "pct_change", "present_worth"]).with_columns(
        pl.col("input").cast(pl.String)).sort(["project_id", "input", "pct_change"])
    inputs = sorted(data["input"].unique().to_list())
    palette = [CATEGORY_COLOURS[i % len(CATEGORY_COLOURS)] for i in range(len(inputs))]
    project = project_selector(frame)
    pick = alt.selection_point(name="pick_input", fields=["input"], bind="legend")
    base = alt.Chart(inline_values(data, "spider", max_rows))
    if project is not None:
        base = base.transform_filter(alt.datum.project_id == project)
    lines = base.mark_line(point=True, strokeWidth=2).encode(
        x=alt.X("pct_change:Q", title=axis_title("pct_change"), axis=alt.Axis(format="+%")),
        y=alt.Y("present_worth:Q", title="Present worth", axis=alt.Axis(labelExpr=MONEY_LABEL_EXPR)),
        color=alt.Color("input:N", title="Input", scale=alt.Scale(domain=inputs, range=palette)),
        opacity=alt.when(pick).then(alt.value(1.0)).otherwise(alt.value(0.2)),
        tooltip=[alt.Tooltip("label:N", title="Project"), alt.Tooltip("input:N", title="Input"),
                 alt.Tooltip("pct_change:Q", title=axis_title("pct_change"), format="+.1%"),
                 alt.Tooltip("present_worth:Q", title="Present worth", format=",.2f")],
    ).add_params(pick)
    zero = alt.Chart().mark_rule(color="#333333", strokeDash=[4, 3]).encode(y=alt.datum(0))
    chart = alt.layer(lines, zero).properties(
        title=title or "Spider: present worth as each input moves away from its base value",
        width=width, height=height)
    if project is not None:
        chart = chart.add_params(project)
    return chart
