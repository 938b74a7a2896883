"""Shared style of the charts: colours, titles, number formats, and the checks every chart makes
of the frame it is given.

Colours
-------
* categories (alternatives, inputs): :data:`CATEGORY_COLOURS`, hues from
  the colour-universal-design set of Okabe and Ito, in an order of our own;
* ordered levels (inflation, discount rate): Vega's ``viridis`` scheme;
* worth: near-white at zero, shading to vermilion below and blue above
  (:func:`worth_colour_scale`).

References
----------
Okabe, M. and Ito, K., "Color Universal Design (CUD): How to make figures
and presentations that are friendly to colorblind people", J*Fly, 2008.
"""
from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

import altair as alt
import numpy as np
import polars as pl

#: Categorical colours (Okabe & Ito 2008 hues; our order, yellow last for contrast on white).
CATEGORY_COLOURS = (
    "#0072B2",  # blue
    "#E69F00",  # orange
    "#009E73",  # bluish green
    "#CC79A7",  # reddish purple
    "#56B4E9",  # sky blue
    "#D55E00",  # vermilion
    "#000000",  # black
    "#F0E442",  # yellow
)


SEQUENTIAL_SCHEME = "viridis"


#: Worth colours: below zero, at zero, above zero (Okabe & Ito vermilion and blue around near-white).
WORTH_BELOW, WORTH_ZERO, WORTH_ABOVE = "#D55E00", "#F7F7F7", "#0072B2"


#: Largest number of data rows one chart accepts unless ``max_rows`` says otherwise.
MAX_CHART_ROWS = 20_000


RATE_COLUMNS = {"discount_rate", "real_rate", "inflation", "marr", "escalation",
                 "irr_nominal", "irr_real", "tax_rate", "pct_change"}


TITLES = {
    "discount_rate": "Discount rate, nominal (per year)",
    "real_rate": "Discount rate, real (per year)",
    "inflation": "General inflation (per year)",
    "present_worth": "Present worth",
    "annual_worth": "Annual worth (per year)",
    "irr_nominal": "IRR, nominal",
    "irr_real": "IRR, real",
    "accept_share": "Share of scenarios accepted",
    "selected_share": "Share of scenarios selected",
    "margin": "Margin over runner-up (present worth)",
    "preferred": "Preferred alternative",
    "pct_change": "Change in input from base value",
    "tax_rate": "Income tax rate",
}


SHORT_LABELS = {"discount_rate": "nominal discount rate", "real_rate": "real discount rate",
          "inflation": "inflation", "present_worth": "present worth", "annual_worth": "annual worth"}


IDENT_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


MONEY_FORMAT = ",.0f"


#: Vega expression writing a money value in thousands or millions with separators (never SI "G"):
#: 1234 -> "1.2 k", 12345678 -> "12.3 M", 1.5e9 -> "1,500 M". Used by every money axis and legend.
MONEY_LABEL_EXPR = ("abs(datum.value) >= 1e6 ? format(datum.value / 1e6, ',.4~r') + ' M' : "
                    "abs(datum.value) >= 1e3 ? format(datum.value / 1e3, ',.4~r') + ' k' : "
                    "format(datum.value, ',.4~r')")


#: Plain words for the inputs of the one-at-a-time sensitivity (tornado, spider) and other code keys.
INPUT_LABELS = {
    "discount_rate": "nominal discount rate", "real_rate": "real discount rate",
    "inflation": "general inflation", "first_cost": "first cost", "benefits": "benefits",
    "annual_benefit": "annual benefit", "annual_cost": "annual cost", "costs": "costs",
    "escalation": "escalation of the benefits", "salvage": "salvage value", "life": "life",
    "tax_rate": "income-tax rate", "cost_multiplier": "cost multiplier",
    "benefit_multiplier": "benefit multiplier",
}


def plain_input(key: str) -> str:
    """Plain words for a code key ('first_cost' -> 'first cost')."""
    return INPUT_LABELS.get(key, str(key).replace("_", " "))


def money_axis(title: str = "Present worth") -> alt.Axis:
    """A money axis: thousands or millions with separators (:data:`MONEY_LABEL_EXPR`)."""
    return alt.Axis(title=title, labelExpr=MONEY_LABEL_EXPR)


#: Percentiles of the symmetric clipping rule of :func:`clipped_worth_domain`.
CLIP_PERCENTILES = (2.0, 98.0)


