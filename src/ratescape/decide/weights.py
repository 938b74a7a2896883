"""Scenario weights from the user's judgement about each grid axis.

The weights here are the user's judgement of how plausible each value of an
axis is (a discount rate, an inflation rate, ...), not a forecast: the tool
does not estimate them from data, and results computed with them
(probability of acceptance, expected present worth) are only as good as
that judgement. Say so wherever they are shown.

A weight per grid value of an axis is given directly, or a named
distribution (normal, triangular, uniform) is discretised onto the axis's
grid points. A scenario's weight is the product of its axis values' weights,
which assumes the axes are independent.

References
----------
A. H. Bowker, G. J. Lieberman, Engineering Statistics, 2nd ed.,
Prentice-Hall, 1972 (normal, triangular and uniform distributions; from
memory).
D. Vose, Risk Analysis: A Quantitative Guide, 3rd ed., Wiley, 2008,
ch. "Probability distributions" (triangular distribution; from memory).
"""
from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from scipy.special import ndtr

__all__ = [
    "discrete_weights",
    "normal_weights",
    "triangular_weights",
    "uniform_weights",
    "axis_weights",
    "scenario_weights",
    "probability_of_acceptance",
    "expected_present_worth",
    "weighted_selection_share",
    "scenario_weights_from_spec",
]

_TAILS = ("fold", "truncate")


def _check_grid(grid):
    g = np.asarray(grid, dtype=float)
    if g.ndim != 1 or g.size == 0:
        raise ValueError(f"grid must have shape (n,) with n >= 1, got shape {g.shape}")
    if np.any(~np.isfinite(g)):
        raise ValueError("grid values must be finite")
    if g.size > 1 and np.any(np.diff(np.sort(g)) == 0):
        raise ValueError("grid values must be distinct")
    return g


def check_weights(weights, S=None, name="weights"):
    """Validate scenario weights; return them normalised to sum to 1."""
    w = np.asarray(weights, dtype=float)
    if w.ndim != 1 or (S is not None and w.shape != (S,)):
        want = f"(S,) = ({S},)" if S is not None else "(S,)"
        raise ValueError(f"{name} must have shape {want}, got shape {w.shape}")
    if np.any(~np.isfinite(w)) or np.any(w < 0):
        raise ValueError(f"{name} must be finite and non-negative")
    total = w.sum()
    if not total > 0:
        raise ValueError(f"{name} must not all be zero")
    return w / total


def _cell_edges(g_sorted, tails):
    """Edges of the cells around sorted grid points: midpoints between points."""
    n = g_sorted.size
    mids = 0.5 * (g_sorted[1:] + g_sorted[:-1])
    if tails == "fold":
        lo_end, hi_end = -np.inf, np.inf
    else:  # truncate: end cells as wide on the outside as on the inside
        half_lo = (g_sorted[1] - g_sorted[0]) / 2 if n > 1 else 0.0
        half_hi = (g_sorted[-1] - g_sorted[-2]) / 2 if n > 1 else 0.0
        lo_end, hi_end = g_sorted[0] - half_lo, g_sorted[-1] + half_hi
    return np.concatenate([[lo_end], mids, [hi_end]])


def _discretise(grid, cdf, tails):
    if tails not in _TAILS:
        raise ValueError(f"tails must be one of {_TAILS}, got {tails!r}")
    g = _check_grid(grid)
    order = np.argsort(g)
    if g.size == 1:
        return np.ones(1)
    edges = _cell_edges(g[order], tails)
    mass = np.diff(cdf(edges))
    mass = np.clip(mass, 0.0, None)
    total = mass.sum()
    if not total > 0:
        raise ValueError(
            "the distribution puts no probability on any grid cell; widen the grid or move the distribution"
        )
    out = np.empty_like(mass)
    out[order] = mass / total
    return out


def discrete_weights(grid, weights):
    """Weights given per grid value, checked and normalised to sum to 1.

    Parameters
    ----------
    grid : array_like, shape (n,)
        The axis's grid values (for the shape check only).
    weights : array_like, shape (n,) [relative]
        The user's weight for each grid value; non-negative, not all zero.

    Returns
    -------
    w : ndarray, shape (n,) [probability], summing to 1

    Examples
    --------
    >>> discrete_weights([0.02, 0.03, 0.04], [1, 2, 1]).tolist()
    [0.25, 0.5, 0.25]
    """
    g = _check_grid(grid)
    return check_weights(weights, g.size, name="weights")


