"""Charts of the whole portfolio: acceptance shares, acceptance against inflation, rank intervals and
selection shares in the budget-limited portfolios.

Small, pre-aggregated Polars frames in, Altair chart objects out.
"""
from __future__ import annotations

import altair as alt
import polars as pl

from ratescape.report.chart_style import (
    CATEGORY_COLOURS,
    MAX_CHART_ROWS,
    SEQUENTIAL_SCHEME,
    axis_format,
    axis_title,
    check_identifier,
    inline_values,
    require_columns,
    with_project_label,
)


def acceptance_share_bars(
    summary: pl.DataFrame,
    *,
    title: str | None = None,
    width: int = 480,
    max_rows: int = 500,
) -> alt.Chart:
    """Share of scenarios in which each project is accepted, sorted high to low.

    Parameters
    ----------
    summary : polars.DataFrame
        Columns ``project_id``, ``accept_share`` [fraction]; ``name`` optional.
    title : str, optional
    width : int
    max_rows : int
        Bars are one per row: pass a top-N selection.

    Returns
    -------
    altair.Chart
        Horizontal bars, coloured: accepted everywhere / in some
        scenarios / nowhere.

    Examples
    --------
    >>> s = pl.DataFrame({"project_id": ["a", "b"], "accept_share": [0.5, 1.0]})
    >>> acceptance_share_bars(s).to_dict()["mark"]["type"]
    'bar'
    """
    require_columns(summary, ["project_id", "accept_share"], "acceptance_share_bars")
    share = pl.col("accept_share")
    data = with_project_label(summary).select(["project_id", "label", "accept_share"]).with_columns(
        pl.when(share >= 1.0).then(pl.lit("accepted everywhere"))
        .when(share <= 0.0).then(pl.lit("accepted nowhere"))
        .otherwise(pl.lit("accepted in some scenarios")).alias("acceptance")
    )
    domain = ["accepted everywhere", "accepted in some scenarios", "accepted nowhere"]
    return alt.Chart(inline_values(data, "acceptance_share_bars", max_rows)).mark_bar().encode(
        x=alt.X("accept_share:Q", title=axis_title("accept_share"), axis=alt.Axis(format="%"),
                scale=alt.Scale(domain=[0, 1])),
        y=alt.Y("label:N", title="Project", sort="-x"),
        color=alt.Color("acceptance:N", title="Acceptance",
                        scale=alt.Scale(domain=domain, range=[CATEGORY_COLOURS[2], CATEGORY_COLOURS[1],
                                                              CATEGORY_COLOURS[5]])),
        tooltip=[alt.Tooltip("label:N", title="Project"),
                 alt.Tooltip("accept_share:Q", title=axis_title("accept_share"), format=".1%")],
    ).properties(title=title or "Share of scenarios in which each project is accepted",
                 width=width, height=alt.Step(16))


def acceptance_vs_inflation(
    frame: pl.DataFrame,
    *,
    x: str = "inflation",
    series: str = "discount_rate",
    title: str | None = None,
    width: int = 560,
    height: int = 300,
    max_rows: int = MAX_CHART_ROWS,
) -> alt.LayerChart:
    """Acceptance across the portfolio against inflation, one line per discount rate.

    Parameters
    ----------
    frame : polars.DataFrame
        Columns ``x`` (default ``inflation``), ``series`` (default
        ``discount_rate``) and either ``accept_share`` [fraction of
        projects] or ``accepted_count`` [projects].
    x, series : str
    title : str, optional
    width, height : int
    max_rows : int

    Returns
    -------
    altair.LayerChart
        Lines coloured by ``series`` (viridis) and hover points; hovering
        highlights one line.

    Examples
    --------
    >>> f = pl.DataFrame({"inflation": [0.0, 0.05], "discount_rate": [0.08, 0.08],
    ...                   "accept_share": [0.6, 0.4]})
    >>> acceptance_vs_inflation(f).to_dict()["layer"][0]["encoding"]["y"]["field"]
    'accept_share'
    """
    check_identifier(x, "x")
    check_identifier(series, "series")
    measure = "accept_share" if "accept_share" in frame.columns else "accepted_count"
    require_columns(frame, [x, series, measure], "acceptance_vs_inflation")
    data = frame.select([x, series, measure]).sort([series, x])
    hover = alt.selection_point(name="hover_rate", fields=[series], on="pointerover",
                                nearest=True, clear="pointerout")
    y_title = "Share of projects accepted" if measure == "accept_share" else "Projects accepted"
    y_fmt = "%" if measure == "accept_share" else ",d"
    colour = alt.Color(f"{series}:Q", title=axis_title(series), scale=alt.Scale(scheme=SEQUENTIAL_SCHEME),
                       legend=alt.Legend(format=axis_format(series)))
    base = alt.Chart(inline_values(data, "acceptance_vs_inflation", max_rows))
    x_enc = alt.X(f"{x}:Q", title=axis_title(x), axis=alt.Axis(format=axis_format(x)))
    lines = base.mark_line(strokeWidth=2).encode(
        x=x_enc, y=alt.Y(f"{measure}:Q", title=y_title, axis=alt.Axis(format=y_fmt)),
        color=colour, detail=f"{series}:N",
        opacity=alt.when(hover).then(alt.value(1.0)).otherwise(alt.value(0.3)),
    )
    points = base.mark_point(size=30, filled=True).encode(
        x=x_enc, y=f"{measure}:Q", color=colour,
        opacity=alt.when(hover).then(alt.value(0.9)).otherwise(alt.value(0.0)),
        tooltip=[alt.Tooltip(f"{x}:Q", title=axis_title(x), format=axis_format(x)),
                 alt.Tooltip(f"{series}:Q", title=axis_title(series), format=axis_format(series)),
                 alt.Tooltip(f"{measure}:Q", title=y_title,
                             format=".1%" if measure == "accept_share" else ",d")],
    ).add_params(hover)
    return alt.layer(lines, points).properties(
        title=title or "Projects accepted across the portfolio as inflation rises, one line per discount rate",
        width=width, height=height,
    )


