"""Iso-worth contour lines of a worth surface, with each vertex root-found on its grid edge.

contourpy gives the topology of each level's lines on the grid; every vertex is then moved along
its grid edge to the root of worth - level with SciPy's bracketed root finder (Chandrupatla's
method, the same one the indifference frontier uses), so lines lie on the exact worth, not on a
linear interpolation between grid values.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import contourpy
import numpy as np
import polars as pl
from scipy.optimize.elementwise import find_root

from ratescape.report.chart_style import require_columns


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
    """Move contour vertices along their grid edge to the root of func - level (SciPy's find_root)."""
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

        def g_at(u, other):
            return (func(u, other) if horizontal else func(other, u)) - level

        def g(u):
            return g_at(u, f)

        ga, gb = g(a), g(b)
        ok = np.isfinite(ga) & np.isfinite(gb) & (np.sign(ga) != np.sign(gb))
        root = t.copy()
        if ok.any():
            # SciPy's bracketed root finder (Chandrupatla), as the indifference frontier uses
            res = find_root(g_at, (a[ok], b[ok]), args=(f[ok],),
                            tolerances={"xatol": 1e-12 * (grid[-1] - grid[0]), "xrtol": 1e-12})
            root[ok] = np.where(np.isfinite(res.x), res.x, t[ok])
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
    require_columns(frame, [x, y, value, *by_cols], "surface_contours")
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


def money_text(v: float) -> str:
    """A contour level as a short money label in thousands or millions ('-1.5 M', '250 k', '40')."""
    a = abs(v)
    if a >= 1e6:
        return f"{v / 1e6:,.4g} M"
    if a >= 1e3:
        return f"{v / 1e3:,.4g} k"
    return f"{v:,.4g}" if v else "0"


def place_contour_labels(contours: pl.DataFrame, *, x_span: float, y_span: float,
                         min_gap: float = 0.14) -> pl.DataFrame:
    """One label per contour line where it keeps clear of the others, so labels never pile up.

    Greedy placement, common practice for map labels: lines are taken longest first; on each line
    the vertex farthest from the labels already placed (distance measured in plot fractions, x over
    ``x_span`` and y over ``y_span``) gets the label, if that distance is at least ``min_gap``;
    otherwise the line stays unlabelled (its level is in the tooltip). Vertices in the outer 4 % of
    the plot are not used, so labels are not clipped at the edges.

    Parameters
    ----------
    contours : polars.DataFrame
        Columns ``level``, ``line``, ``point``, ``x``, ``y`` (from :func:`contour_lines`).
    x_span, y_span : float
        Plot ranges of the two axes [axis units], > 0.
    min_gap : float
        Least distance between two labels [fraction of the plot].

    Returns
    -------
    polars.DataFrame
        Columns ``level``, ``line``, ``x``, ``y``, ``text``; any two rows at least ``min_gap`` apart.

    Examples
    --------
    >>> c = pl.DataFrame({"level": [0.0, 0.0, 1.0, 1.0], "line": [0, 0, 1, 1], "point": [0, 1, 0, 1],
    ...                   "x": [0.5, 0.5, 0.51, 0.51], "y": [0.2, 0.8, 0.2, 0.8]})
    >>> place_contour_labels(c, x_span=1.0, y_span=1.0).height
    2
    """
    empty = pl.DataFrame(schema={"level": pl.Float64, "line": pl.Int64, "x": pl.Float64,
                                 "y": pl.Float64, "text": pl.String})
    if contours.height == 0 or x_span <= 0 or y_span <= 0:
        return empty
    x0, y0 = float(contours["x"].min()), float(contours["y"].min())
    placed: list[tuple[float, float]] = []
    rows = []
    lines = contours.group_by("line", maintain_order=True).agg(
        pl.col("level").first(), pl.col("x"), pl.col("y"), pl.len().alias("n")).sort(["n", "line"], descending=[True, False])
    for line, level, xs, ys, _n in lines.iter_rows():
        u = (np.asarray(xs, dtype=float) - x0) / x_span
        w = (np.asarray(ys, dtype=float) - y0) / y_span
        inner = (u > 0.04) & (u < 0.96) & (w > 0.04) & (w < 0.96)
        if not inner.any():
            inner = np.ones_like(u, dtype=bool)
        if not placed:
            candidates = np.flatnonzero(inner)
            k = int(candidates[candidates.size // 2])
        else:
            p = np.asarray(placed)
            d = np.min(np.hypot(u[:, None] - p[None, :, 0], w[:, None] - p[None, :, 1]), axis=1)
            d = np.where(inner, d, -1.0)
            k = int(np.argmax(d))
            if d[k] < min_gap:
                continue
        placed.append((u[k], w[k]))
        rows.append({"level": float(level), "line": int(line), "x": float(xs[k]), "y": float(ys[k]),
                     "text": money_text(float(level))})
    return pl.DataFrame(rows, schema=empty.schema) if rows else empty


def contour_label_points(contours: pl.DataFrame, keys: Sequence[str]) -> pl.DataFrame:
    mid = contours.group_by("line").agg(pl.col("point").max().alias("_n"))
    labelled = contours.join(mid, on="line").filter(pl.col("point") == pl.col("_n") // 2)
    levels = labelled["level"].to_list()
    texts = [f"{v:,.0f}" if abs(v) >= 100 or v == 0 else f"{v:.3g}" for v in levels]
    return labelled.with_columns(pl.Series("text", texts, dtype=pl.String)).select(
        ["level", "line", "x", "y", "text", *keys])