def normal_weights(grid, mean, sd, *, tails="fold"):
    """Discretise a normal distribution onto the grid points of an axis.

    Parameters
    ----------
    grid : array_like, shape (n,) [axis units, e.g. fraction per year]
        Grid values of the axis, distinct, in any order.
    mean, sd : float [axis units]
        Mean and standard deviation; ``sd > 0``.
    tails : {"fold", "truncate"}
        What happens to the probability beyond the grid, see Notes.

    Returns
    -------
    w : ndarray, shape (n,) [probability], summing to 1, in grid order

    Notes
    -----
    Each grid point g_k gets the probability of the cell between the
    midpoints to its neighbours, F(m_k) - F(m_{k-1}), with
    m_k = (g_k + g_{k+1}) / 2. With ``tails="fold"`` (default) the end cells
    reach to -inf and +inf, so the tails beyond the grid are folded into
    the first and last points and the weights sum to 1 before any
    renormalisation. With ``tails="truncate"`` the end cells are as wide
    outside the end point as inside, the mass beyond them is dropped and
    the rest renormalised to sum to 1.

    F is the normal CDF, Phi((x - mean) / sd), computed with
    ``scipy.special.ndtr``.

    Examples
    --------
    >>> w = normal_weights([0.0, 1.0, 2.0], 1.0, 1.0)
    >>> w.round(6).tolist()
    [0.308538, 0.382925, 0.308538]
    """
    mean = float(mean)
    sd = float(sd)
    if not (math.isfinite(mean) and math.isfinite(sd) and sd > 0):
        raise ValueError(f"normal needs finite mean and sd > 0, got mean={mean}, sd={sd}")
    return _discretise(grid, lambda x: ndtr((x - mean) / sd), tails)


def _triangular_cdf(x, low, mode, high):
    x = np.asarray(x, dtype=float)
    out = np.zeros_like(x)
    width = high - low
    left = (x > low) & (x <= mode)
    right = (x > mode) & (x < high)
    if mode > low:
        out[left] = (x[left] - low) ** 2 / (width * (mode - low))
    if high > mode:
        out[right] = 1.0 - (high - x[right]) ** 2 / (width * (high - mode))
    out[x >= high] = 1.0
    return out


def triangular_weights(grid, low, mode, high, *, tails="fold"):
    """Discretise a triangular distribution onto the grid points of an axis.

    Parameters
    ----------
    grid : array_like, shape (n,) [axis units]
    low, mode, high : float [axis units]
        ``low <= mode <= high`` and ``low < high``.
    tails : {"fold", "truncate"}
        See :func:`normal_weights`. The triangle has no mass outside
        [low, high], so this only matters when the grid is narrower.

    Returns
    -------
    w : ndarray, shape (n,) [probability], summing to 1

    Notes
    -----
    CDF: F(x) = (x - a)^2 / ((b - a)(c - a)) for a <= x <= c and
    F(x) = 1 - (b - x)^2 / ((b - a)(b - c)) for c < x <= b, with a = low,
    c = mode, b = high. Cells as in :func:`normal_weights`.

    Examples
    --------
    >>> triangular_weights([0.0, 0.5, 1.0], 0.0, 0.5, 1.0).tolist()
    [0.125, 0.75, 0.125]
    """
    low, mode, high = float(low), float(mode), float(high)
    if not all(map(math.isfinite, (low, mode, high))) or not (low <= mode <= high and low < high):
        raise ValueError(f"triangular needs low <= mode <= high and low < high, got {low}, {mode}, {high}")
    return _discretise(grid, lambda x: _triangular_cdf(x, low, mode, high), tails)


def uniform_weights(grid, low, high, *, tails="fold"):
    """Discretise a uniform distribution on [low, high] onto an axis's grid points.

    Parameters
    ----------
    grid : array_like, shape (n,) [axis units]
    low, high : float [axis units], ``low < high``
    tails : {"fold", "truncate"}
        See :func:`normal_weights`.

    Returns
    -------
    w : ndarray, shape (n,) [probability], summing to 1

    Notes
    -----
    F(x) = (x - low) / (high - low) clipped to [0, 1]; cells as in
    :func:`normal_weights`. Grid points whose cell lies outside
    [low, high] get weight 0.

    Examples
    --------
    >>> uniform_weights([0.0, 1.0, 2.0, 3.0], 0.0, 2.0).tolist()
    [0.25, 0.5, 0.25, 0.0]
    """
    low, high = float(low), float(high)
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        raise ValueError(f"uniform needs finite low < high, got {low}, {high}")
    return _discretise(grid, lambda x: np.clip((np.asarray(x) - low) / (high - low), 0.0, 1.0), tails)


_DISTRIBUTIONS = {
    "normal": (normal_weights, ("mean", "sd")),
    "triangular": (triangular_weights, ("low", "mode", "high")),
    "uniform": (uniform_weights, ("low", "high")),
}


