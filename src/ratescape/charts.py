"""Altair charts of screening results: small, pre-aggregated Polars frames in, chart objects out.

Every function takes frames whose columns use the glossary's names
(``project_id``, ``name``, ``discount_rate``, ``real_rate``, ``inflation``,
``present_worth``, ``accept_share``, ``rank_min`` ...) and returns an Altair
chart that can be shown in a notebook, tested as data with ``to_dict()``,
embedded in the offline report (:mod:`ratescape.report`) or written to
disk with :func:`save_chart`.

Aggregate before charting: each chart carries its data inline, so the
functions refuse frames longer than ``max_rows`` (default
:data:`MAX_CHART_ROWS`) with a message giving both counts and the fix.

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

import math
import re
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import altair as alt
import contourpy
import numpy as np
import polars as pl

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
    "surface_contours",
    "tornado",
    "worth_colour_scale",
    "worth_curve",
    "worth_surface",
]

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

_RATE_COLUMNS = {"discount_rate", "real_rate", "inflation", "marr", "escalation",
                 "irr_nominal", "irr_real", "tax_rate", "pct_change"}
_TITLES = {
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
_SHORT = {"discount_rate": "nominal discount rate", "real_rate": "real discount rate",
          "inflation": "inflation", "present_worth": "present worth", "annual_worth": "annual worth"}
_IDENT_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_MONEY_FORMAT = ",.0f"


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------

def _title(column: str) -> str:
    return _TITLES.get(column, column.replace("_", " ").capitalize())


def _short(column: str) -> str:
    return _SHORT.get(column, column.replace("_", " "))


def _fmt(column: str) -> str:
    return ".2%" if column in _RATE_COLUMNS else _MONEY_FORMAT


def _check_ident(column: str, what: str) -> str:
    if not isinstance(column, str) or not _IDENT_RE.match(column):
        raise ValueError(f"{what} must be a plain column name (letters, digits, _), got {column!r}")
    return column


def _require(frame: pl.DataFrame, columns: Sequence[str], func: str, what: str = "frame") -> None:
    if not isinstance(frame, pl.DataFrame):
        raise TypeError(f"{func}: {what} must be a polars.DataFrame, got {type(frame).__name__}")
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ValueError(
            f"{func}: {what} lacks column(s) {missing}; it has {frame.columns}. "
            "Rename or add the columns (names follow the glossary in DEVELOPERS.md)."
        )


def _values(frame: pl.DataFrame, func: str, max_rows: int) -> dict[str, Any]:
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


def _with_label(frame: pl.DataFrame) -> pl.DataFrame:
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


def _project_param(frame: pl.DataFrame, name: str = "project") -> alt.Parameter | None:
    """A dropdown over the frame's projects, or None for a single project."""
    labelled = _with_label(frame.select([c for c in ("project_id", "name") if c in frame.columns]))
    projects = labelled.unique(subset="project_id", keep="first", maintain_order=True)
    if projects.height <= 1:
        return None
    ids = [str(v) for v in projects["project_id"].to_list()]
    return alt.param(
        name=name,
        value=ids[0],
        bind=alt.binding_select(options=ids, labels=projects["label"].to_list(), name="Project "),
    )