def rank_intervals(
    summary: pl.DataFrame,
    *,
    title: str | None = None,
    width: int = 480,
    max_rows: int = 500,
) -> alt.LayerChart:
    """Rank stability: lowest, median and highest rank of each project over the scenarios.

    Parameters
    ----------
    summary : polars.DataFrame
        Columns ``project_id``, ``rank_min``, ``rank_median``, ``rank_max``
        (1 = highest present worth); ``name`` and ``rank_base`` optional.
    title : str, optional
    width : int
    max_rows : int

    Returns
    -------
    altair.LayerChart
        A rule from best to worst rank, a tick at the median (and a dot at
        the base scenario's rank), projects sorted by median rank.

    Examples
    --------
    >>> s = pl.DataFrame({"project_id": ["a"], "rank_min": [1], "rank_median": [2.0],
    ...                   "rank_max": [4]})
    >>> [l["mark"]["type"] for l in rank_intervals(s).to_dict()["layer"]]
    ['rule', 'tick']
    """
    require_columns(summary, ["project_id", "rank_min", "rank_median", "rank_max"], "rank_intervals")
    extra = ["rank_base"] if "rank_base" in summary.columns else []
    data = with_project_label(summary).select(["project_id", "label", "rank_min", "rank_median", "rank_max", *extra])
    y = alt.Y("label:N", title="Project",
              sort=alt.EncodingSortField(field="rank_median", op="min", order="ascending"))
    tooltip = [alt.Tooltip("label:N", title="Project"),
               alt.Tooltip("rank_min:Q", title="Best rank"),
               alt.Tooltip("rank_median:Q", title="Median rank"),
               alt.Tooltip("rank_max:Q", title="Worst rank")]
    if extra:
        tooltip.append(alt.Tooltip("rank_base:Q", title="Rank at base scenario"))
    base = alt.Chart(inline_values(data, "rank_intervals", max_rows))
    rule = base.mark_rule(strokeWidth=3, color=CATEGORY_COLOURS[4]).encode(
        x=alt.X("rank_min:Q", title="Rank by present worth (1 = best)", scale=alt.Scale(zero=False)),
        x2="rank_max:Q", y=y, tooltip=tooltip)
    tick = base.mark_tick(thickness=3, size=14, color=CATEGORY_COLOURS[0]).encode(
        x="rank_median:Q", y=y, tooltip=tooltip)
    layers = [rule, tick]
    if extra:
        layers.append(base.mark_point(shape="circle", filled=True, size=40,
                                      color=CATEGORY_COLOURS[5]).encode(
            x="rank_base:Q", y=y, tooltip=tooltip))
    return alt.layer(*layers).properties(
        title=title or "Rank range over all scenarios (bar: best to worst; tick: median; dot: base)",
        width=width, height=alt.Step(16))


def selection_share_bars(
    frame: pl.DataFrame,
    *,
    title: str | None = None,
    width: int = 480,
    max_rows: int = 500,
) -> alt.Chart:
    """Share of scenarios in which the budget-limited portfolio includes each project.

    Parameters
    ----------
    frame : polars.DataFrame
        Columns ``project_id``, ``selected_share`` [fraction]; ``name`` optional.
    title : str, optional
    width : int
    max_rows : int

    Returns
    -------
    altair.Chart
        Horizontal bars sorted high to low; projects selected in every
        scenario (the core portfolio) in a separate colour.

    Examples
    --------
    >>> f = pl.DataFrame({"project_id": ["a"], "selected_share": [1.0]})
    >>> selection_share_bars(f).to_dict()["encoding"]["x"]["field"]
    'selected_share'
    """
    require_columns(frame, ["project_id", "selected_share"], "selection_share_bars")
    data = with_project_label(frame).select(["project_id", "label", "selected_share"]).with_columns(
        pl.when(pl.col("selected_share") >= 1.0).then(pl.lit("in every scenario (core)"))
        .otherwise(pl.lit("in some scenarios")).alias("selection"))
    return alt.Chart(inline_values(data, "selection_share_bars", max_rows)).mark_bar().encode(
        x=alt.X("selected_share:Q", title=axis_title("selected_share"), axis=alt.Axis(format="%"),
                scale=alt.Scale(domain=[0, 1])),
        y=alt.Y("label:N", title="Project", sort="-x"),
        color=alt.Color("selection:N", title="Selected",
                        scale=alt.Scale(domain=["in every scenario (core)", "in some scenarios"],
                                        range=[CATEGORY_COLOURS[0], CATEGORY_COLOURS[4]])),
        tooltip=[alt.Tooltip("label:N", title="Project"),
                 alt.Tooltip("selected_share:Q", title=axis_title("selected_share"), format=".1%")],
    ).properties(title=title or "Share of scenarios in which the budget-limited portfolio includes each project",
                 width=width, height=alt.Step(16))