def axis_weights(grid, spec, *, tails="fold"):
    """Weights of one axis's grid values from a user's specification.

    Parameters
    ----------
    grid : array_like, shape (n,) [axis units]
    spec : array_like of shape (n,), or mapping
        Either the weight of each grid value (see :func:`discrete_weights`),
        or a mapping naming a distribution and its parameters:
        ``{"distribution": "normal", "mean": m, "sd": s}``,
        ``{"distribution": "triangular", "low": a, "mode": c, "high": b}``,
        ``{"distribution": "uniform", "low": a, "high": b}``.
    tails : {"fold", "truncate"}
        For distributions; see :func:`normal_weights`.

    Returns
    -------
    w : ndarray, shape (n,) [probability], summing to 1

    Examples
    --------
    >>> axis_weights([0.0, 1.0], {"distribution": "uniform", "low": -0.5, "high": 1.5}).tolist()
    [0.5, 0.5]
    """
    if isinstance(spec, Mapping):
        params = dict(spec)
        name = params.pop("distribution", None)
        if name not in _DISTRIBUTIONS:
            raise ValueError(f"distribution must be one of {sorted(_DISTRIBUTIONS)}, got {name!r}")
        fn, names = _DISTRIBUTIONS[name]
        missing = [k for k in names if k not in params]
        extra = sorted(set(params) - set(names))
        if missing or extra:
            raise ValueError(
                f"{name} takes parameters {names}; missing {missing}, unknown {extra}"
            )
        return fn(grid, *(params[k] for k in names), tails=tails)
    return discrete_weights(grid, spec)


def scenario_weights(axis_w, axis_index=None):
    """Scenario weights as the product of per-axis weights.

    Parameters
    ----------
    axis_w : sequence of array_like, each shape (n_a,) [probability]
        Weights of each axis's grid values (from :func:`axis_weights`).
    axis_index : array_like of int, shape (A, S), optional
        ``axis_index[a, s]`` is the position of scenario s's value on axis
        a. Default: the full grid in C order (the first axis varies
        slowest), S = n_1 * n_2 * ... .

    Returns
    -------
    w : ndarray, shape (S,) [probability], summing to 1

    Notes
    -----
    w_s = prod_a w_a[axis_index[a, s]] / sum over scenarios, which assumes
    the axes are independent (e.g. the user's belief about inflation does
    not depend on the discount rate). The weights are the user's judgement,
    not a forecast. When ``axis_index`` covers only part of the full grid,
    the weights are renormalised over the scenarios given.

    Examples
    --------
    >>> scenario_weights([[0.5, 0.5], [0.2, 0.8]]).tolist()
    [0.1, 0.4, 0.1, 0.4]
    """
    if not isinstance(axis_w, Sequence) or len(axis_w) == 0:
        raise ValueError("axis_w must be a non-empty sequence of per-axis weight arrays")
    ws = []
    for a, w in enumerate(axis_w):
        arr = np.asarray(w, dtype=float)
        if arr.ndim != 1 or arr.size == 0:
            raise ValueError(f"axis_w[{a}] must have shape (n,), got shape {arr.shape}")
        if np.any(~np.isfinite(arr)) or np.any(arr < 0):
            raise ValueError(f"axis_w[{a}] must be finite and non-negative")
        ws.append(arr)
    if axis_index is None:
        out = ws[0]
        for arr in ws[1:]:
            out = np.multiply.outer(out, arr)
        out = np.ravel(out)
    else:
        idx = np.asarray(axis_index)
        if idx.ndim != 2 or idx.shape[0] != len(ws) or not np.issubdtype(idx.dtype, np.integer):
            raise ValueError(f"axis_index must be an integer array of shape (A, S) = ({len(ws)}, S), got shape {idx.shape}")
        out = np.ones(idx.shape[1])
        for a, arr in enumerate(ws):
            if np.any(idx[a] < 0) or np.any(idx[a] >= arr.size):
                raise ValueError(f"axis_index[{a}] out of range for an axis of {arr.size} values")
            out = out * arr[idx[a]]
    return check_weights(out, name="scenario weights")


def probability_of_acceptance(pw, weights):
    """Weighted share of scenarios in which each project has pw >= 0.

    Parameters
    ----------
    pw : array_like, shape (P, S) [currency]
    weights : array_like, shape (S,) [probability]
        Scenario weights (the user's judgement, not a forecast);
        normalised to sum to 1.

    Returns
    -------
    p : ndarray, shape (P,) [probability]

    Notes
    -----
    p_j = sum_s w_s [pw_js >= 0] (a project with present worth exactly zero
    earns exactly the MARR and counts as accepted, common practice).

    Examples
    --------
    >>> probability_of_acceptance([[5.0, -1.0, 0.0]], [0.5, 0.25, 0.25]).tolist()
    [0.75]
    """
    x = _as_pw2(pw)
    w = check_weights(weights, x.shape[1])
    return (x >= 0).astype(float) @ w