def _cell_edges(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper cell edges halfway between sorted grid values."""
    v = np.asarray(values, dtype=float)
    if v.size == 1:
        half = max(abs(v[0]) * 0.05, 0.005)
        return v - half, v + half
    mid = (v[1:] + v[:-1]) / 2.0
    lo = np.concatenate([[v[0] - (mid[0] - v[0])], mid])
    hi = np.concatenate([mid, [v[-1] + (v[-1] - mid[-1])]])
    return lo, hi


def _add_edges(frame: pl.DataFrame, column: str) -> pl.DataFrame:
    levels = np.sort(frame[column].drop_nulls().unique().to_numpy().astype(float))
    lo, hi = _cell_edges(levels)
    edges = pl.DataFrame({column: levels, f"{column}_lo": lo, f"{column}_hi": hi})
    return frame.with_columns(pl.col(column).cast(pl.Float64)).join(edges, on=column, how="left")


def _pick_slider(frame: pl.DataFrame, slider: str, label: str) -> tuple[alt.Parameter, str]:
    """A range slider over the distinct values of ``slider`` and its filter expression."""
    values = np.sort(frame[slider].drop_nulls().unique().to_numpy().astype(float))
    step = float(np.min(np.diff(values))) if values.size > 1 else 1.0
    param = alt.param(
        name="third_axis",
        value=float(values[0]),
        bind=alt.binding_range(min=float(values[0]), max=float(values[-1]), step=step, name=label + " "),
    )
    return param, f"abs(datum['{slider}'] - third_axis) < {step / 2.0!r}"


# ---------------------------------------------------------------------------
# contours
# ---------------------------------------------------------------------------

def nice_levels(zmin: float, zmax: float, count: int = 7) -> np.ndarray:
    """Round contour levels (1, 2 or 5 times a power of ten apart) covering a range.

    Parameters
    ----------
    zmin, zmax : float
        Range of the surface [currency].
    count : int
        Rough number of levels wanted (>= 1).

    Returns
    -------
    ndarray, shape (K,)
        Levels strictly inside (zmin, zmax); zero is among them whenever the
        range straddles zero, because the step divides zero.

    Examples
    --------
    >>> nice_levels(-130.0, 420.0, 7).tolist()
    [-100.0, 0.0, 100.0, 200.0, 300.0, 400.0]
    """
    if count < 1:
        raise ValueError(f"count must be >= 1, got {count}")
    if not (math.isfinite(zmin) and math.isfinite(zmax)) or zmax <= zmin:
        return np.empty(0)
    raw = (zmax - zmin) / count
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    first = math.ceil(zmin / step)
    last = math.floor(zmax / step)
    levels = np.arange(first, last + 1, dtype=float) * step
    return levels[(levels > zmin) & (levels < zmax)]


def _refine_on_edges(px, py, x, y, func, level):
    """Move contour vertices along their grid edge to the root of func - level (vectorised bisection)."""
    px = px.copy()
    py = py.copy()

    def snap(p, grid):
        """Nearest grid value and whether p lies on it (to rounding of the interpolation)."""
        j = np.clip(np.searchsorted(grid, p), 1, grid.size - 1)
        j = np.where(np.abs(grid[j - 1] - p) <= np.abs(grid[j] - p), j - 1, j)
        tol = 1e-9 * (grid[-1] - grid[0])
        return grid[j], np.abs(grid[j] - p) <= tol

    ysnap, on_row = snap(py, y)  # horizontal edge: y fixed at a grid row, x between two columns
    xsnap, on_col = snap(px, x)  # vertical edge: x fixed, y between two rows
    on_col &= ~on_row
    py = np.where(on_row, ysnap, py)
    px = np.where(on_col, xsnap, px)
    for mask, along, fixed, grid, horizontal in (
        (on_row, px, py, x, True), (on_col, py, px, y, False)
    ):
        idx = np.flatnonzero(mask)
        if idx.size == 0:
            continue
        t = along[idx]
        k = np.clip(np.searchsorted(grid, t, side="right") - 1, 0, grid.size - 2)
        a, b = grid[k].copy(), grid[k + 1].copy()
        f = fixed[idx]

        def g(u):
            return (func(u, f) if horizontal else func(f, u)) - level

        ga, gb = g(a), g(b)
        ok = np.isfinite(ga) & np.isfinite(gb) & (np.sign(ga) != np.sign(gb))
        for _ in range(60):
            m = 0.5 * (a + b)
            gm = g(m)
            left = np.sign(gm) == np.sign(ga)
            a = np.where(left, m, a)
            ga = np.where(left, gm, ga)
            b = np.where(left, b, m)
        root = np.where(ok, 0.5 * (a + b), t)
        if horizontal:
            px[idx] = root
        else:
            py[idx] = root
    return px, py


def contour_lines(
    x: np.ndarray,
    y: np.ndarray,
    z: np.ndarray,
    levels: Sequence[float] | np.ndarray,
    *,
    func: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> pl.DataFrame:
    """Iso-worth lines of a gridded surface, traced by contourpy.

    Parameters
    ----------
    x : array_like, shape (NX,)
        Strictly increasing grid values of the horizontal axis.
    y : array_like, shape (NY,)
        Strictly increasing grid values of the vertical axis.
    z : array_like, shape (NY, NX)
        The surface, ``z[j, i]`` at ``(x[i], y[j])`` [currency]; NaN cells
        are left out.
    levels : array_like, shape (K,)
        Worth levels to trace [currency].
    func : callable, optional
        Vectorised ``func(x, y) -> z``. When given, every vertex is moved
        along its grid edge to the root of ``func - level`` by bisection,
        so the vertices lie on the true iso-worth line rather than on the
        linear interpolation between grid nodes.

    Returns
    -------
    polars.DataFrame
        Columns ``level`` [currency], ``line`` (int, unique over all
        levels), ``point`` (int, order along the line), ``x``, ``y``.
        Closed lines repeat their first point at the end.

    Raises
    ------
    ValueError
        If the shapes disagree or the axes are not strictly increasing.

    Notes
    -----
    contourpy's ``serial`` algorithm places each vertex on a cell edge by
    linear interpolation between the two grid nodes. Without ``func`` a
    vertex is therefore exact only where the surface is linear along that
    edge (e.g. along a cash-flow multiplier axis).

    References
    ----------
    contourpy documentation, "contour_generator", https://contourpy.readthedocs.io

    Examples
    --------
    >>> xs = np.array([0.0, 1.0, 2.0]); ys = np.array([0.0, 1.0])
    >>> zs = xs[None, :] + 0 * ys[:, None]
    >>> contour_lines(xs, ys, zs, [0.5])["x"].to_list()
    [0.5, 0.5]
    """
    xa = np.asarray(x, dtype=float)
    ya = np.asarray(y, dtype=float)
    za = np.asarray(z, dtype=float)
    if xa.ndim != 1 or ya.ndim != 1:
        raise ValueError(f"x and y must be 1-D, got shapes {xa.shape} and {ya.shape}")
    if za.shape != (ya.size, xa.size):
        raise ValueError(
            f"z must have shape (len(y), len(x)) = {(ya.size, xa.size)}, got {za.shape}"
        )
    if xa.size < 2 or ya.size < 2:
        raise ValueError(f"need at least 2 grid values per axis, got {xa.size} x {ya.size}")
    if np.any(np.diff(xa) <= 0) or np.any(np.diff(ya) <= 0):
        raise ValueError("x and y must be strictly increasing")
    lv = np.atleast_1d(np.asarray(levels, dtype=float))
    if lv.ndim != 1:
        raise ValueError(f"levels must be 1-D, got shape {lv.shape}")
    gen = contourpy.contour_generator(
        xa, ya, np.ma.masked_invalid(za), name="serial",
        line_type=contourpy.LineType.Separate, corner_mask=True,
    )
    parts: list[pl.DataFrame] = []
    line_id = 0
    for level in lv:
        for seg in gen.lines(float(level)):
            seg = np.asarray(seg, dtype=float)
            if seg.shape[0] < 2:
                continue
            px, py = seg[:, 0], seg[:, 1]
            if func is not None:
                px, py = _refine_on_edges(px, py, xa, ya, func, float(level))
            n = seg.shape[0]
            parts.append(pl.DataFrame({
                "level": np.full(n, float(level)),
                "line": np.full(n, line_id, dtype=np.int64),
                "point": np.arange(n, dtype=np.int64),
                "x": px,
                "y": py,
            }))
            line_id += 1
    if not parts:
        return pl.DataFrame(schema={"level": pl.Float64, "line": pl.Int64, "point": pl.Int64,
                                    "x": pl.Float64, "y": pl.Float64})
    return pl.concat(parts)


def surface_contours(
    frame: pl.DataFrame,
    *,
    x: str = "discount_rate",
    y: str = "inflation",
    value: str = "present_worth",
    levels: Sequence[float] | np.ndarray | None = None,
    by: str | Sequence[str] | None = None,
) -> pl.DataFrame:
    """Contour lines of a long-form surface frame, per slice.

    Parameters
    ----------
    frame : polars.DataFrame
        One row per grid point with columns ``x``, ``y``, ``value`` (and
        the ``by`` columns). Missing grid points count as NaN.
    x, y, value : str
        Column names of the two axes and the surface.
    levels : array_like, optional
        Worth levels; by default :func:`nice_levels` of the whole frame.
    by : str or list of str, optional
        Columns whose distinct values each get their own contours
        (a project, a third axis); they are copied to the output.

    Returns
    -------
    polars.DataFrame
        :func:`contour_lines` columns plus the ``by`` columns; ``line`` is
        unique over the whole frame.

    Examples
    --------
    >>> f = pl.DataFrame({"discount_rate": [0.0, 0.1, 0.0, 0.1],
    ...                   "inflation": [0.0, 0.0, 0.1, 0.1],
    ...                   "present_worth": [-1.0, 1.0, -1.0, 1.0]})
    >>> surface_contours(f, levels=[0.0])["x"].to_list()
    [0.05, 0.05]
    """
    by_cols = [] if by is None else ([by] if isinstance(by, str) else list(by))
    _require(frame, [x, y, value, *by_cols], "surface_contours")
    if levels is None:
        vals = frame[value].cast(pl.Float64).fill_nan(None).drop_nulls()
        levels = nice_levels(float(vals.min()), float(vals.max())) if vals.len() else []
    groups = frame.partition_by(by_cols, maintain_order=True, as_dict=False) if by_cols else [frame]
    parts = []
    offset = 0
    for g in groups:
        xs = np.sort(g[x].unique().to_numpy().astype(float))
        ys = np.sort(g[y].unique().to_numpy().astype(float))
        if xs.size < 2 or ys.size < 2:
            continue
        zz = np.full((ys.size, xs.size), np.nan)
        ix = np.searchsorted(xs, g[x].to_numpy().astype(float))
        iy = np.searchsorted(ys, g[y].to_numpy().astype(float))
        zz[iy, ix] = g[value].cast(pl.Float64).fill_null(float("nan")).to_numpy()
        lines = contour_lines(xs, ys, zz, levels)
        if lines.height == 0:
            continue
        lines = lines.with_columns(pl.col("line") + offset)
        offset = int(lines["line"].max()) + 1
        for c in by_cols:
            lines = lines.with_columns(pl.lit(g[c][0]).alias(c))
        parts.append(lines)
    if not parts:
        return pl.DataFrame(schema={"level": pl.Float64, "line": pl.Int64, "point": pl.Int64,
                                    "x": pl.Float64, "y": pl.Float64,
                                    **{c: frame.schema[c] for c in by_cols}})
    return pl.concat(parts)


# ---------------------------------------------------------------------------
# view 1: one input
# ---------------------------------------------------------------------------

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
        _check_ident(c, what)
    _require(frame, ["project_id", x, series, measure], "worth_curve")
    if irr_column is None:
        irr_column = "irr_real" if x == "real_rate" else "irr_nominal"
    frame = _with_label(frame)
    cols = ["project_id", "label", x, series, measure]
    data = frame.select(cols).sort(["project_id", series, x])
    project = _project_param(frame)
    hover = alt.selection_point(name="hover_level", fields=[series], on="pointerover",
                                nearest=True, clear="pointerout")
    colour = alt.Color(f"{series}:Q", title=_title(series),
                       scale=alt.Scale(scheme=SEQUENTIAL_SCHEME),
                       legend=alt.Legend(format=_fmt(series)))
    x_enc = alt.X(f"{x}:Q", title=_title(x), axis=alt.Axis(format=_fmt(x)))
    tooltip = [
        alt.Tooltip("label:N", title="Project"),
        alt.Tooltip(f"{x}:Q", title=_title(x), format=_fmt(x)),
        alt.Tooltip(f"{series}:Q", title=_title(series), format=_fmt(series)),
        alt.Tooltip(f"{measure}:Q", title=_title(measure), format=",.2f"),
    ]
    base = alt.Chart(_values(data, "worth_curve", max_rows))
    if project is not None:
        base = base.transform_filter(alt.datum.project_id == project)
    lines = base.mark_line(strokeWidth=2).encode(
        x=x_enc,
        y=alt.Y(f"{measure}:Q", title=_title(measure), axis=alt.Axis(format="~s")),
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
        _require(irr_points, ["project_id", series, irr_column], "worth_curve", "irr_points")
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
        irr = alt.Chart(_values(roots, "worth_curve", max_rows))
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
                alt.Tooltip(f"{series}:Q", title=_title(series), format=_fmt(series)),
                alt.Tooltip(f"{irr_column}:Q", title=_title(irr_column), format=".3%"),
            ],
        )
        layers.append(irr)
    chart = alt.layer(*layers).properties(
        title=title or f"{_title(measure)} against {_short(x)}, one line per {_short(series)} level; "
                       "diamonds mark the IRR",
        width=width, height=height,
    )
    if project is not None:
        chart = chart.add_params(project)
    return chart


# ---------------------------------------------------------------------------
# view 2: two inputs
# ---------------------------------------------------------------------------

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
# ---------------------------------------------------------------------------

def _contour_labels(contours: pl.DataFrame, keys: Sequence[str]) -> pl.DataFrame:
    mid = contours.group_by("line").agg(pl.col("point").max().alias("_n"))
    labelled = contours.join(mid, on="line").filter(pl.col("point") == pl.col("_n") // 2)
    levels = labelled["level"].to_list()
    texts = [f"{v:,.0f}" if abs(v) >= 100 or v == 0 else f"{v:.3g}" for v in levels]
    return labelled.with_columns(pl.Series("text", texts, dtype=pl.String)).select(
        ["level", "line", "x", "y", "text", *keys])


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
        _check_ident(c, what)
    keys = [] if slider is None else [_check_ident(slider, "slider")]
    _require(frame, [x, y, value, *keys], "worth_surface")
    if contours is None:
        contours = surface_contours(frame, x=x, y=y, value=value, levels=levels, by=keys or None)
    _require(contours, ["level", "line", "point", "x", "y", *keys], "worth_surface", "contours")
    cells = _add_edges(_add_edges(frame.select([x, y, value, *keys]), x), y)
    filt = None
    params = []
    if slider is not None:
        param, filt = _pick_slider(frame, slider, _title(slider))
        params.append(param)
    colour = alt.Color(f"{value}:Q", title=_title(value), scale=worth_colour_scale(frame[value]),
                       legend=alt.Legend(format="~s"))
    rect = alt.Chart(_values(cells, "worth_surface", max_rows)).mark_rect().encode(
        x=alt.X(f"{x}_lo:Q", title=_title(x), axis=alt.Axis(format=_fmt(x)),
                scale=alt.Scale(nice=False, zero=False)),
        x2=f"{x}_hi:Q",
        y=alt.Y(f"{y}_lo:Q", title=_title(y), axis=alt.Axis(format=_fmt(y)),
                scale=alt.Scale(nice=False, zero=False)),
        y2=f"{y}_hi:Q",
        color=colour,
        tooltip=[
            alt.Tooltip(f"{x}:Q", title=_title(x), format=_fmt(x)),
            alt.Tooltip(f"{y}:Q", title=_title(y), format=_fmt(y)),
            alt.Tooltip(f"{value}:Q", title=_title(value), format=",.2f"),
        ],
    )
    line_data = contours.select(["level", "line", "point", "x", "y", *keys]).sort(["line", "point"])
    lines = alt.Chart(_values(line_data, "worth_surface", max_rows)).mark_line(
        color="#1a1a1a", strokeWidth=1.2).encode(
        x="x:Q", y="y:Q", detail="line:N", order="point:Q",
        tooltip=[alt.Tooltip("level:Q", title=f"{_title(value)} on this line", format=",.2f")],
    )
    labels = alt.Chart(_values(_contour_labels(line_data, keys), "worth_surface", max_rows)).mark_text(
        fontSize=10, fontWeight="bold", color="#1a1a1a", dy=-6).encode(
        x="x:Q", y="y:Q", text="text:N")
    if filt is not None:
        rect, lines, labels = (c.transform_filter(filt) for c in (rect, lines, labels))
    chart = alt.layer(rect, lines, labels).properties(
        title=title or f"{_title(value)} over {_short(x)} and {_short(y)}; lines join equal worth",
        width=width, height=height,
    )
    if params:
        chart = chart.add_params(*params)
    return chart


# ---------------------------------------------------------------------------
# view 3: decision map
# ---------------------------------------------------------------------------

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
) -> alt.LayerChart:
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
    altair.LayerChart
        Rect regions (categorical colour-blind-safe colours; clicking a
        legend entry highlights that alternative), and the frontier lines.

    Examples
    --------
    >>> f = pl.DataFrame({"discount_rate": [0.0, 0.1], "inflation": [0.0, 0.0],
    ...                   "preferred": ["A", "B"], "margin": [5.0, 1.0]})
    >>> decision_map(f).to_dict()["layer"][0]["mark"]["type"]
    'rect'
    """
    _check_ident(x, "x")
    _check_ident(y, "y")
    _require(frame, [x, y, "preferred", "margin"], "decision_map")
    extra = ["runner_up"] if "runner_up" in frame.columns else []
    cells = _add_edges(_add_edges(frame.select([x, y, "preferred", "margin", *extra]), x), y)
    cells = cells.with_columns(pl.col("preferred").cast(pl.String))
    alternatives = sorted(cells["preferred"].drop_nulls().unique().to_list())
    palette = [CATEGORY_COLOURS[i % len(CATEGORY_COLOURS)] for i in range(len(alternatives))]
    pick = alt.selection_point(name="pick_alternative", fields=["preferred"], bind="legend")
    tooltip = [
        alt.Tooltip(f"{x}:Q", title=_title(x), format=_fmt(x)),
        alt.Tooltip(f"{y}:Q", title=_title(y), format=_fmt(y)),
        alt.Tooltip("preferred:N", title="Preferred"),
    ]
    if extra:
        tooltip.append(alt.Tooltip("runner_up:N", title="Runner-up"))
    tooltip.append(alt.Tooltip("margin:Q", title=_title("margin"), format=",.2f"))
    rect = alt.Chart(_values(cells, "decision_map", max_rows)).mark_rect().encode(
        x=alt.X(f"{x}_lo:Q", title=_title(x), axis=alt.Axis(format=_fmt(x)),
                scale=alt.Scale(nice=False, zero=False)),
        x2=f"{x}_hi:Q",
        y=alt.Y(f"{y}_lo:Q", title=_title(y), axis=alt.Axis(format=_fmt(y)),
                scale=alt.Scale(nice=False, zero=False)),
        y2=f"{y}_hi:Q",
        color=alt.Color("preferred:N", title="Preferred alternative",
                        scale=alt.Scale(domain=alternatives, range=palette)),
        opacity=alt.when(pick).then(alt.value(0.85)).otherwise(alt.value(0.25)),
        tooltip=tooltip,
    ).add_params(pick)
    layers = [rect]
    if frontier is not None:
        _require(frontier, ["alternative_a", "alternative_b", "segment", "point", "x", "y"],
                 "decision_map", "frontier")
        fr = frontier.select(["alternative_a", "alternative_b", "segment", "point", "x", "y"]).with_columns(
            pl.col("alternative_a").cast(pl.String), pl.col("alternative_b").cast(pl.String)
        ).sort(["alternative_a", "alternative_b", "segment", "point"])
        line = alt.Chart(_values(fr, "decision_map", max_rows)).mark_line(
            color="#000000", strokeWidth=2.5).encode(
            x="x:Q", y="y:Q",
            detail=["alternative_a:N", "alternative_b:N", "segment:N"],
            order="point:Q",
            tooltip=[alt.Tooltip("alternative_a:N", title="Equal worth:"),
                     alt.Tooltip("alternative_b:N", title="and")],
        )
        layers.append(line)
    return alt.layer(*layers).properties(
        title=title or "Preferred alternative; the black line is where two alternatives are worth the same",
        width=width, height=height,
    )


# ---------------------------------------------------------------------------
# portfolio views
# ---------------------------------------------------------------------------

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
    _require(summary, ["project_id", "accept_share"], "acceptance_share_bars")
    share = pl.col("accept_share")
    data = _with_label(summary).select(["project_id", "label", "accept_share"]).with_columns(
        pl.when(share >= 1.0).then(pl.lit("accepted everywhere"))
        .when(share <= 0.0).then(pl.lit("accepted nowhere"))
        .otherwise(pl.lit("accepted in some scenarios")).alias("acceptance")
    )
    domain = ["accepted everywhere", "accepted in some scenarios", "accepted nowhere"]
    return alt.Chart(_values(data, "acceptance_share_bars", max_rows)).mark_bar().encode(
        x=alt.X("accept_share:Q", title=_title("accept_share"), axis=alt.Axis(format="%"),
                scale=alt.Scale(domain=[0, 1])),
        y=alt.Y("label:N", title="Project", sort="-x"),
        color=alt.Color("acceptance:N", title="Acceptance",
                        scale=alt.Scale(domain=domain, range=[CATEGORY_COLOURS[2], CATEGORY_COLOURS[1],
                                                              CATEGORY_COLOURS[5]])),
        tooltip=[alt.Tooltip("label:N", title="Project"),
                 alt.Tooltip("accept_share:Q", title=_title("accept_share"), format=".1%")],
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
    _check_ident(x, "x")
    _check_ident(series, "series")
    measure = "accept_share" if "accept_share" in frame.columns else "accepted_count"
    _require(frame, [x, series, measure], "acceptance_vs_inflation")
    data = frame.select([x, series, measure]).sort([series, x])
    hover = alt.selection_point(name="hover_rate", fields=[series], on="pointerover",
                                nearest=True, clear="pointerout")
    y_title = "Share of projects accepted" if measure == "accept_share" else "Projects accepted"
    y_fmt = "%" if measure == "accept_share" else ",d"
    colour = alt.Color(f"{series}:Q", title=_title(series), scale=alt.Scale(scheme=SEQUENTIAL_SCHEME),
                       legend=alt.Legend(format=_fmt(series)))
    base = alt.Chart(_values(data, "acceptance_vs_inflation", max_rows))
    x_enc = alt.X(f"{x}:Q", title=_title(x), axis=alt.Axis(format=_fmt(x)))
    lines = base.mark_line(strokeWidth=2).encode(
        x=x_enc, y=alt.Y(f"{measure}:Q", title=y_title, axis=alt.Axis(format=y_fmt)),
        color=colour, detail=f"{series}:N",
        opacity=alt.when(hover).then(alt.value(1.0)).otherwise(alt.value(0.3)),
    )
    points = base.mark_point(size=30, filled=True).encode(
        x=x_enc, y=f"{measure}:Q", color=colour,
        opacity=alt.when(hover).then(alt.value(0.9)).otherwise(alt.value(0.0)),
        tooltip=[alt.Tooltip(f"{x}:Q", title=_title(x), format=_fmt(x)),
                 alt.Tooltip(f"{series}:Q", title=_title(series), format=_fmt(series)),
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
    _require(summary, ["project_id", "rank_min", "rank_median", "rank_max"], "rank_intervals")
    extra = ["rank_base"] if "rank_base" in summary.columns else []
    data = _with_label(summary).select(["project_id", "label", "rank_min", "rank_median", "rank_max", *extra])
    y = alt.Y("label:N", title="Project",
              sort=alt.EncodingSortField(field="rank_median", op="min", order="ascending"))
    tooltip = [alt.Tooltip("label:N", title="Project"),
               alt.Tooltip("rank_min:Q", title="Best rank"),
               alt.Tooltip("rank_median:Q", title="Median rank"),
               alt.Tooltip("rank_max:Q", title="Worst rank")]
    if extra:
        tooltip.append(alt.Tooltip("rank_base:Q", title="Rank at base scenario"))
    base = alt.Chart(_values(data, "rank_intervals", max_rows))
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
    _require(frame, ["project_id", "selected_share"], "selection_share_bars")
    data = _with_label(frame).select(["project_id", "label", "selected_share"]).with_columns(
        pl.when(pl.col("selected_share") >= 1.0).then(pl.lit("in every scenario (core)"))
        .otherwise(pl.lit("in some scenarios")).alias("selection"))
    return alt.Chart(_values(data, "selection_share_bars", max_rows)).mark_bar().encode(
        x=alt.X("selected_share:Q", title=_title("selected_share"), axis=alt.Axis(format="%"),
                scale=alt.Scale(domain=[0, 1])),
        y=alt.Y("label:N", title="Project", sort="-x"),
        color=alt.Color("selection:N", title="Selected",
                        scale=alt.Scale(domain=["in every scenario (core)", "in some scenarios"],
                                        range=[CATEGORY_COLOURS[0], CATEGORY_COLOURS[4]])),
        tooltip=[alt.Tooltip("label:N", title="Project"),
                 alt.Tooltip("selected_share:Q", title=_title("selected_share"), format=".1%")],
    ).properties(title=title or "Share of scenarios in which the budget-limited portfolio includes each project",
                 width=width, height=alt.Step(16))


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
    _require(frame, ["project_id", "input", "worth_low", "worth_high", "base_worth"], "tornado")
    f = _with_label(frame).with_columns(
        (pl.col("worth_high") - pl.col("worth_low")).abs().alias("swing"))
    keep = ["project_id", "label", "input", "base_worth", "swing"]
    long = pl.concat([
        f.select([*keep, pl.col("worth_low").alias("worth"), pl.lit("input at low value").alias("setting")]),
        f.select([*keep, pl.col("worth_high").alias("worth"), pl.lit("input at high value").alias("setting")]),
    ]).with_columns(pl.col("input").cast(pl.String))
    project = _project_param(frame)
    base = alt.Chart(_values(long, "tornado", max_rows))
    if project is not None:
        base = base.transform_filter(alt.datum.project_id == project)
    y = alt.Y("input:N", title="Input", sort=alt.EncodingSortField(field="swing", op="max", order="descending"))
    bars = base.mark_bar(opacity=0.9).encode(
        x=alt.X("base_worth:Q", title="Present worth", axis=alt.Axis(format="~s")),
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
    _require(frame, ["input", "pct_change", "present_worth"], "spider")
    if "project_id" not in frame.columns:
        frame = frame.with_columns(pl.lit("project").alias("project_id"))
    data = _with_label(frame).select(["project_id", "label", "input", "pct_change", "present_worth"]).with_columns(
        pl.col("input").cast(pl.String)).sort(["project_id", "input", "pct_change"])
    inputs = sorted(data["input"].unique().to_list())
    palette = [CATEGORY_COLOURS[i % len(CATEGORY_COLOURS)] for i in range(len(inputs))]
    project = _project_param(frame)
    pick = alt.selection_point(name="pick_input", fields=["input"], bind="legend")
    base = alt.Chart(_values(data, "spider", max_rows))
    if project is not None:
        base = base.transform_filter(alt.datum.project_id == project)
    lines = base.mark_line(point=True, strokeWidth=2).encode(
        x=alt.X("pct_change:Q", title=_title("pct_change"), axis=alt.Axis(format="+%")),
        y=alt.Y("present_worth:Q", title="Present worth", axis=alt.Axis(format="~s")),
        color=alt.Color("input:N", title="Input", scale=alt.Scale(domain=inputs, range=palette)),
        opacity=alt.when(pick).then(alt.value(1.0)).otherwise(alt.value(0.2)),
        tooltip=[alt.Tooltip("label:N", title="Project"), alt.Tooltip("input:N", title="Input"),
                 alt.Tooltip("pct_change:Q", title=_title("pct_change"), format="+.1%"),
                 alt.Tooltip("present_worth:Q", title="Present worth", format=",.2f")],
    ).add_params(pick)
    zero = alt.Chart().mark_rule(color="#333333", strokeDash=[4, 3]).encode(y=alt.datum(0))
    chart = alt.layer(lines, zero).properties(
        title=title or "Spider: present worth as each input moves away from its base value",
        width=width, height=height)
    if project is not None:
        chart = chart.add_params(project)
    return chart


# ---------------------------------------------------------------------------
# export
# ---------------------------------------------------------------------------

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


def _vl_version() -> str | None:
    """vl-convert's name for the Vega-Lite version Altair writes (e.g. '6.4'), if it has it."""
    import vl_convert as vlc

    major_minor = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    return major_minor if major_minor in vlc.get_vegalite_versions() else None


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
    HTML goes through :func:`ratescape.report.standalone_chart_html`, which
    inlines Vega, Vega-Lite and vega-embed and escapes the specification;
    PNG and SVG are rendered by vl-convert without a browser.
    """
    import vl_convert as vlc

    out = Path(path)
    suffix = out.suffix.lower()
    spec = chart_spec(chart)
    if suffix == ".html":
        from ratescape.report import standalone_chart_html

        out.write_text(standalone_chart_html(chart), encoding="utf-8")
    elif suffix == ".png":
        out.write_bytes(vlc.vegalite_to_png(spec, vl_version=_vl_version(), scale=scale))
    elif suffix == ".svg":
        out.write_text(vlc.vegalite_to_svg(spec, vl_version=_vl_version()), encoding="utf-8")
    elif suffix == ".json":
        import json

        out.write_text(json.dumps(spec, indent=2, allow_nan=False), encoding="utf-8")
    else:
        raise ValueError(f"cannot save a chart as {suffix or 'a file without suffix'!r}; "
                         "use a path ending in .html, .png, .svg or .json")
    return out
