"""Chart templates of the in-page drill-down: one Vega-Lite specification per kind, with named
datasets the page script fills for the project the reader picks.

The page carries each template once (not one chart per project); the script sets the named
datasets (``curve``, ``irr``, ``cells``, ``lines``, ``labels``, ``zero_real``, ``tornado``,
``spider``) from the embedded data, the title, and the colour domain of the surface. Tested as data
(``to_dict``) like every other chart.
"""
from __future__ import annotations

import altair as alt

from ratescape.report.chart_style import (
    CATEGORY_COLOURS,
    MONEY_LABEL_EXPR,
    SEQUENTIAL_SCHEME,
    WORTH_ABOVE,
    WORTH_BELOW,
    WORTH_ZERO,
    axis_format,
    axis_title,
    money_axis,
)

#: Templates in the order the drill-down shows them; key -> (one-line reading guide).
DRILL_GUIDES = {
    "curve": ("Read: where a line crosses zero the project breaks even; the diamond there is its IRR at that "
              "inflation. Hollow circles are scenarios whose real discount rate is below zero."),
    "surface": ("Read: blue is worth above zero, vermilion below, pale near zero; black lines join equal worth "
                "(labelled in thousands k or millions M); the dashed line is a real discount rate of zero "
                "(scenarios on its below-zero side have a negative real rate)."),
    "tornado": ("Read: each bar runs from the base present worth to the worth with one input at its low or "
                "high value, the others held at base; the widest swing is on top."),
    "spider": ("Read: each line follows present worth as one input moves away from its base value; the "
               "steeper the line, the more that input matters."),
}


def _x_title(x: str) -> str:
    return axis_title(x)


def curve_template(x: str = "discount_rate", *, width: int = 520, height: int = 300) -> alt.LayerChart:
    """Present worth against the discount rate, one line per inflation level, IRRs as diamonds.

    Data ``curve``: ``x`` [fraction], ``inflation`` [fraction], ``pw`` [currency], ``negative_real``
    (bool). Data ``irr``: ``inflation``, ``irr`` [fraction, on the axis basis of ``x``].
    """
    colour = alt.Color("inflation:Q", title=axis_title("inflation"), scale=alt.Scale(scheme=SEQUENTIAL_SCHEME),
                       legend=alt.Legend(format=".1%"))
    x_enc = alt.X("x:Q", title=_x_title(x), axis=alt.Axis(format=axis_format(x)))
    tip = [alt.Tooltip("x:Q", title=_x_title(x), format=".2%"),
           alt.Tooltip("inflation:Q", title=axis_title("inflation"), format=".2%"),
           alt.Tooltip("pw:Q", title="Present worth", format=",.0f")]
    base = alt.Chart(alt.NamedData(name="curve"))
    lines = base.mark_line(strokeWidth=2).encode(
        x=x_enc, y=alt.Y("pw:Q", axis=money_axis("Present worth")), color=colour,
        detail=alt.Detail("inflation:N"))
    points = base.mark_point(size=40, filled=True, opacity=0.0).encode(x=x_enc, y="pw:Q", tooltip=tip)
    negative = base.transform_filter("datum.negative_real").mark_point(
        size=26, filled=False, strokeWidth=1).encode(x=x_enc, y="pw:Q", color=colour, tooltip=tip)
    zero = alt.Chart(alt.NamedData(name="curve")).mark_rule(color="#333333", strokeDash=[4, 3]).encode(
        y=alt.datum(0))
    irr = alt.Chart(alt.NamedData(name="irr")).mark_point(
        shape="diamond", size=110, filled=True, stroke="#000000", strokeWidth=1).encode(
        x=alt.X("irr:Q"), y=alt.datum(0), color=colour,
        tooltip=[alt.Tooltip("inflation:Q", title=axis_title("inflation"), format=".2%"),
                 alt.Tooltip("irr:Q", title="IRR", format=".2%")])
    return alt.layer(lines, negative, points, zero, irr).properties(width=width, height=height,
                                                                    title="Present worth")