def clipped_worth_domain(values) -> tuple[float, int]:
    """Half-width of a colour domain symmetric about zero, clipped at the 2nd-98th percentile.

    The rule: ``m = max(|P2|, |P98|)`` of the finite worths; colours run from ``-m`` (vermilion)
    through zero (near-white) to ``+m`` (blue) and values beyond are drawn at the end colour, so one
    extreme corner of the grid does not flatten the rest. Returns ``(m, count of values beyond)``.

    Examples
    --------
    >>> m, beyond = clipped_worth_domain(np.r_[np.linspace(-10, 10, 99), 1000.0])
    >>> round(m, 6), beyond
    (9.8, 3)
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return 1.0, 0
    lo, hi = np.percentile(v, CLIP_PERCENTILES)
    m = float(max(abs(lo), abs(hi))) or float(np.max(np.abs(v))) or 1.0
    return m, int(np.count_nonzero(np.abs(v) > m))


def run_basis(run) -> str:
    """The basis of a run's discount axis, "nominal" or "real", from its ``runs`` row (a mapping)."""
    basis = str((run or {}).get("discount_basis") or "nominal").lower()
    return "real" if basis == "real" else "nominal"


def discount_rate_label(basis: str) -> str:
    """Plain label of the discount rate on a run's basis: "real discount rate" on a real-basis run,
    "nominal discount rate" otherwise (a real-basis run is never described in nominal rates)."""
    return "real discount rate" if basis == "real" else "nominal discount rate"


def sensitivity_input_label(name: str, basis: str) -> str:
    """Label of a one-at-a-time sensitivity input, naming the discount basis where a rate is involved:
    the discount rate is moved, and held fixed while inflation moves, on the run's own basis."""
    if name == "discount_rate":
        return discount_rate_label(basis)
    if name == "inflation":
        return f"inflation ({discount_rate_label(basis)} held)"
    return name.replace("_", " ")


def axis_title(column: str) -> str:
    return TITLES.get(column, column.replace("_", " ").capitalize())


def short_label(column: str) -> str:
    return SHORT_LABELS.get(column, column.replace("_", " "))


def axis_format(column: str) -> str:
    return ".2%" if column in RATE_COLUMNS else MONEY_FORMAT


def check_identifier(column: str, what: str) -> str:
    if not isinstance(column, str) or not IDENT_RE.match(column):
        raise ValueError(f"{what} must be a plain column name (letters, digits, _), got {column!r}")
    return column


def require_columns(frame: pl.DataFrame, columns: Sequence[str], func: str, what: str = "frame") -> None:
    if not isinstance(frame, pl.DataFrame):
        raise TypeError(f"{func}: {what} must be a polars.DataFrame, got {type(frame).__name__}")
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ValueError(
            f"{func}: {what} lacks column(s) {missing}; it has {frame.columns}. "
            "Rename or add the columns (names follow the glossary in DEVELOPERS.md)."
        )


def inline_values(frame: pl.DataFrame, func: str, max_rows: int) -> dict[str, Any]:
    """Inline data with NaN written as null, refusing oversized frames.

    A plain ``{"values": rows}`` dict rather than ``alt.Data``: Altair moves
    it to the top-level ``datasets`` (shared by layers with equal rows)
    without wrapping every row in schema objects, which is many times faster.
    """
    if frame.height > max_rows:
        raise ValueError(
            f"{func}: the frame has {frame.height:,} rows but a chart takes at most "
            f"{max_rows:,}. Aggregate first (fewer projects, a coarser grid, top-N in "
            "DuckDB) or pass a larger max_rows knowing the chart carries every row."
        )
    floats = [c for c, t in frame.schema.items() if t.is_float()]
    if floats:
        frame = frame.with_columns([pl.col(c).fill_nan(None) for c in floats])
    return {"values": frame.to_dicts()}


class ChartRows:
    """An Altair chart built on named data, and the rows of those datasets, joined in :meth:`to_dict`.

    Altair deep-copies inline rows each time a layered chart with a selection parameter is combined
    or given properties (several copies of every row per chart: most of the report's writing time
    for decision maps of a few hundred cells). Built on ``alt.NamedData`` and given its rows only in
    the finished specification's top-level ``datasets``, the chart is the same Vega-Lite document.
    Other attributes are the chart's.
    """

    def __init__(self, chart: Any, datasets: dict[str, list[dict[str, Any]]]):
        self.chart = chart
        self.datasets = datasets

    def to_dict(self, *args: Any, **kwargs: Any) -> dict[str, Any]:
        spec = self.chart.to_dict(*args, **kwargs)
        spec.setdefault("datasets", {}).update(self.datasets)
        return spec

    def to_json(self, *args: Any, indent: int | None = 2, **kwargs: Any) -> str:
        import json

        return json.dumps(self.to_dict(*args, **kwargs), indent=indent, allow_nan=False)

    def __getattr__(self, name: str) -> Any:
        return getattr(self.chart, name)