def expected_present_worth(pw, weights):
    """Weighted mean present worth of each project over the scenarios.

    Parameters
    ----------
    pw : array_like, shape (P, S) [currency]
    weights : array_like, shape (S,) [probability]
        The user's judgement, not a forecast; normalised to sum to 1.

    Returns
    -------
    e : ndarray, shape (P,) [currency]

    Notes
    -----
    E[PW_j] = sum_s w_s pw_js.

    Examples
    --------
    >>> expected_present_worth([[10.0, -2.0]], [0.25, 0.75]).tolist()
    [1.0]
    """
    x = _as_pw2(pw)
    if np.any(~np.isfinite(x)):
        raise ValueError("pw must be finite")
    w = check_weights(weights, x.shape[1])
    return x @ w


def weighted_selection_share(selected, weights):
    """Weighted share of scenarios in which each project is selected.

    Parameters
    ----------
    selected : array_like of bool, shape (S, P)
        Selections per scenario (from capital rationing).
    weights : array_like, shape (S,) [probability]
        The user's judgement, not a forecast; normalised to sum to 1.

    Returns
    -------
    share : ndarray, shape (P,) [probability]

    Examples
    --------
    >>> weighted_selection_share([[True, False], [True, True]], [0.75, 0.25]).tolist()
    [1.0, 0.25]
    """
    sel = np.asarray(selected)
    if sel.ndim != 2:
        raise ValueError(f"selected must have shape (S, P), got shape {sel.shape}")
    w = check_weights(weights, sel.shape[0])
    return w @ sel.astype(float)


def scenario_weights_from_spec(spec, table):
    """Scenario weights (S,) for a grid spec's scenario table, from ``spec.weights``.

    Parameters
    ----------
    spec : object
        Anything with ``axes`` (a list of objects with ``name`` and
        ``values``, the grid of each axis) and ``weights``, a mapping from an
        axis name to that axis's specification for :func:`axis_weights`: a
        list of weights (one per grid value) or a mapping such as
        ``{"distribution": "normal", "mean": 0.03, "sd": 0.01}``, optionally
        with ``"tails": "fold" | "truncate"``. The key ``discount_rates``
        stands for the first (discount) axis. Axes without an entry get
        equal weights.
    table : object
        Anything with ``columns``, a mapping from axis name to the (S,)
        values of each scenario.

    Returns
    -------
    w : ndarray, shape (S,) [probability], summing to 1

    Notes
    -----
    The product of axis weights, see :func:`scenario_weights` (independent
    axes). The weights are the user's judgement, not a forecast.
    """
    axes = list(spec.axes)
    names = [a.name for a in axes]
    given = dict(spec.weights or {})
    if "discount_rates" in given and names[0] not in given:
        given[names[0]] = given.pop("discount_rates")
    unknown = sorted(set(given) - set(names))
    if unknown:
        raise ValueError(f"weights given for unknown axis {unknown}; the grid's axes are {names}")
    ws, idx = [], []
    for a in axes:
        grid = np.asarray(a.values, dtype=float)
        entry = given.get(a.name)
        if entry is None:
            w = np.full(grid.size, 1.0 / grid.size)
        elif isinstance(entry, Mapping):
            entry = dict(entry)
            tails = entry.pop("tails", "fold")
            w = axis_weights(grid, entry, tails=tails)
        else:
            w = axis_weights(grid, entry)
        vals = np.asarray(table.columns[a.name], dtype=float)
        order = np.argsort(grid)
        pos = np.clip(np.searchsorted(grid[order], vals), 0, grid.size - 1)
        near = np.where(
            (pos > 0) & (np.abs(grid[order][pos - 1] - vals) < np.abs(grid[order][pos] - vals)), pos - 1, pos
        )
        if not np.allclose(grid[order][near], vals, rtol=1e-12, atol=1e-15):
            raise ValueError(f"scenario values of axis {a.name!r} are not on its grid")
        ws.append(w)
        idx.append(order[near])
    return scenario_weights(ws, np.asarray(idx, dtype=np.intp))


def _as_pw2(pw):
    x = np.asarray(pw, dtype=float)
    if x.ndim != 2:
        raise ValueError(f"pw must have shape (P, S), got shape {x.shape}")
    return x