def surface_template(x: str = "discount_rate", *, width: int = 460, height: int = 340) -> alt.LayerChart:
    """Present worth over the discount rate and inflation with iso-worth lines and their labels.

    Data ``cells``: ``x``, ``x_lo``, ``x_hi``, ``inflation``, ``y_lo``, ``y_hi``, ``pw``. Data ``lines``:
    ``line``, ``point``, ``level``, ``x``, ``y``; ``labels``: ``x``, ``y``, ``text``; ``zero_real``:
    ``x``, ``y`` (the line of zero real discount rate). Layer 0's colour domain ``[-m, 0, m]`` is set by
    the page script from the clipping rule (:func:`chart_style.clipped_worth_domain`), clamped.
    """
    xs = alt.Scale(nice=False, zero=False)
    rect = alt.Chart(alt.NamedData(name="cells")).mark_rect().encode(
        x=alt.X("x_lo:Q", title=_x_title(x), axis=alt.Axis(format=axis_format(x)), scale=xs),
        x2="x_hi:Q",
        y=alt.Y("y_lo:Q", title=axis_title("inflation"), axis=alt.Axis(format=".1%"), scale=xs),
        y2="y_hi:Q",
        color=alt.Color("pw:Q", title="Present worth",
                        scale=alt.Scale(type="linear", domain=[-1.0, 0.0, 1.0], clamp=True,
                                        range=[WORTH_BELOW, WORTH_ZERO, WORTH_ABOVE]),
                        legend=alt.Legend(labelExpr=MONEY_LABEL_EXPR)),
        tooltip=[alt.Tooltip("x:Q", title=_x_title(x), format=".2%"),
                 alt.Tooltip("inflation:Q", title=axis_title("inflation"), format=".2%"),
                 alt.Tooltip("pw:Q", title="Present worth", format=",.0f")])
    lines = alt.Chart(alt.NamedData(name="lines")).mark_line(color="#1a1a1a", strokeWidth=1.2).encode(
        x="x:Q", y="y:Q", detail="line:N", order="point:Q",
        tooltip=[alt.Tooltip("level:Q", title="Present worth on this line", format=",.0f")])
    zero_real = alt.Chart(alt.NamedData(name="zero_real")).mark_line(
        color="#555555", strokeDash=[6, 4], strokeWidth=1.5).encode(x="x:Q", y="y:Q")
    labels = alt.Chart(alt.NamedData(name="labels")).mark_text(
        fontSize=10, fontWeight="bold", color="#1a1a1a", stroke="#ffffff", strokeWidth=3,
        strokeOpacity=0.8).encode(x="x:Q", y="y:Q", text="text:N")
    labels_top = alt.Chart(alt.NamedData(name="labels")).mark_text(
        fontSize=10, fontWeight="bold", color="#1a1a1a").encode(x="x:Q", y="y:Q", text="text:N")
    return alt.layer(rect, zero_real, lines, labels, labels_top).properties(
        width=width, height=height, title="Present worth surface")


def tornado_template(*, width: int = 440) -> alt.LayerChart:
    """Tornado of one project. Data ``tornado``: ``input`` (plain words), ``setting``, ``worth``,
    ``base``, ``swing``."""
    y = alt.Y("input:N", title=None, sort=alt.EncodingSortField(field="swing", op="max", order="descending"))
    base = alt.Chart(alt.NamedData(name="tornado"))
    bars = base.mark_bar(opacity=0.9).encode(
        x=alt.X("base:Q", axis=money_axis("Present worth")), x2="worth:Q", y=y,
        color=alt.Color("setting:N", title="Input set to",
                        scale=alt.Scale(domain=["its low value", "its high value"],
                                        range=[CATEGORY_COLOURS[5], CATEGORY_COLOURS[0]])),
        tooltip=[alt.Tooltip("input:N", title="Input"), alt.Tooltip("setting:N", title="Input set to"),
                 alt.Tooltip("worth:Q", title="Present worth", format=",.0f"),
                 alt.Tooltip("base:Q", title="Base present worth", format=",.0f")])
    rule = base.mark_rule(color="#000000", strokeWidth=1.5).encode(x="mean(base):Q")
    return alt.layer(bars, rule).properties(width=width, height=alt.Step(24), title="Tornado")


def spider_template(*, width: int = 440, height: int = 280) -> alt.LayerChart:
    """Spider of one project. Data ``spider``: ``input`` (plain words), ``change`` [fraction], ``pw``."""
    base = alt.Chart(alt.NamedData(name="spider"))
    lines = base.mark_line(point=True, strokeWidth=2).encode(
        x=alt.X("change:Q", title="Change in the input from its base value", axis=alt.Axis(format="+%")),
        y=alt.Y("pw:Q", axis=money_axis("Present worth")),
        color=alt.Color("input:N", title="Input", scale=alt.Scale(range=list(CATEGORY_COLOURS))),
        tooltip=[alt.Tooltip("input:N", title="Input"),
                 alt.Tooltip("change:Q", title="Change from base", format="+.0%"),
                 alt.Tooltip("pw:Q", title="Present worth", format=",.0f")])
    zero = alt.Chart(alt.NamedData(name="spider")).mark_rule(color="#333333", strokeDash=[4, 3]).encode(
        y=alt.datum(0))
    return alt.layer(lines, zero).properties(width=width, height=height, title="Spider")


def drill_templates(x: str = "discount_rate") -> dict[str, dict]:
    """Every drill-down template as a Vega-Lite dict, keyed as :data:`DRILL_GUIDES`."""
    return {"curve": curve_template(x).to_dict(), "surface": surface_template(x).to_dict(),
            "tornado": tornado_template().to_dict(), "spider": spider_template().to_dict()}