def with_project_label(frame: pl.DataFrame) -> pl.DataFrame:
    """Add ``label``: 'name (project_id)', or the id alone when no name is given."""
    pid = pl.col("project_id").cast(pl.String)
    if "name" in frame.columns:
        name = pl.col("name").cast(pl.String)
        label = (
            pl.when(name.is_null() | (name == "") | (name == pid))
            .then(pid)
            .otherwise(name + pl.lit(" (") + pid + pl.lit(")"))
        )
    else:
        label = pid
    return frame.with_columns(label.alias("label"), pid.alias("project_id"))


def project_selector(frame: pl.DataFrame, name: str = "project") -> alt.Parameter | None:
    """A dropdown over the frame's projects, or None for a single project."""
    labelled = with_project_label(frame.select([c for c in ("project_id", "name") if c in frame.columns]))
    projects = labelled.unique(subset="project_id", keep="first", maintain_order=True)
    if projects.height <= 1:
        return None
    ids = [str(v) for v in projects["project_id"].to_list()]
    return alt.param(
        name=name,
        value=ids[0],
        bind=alt.binding_select(options=ids, labels=projects["label"].to_list(), name="Project "),
    )


def cell_edges(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper cell edges halfway between sorted grid values."""
    v = np.asarray(values, dtype=float)
    if v.size == 1:
        half = max(abs(v[0]) * 0.05, 0.005)
        return v - half, v + half
    mid = (v[1:] + v[:-1]) / 2.0
    lo = np.concatenate([[v[0] - (mid[0] - v[0])], mid])
    hi = np.concatenate([mid, [v[-1] + (v[-1] - mid[-1])]])
    return lo, hi


def add_cell_edges(frame: pl.DataFrame, column: str) -> pl.DataFrame:
    levels = np.sort(frame[column].drop_nulls().unique().to_numpy().astype(float))
    lo, hi = cell_edges(levels)
    edges = pl.DataFrame({column: levels, f"{column}_lo": lo, f"{column}_hi": hi})
    return frame.with_columns(pl.col(column).cast(pl.Float64)).join(edges, on=column, how="left")


def slider_param(frame: pl.DataFrame, slider: str, label: str) -> tuple[alt.Parameter, str]:
    """A range slider over the distinct values of ``slider`` and its filter expression."""
    values = np.sort(frame[slider].drop_nulls().unique().to_numpy().astype(float))
    step = float(np.min(np.diff(values))) if values.size > 1 else 1.0
    param = alt.param(
        name="third_axis",
        value=float(values[0]),
        bind=alt.binding_range(min=float(values[0]), max=float(values[-1]), step=step, name=label + " "),
    )
    return param, f"abs(datum['{slider}'] - third_axis) < {step / 2.0!r}"


def worth_colour_scale(values: pl.Series | np.ndarray) -> alt.Scale:
    """Colour scale for worth: near-white at zero, vermilion below, blue above.

    Parameters
    ----------
    values : Series or array, shape (N,)
        The worths to be coloured [currency]; NaN ignored.

    Returns
    -------
    altair.Scale
        Piecewise linear: domain ``[min, 0, max]`` when the values straddle
        zero, ``[0, max]`` or ``[min, 0]`` otherwise, so zero is always the
        pale end or the middle.

    Examples
    --------
    >>> worth_colour_scale(np.array([-5.0, 10.0])).to_dict()["domain"]
    [-5.0, 0.0, 10.0]
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    lo, hi = (float(v.min()), float(v.max())) if v.size else (0.0, 1.0)
    if lo < 0.0 < hi:
        return alt.Scale(type="linear", domain=[lo, 0.0, hi], range=[WORTH_BELOW, WORTH_ZERO, WORTH_ABOVE])
    if hi <= 0.0:
        return alt.Scale(type="linear", domain=[min(lo, -1e-12), 0.0], range=[WORTH_BELOW, WORTH_ZERO])
    return alt.Scale(type="linear", domain=[0.0, max(hi, 1e-12)], range=[WORTH_ZERO, WORTH_ABOVE])
