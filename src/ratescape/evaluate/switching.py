"""Switching values and one-at-a-time sensitivity (tornado, spider).

The *switching value* of an input is the value at which a project's worth
crosses zero, so that the accept/reject decision switches; the closer it
is to the base value, the more fragile the decision. One-at-a-time
sensitivity moves one input at a time, the others held at base: a tornado
chart shows the worth at each input's low and high value, a spider chart
the worth against the percentage change of each input.

Every function here is generic: the caller supplies ``worth_fn`` callables
that evaluate all P projects at once, so nothing loops over projects.

References
----------
HM Treasury, The Green Book: Central Government Guidance on Appraisal and
Evaluation, 2020/2022, section on sensitivity analysis and switching values
(from memory).
C. S. Park, Contemporary Engineering Economics, Pearson, ch. "Risk
analysis": sensitivity graphs and breakeven analysis (from memory).
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.optimize import elementwise as _elementwise

__all__ = [
    "SWITCH_ONE",
    "SWITCH_SEVERAL",
    "SWITCH_NONE",
    "SWITCH_AT_BASE",
    "SwitchingResult",
    "switching_value",
    "linear_switching_multiplier",
    "first_cost_switching_multiplier",
    "TornadoResult",
    "tornado",
    "spider",
]

#: exactly one crossing in [low, high]
SWITCH_ONE = 0
#: several crossings; ``value`` is the one nearest the base value
SWITCH_SEVERAL = 1
#: no crossing in [low, high]; ``value`` is NaN
SWITCH_NONE = 2
#: worth is exactly zero at the base value (still counted as a crossing)
SWITCH_AT_BASE = 3


class SwitchingResult(NamedTuple):
    """Switching value per project, with status and every crossing found."""

    #: input value where worth = 0, nearest the base value; NaN if none. Shape (P,).
    value: np.ndarray
    #: (value - base) / |base| [fraction; 0.25 = +25 %]; NaN if base is 0. Shape (P,).
    relative_change: np.ndarray
    #: SWITCH_ONE, SWITCH_SEVERAL, SWITCH_NONE or SWITCH_AT_BASE. Shape (P,).
    status: np.ndarray
    #: number of crossings found in [low, high]. Shape (P,).
    n_crossings: np.ndarray
    #: every crossing, ascending, NaN-padded. Shape (P, R) with R = max(n_crossings, 1).
    crossings: np.ndarray


def _vec(v, n, name):
    a = np.asarray(v, dtype=float)
    if a.ndim == 0:
        a = np.full(n, float(a))
    if a.shape != (n,):
        raise ValueError(f"{name} must be a scalar or have shape ({n},), got shape {a.shape}")
    return a


def _call(worth_fn, vals, n):
    w = np.asarray(worth_fn(vals), dtype=float)
    if w.shape != (n,):
        raise ValueError(f"worth_fn must return shape ({n},) for an input of shape ({n},), got shape {w.shape}")
    return w


def switching_value(worth_fn, base, low, high, *, n_scan=65, rows_fn=None, scan_fn=None, roots_fn=None):
    """Value of one input, within [low, high], at which worth crosses zero.

    Parameters
    ----------
    worth_fn : callable
        ``worth_fn(values (P,)) -> (P,)``: the worth [currency] of each of
        the P projects when the input is set to ``values`` (one value per
        project), every other input at its base value. Must be continuous.
    base : float or array_like, shape (P,)
        Base value of the input [its own units].
    low, high : float or array_like, shape (P,)
        Range searched, low < high [same units].
    n_scan : int, optional
        Points of the scan that brackets the crossings (default 65).
    rows_fn : callable, optional
        ``rows_fn(values (J,), rows (J,)) -> (J,)``: the worth of only the projects ``rows``
        with the input at ``values`` (the others at base). When given, the root finder
        evaluates only the projects still iterating instead of all P each time.
    scan_fn : callable, optional
        ``scan_fn(values (K,)) -> (P, K)``: the worth of every project at each of K values shared
        by all projects. When given and ``low`` and ``high`` are the same for every project, the
        scan is one call instead of ``n_scan``.
    roots_fn : callable, optional
        ``roots_fn(rows (J,), a (J,), b (J,), xatol) -> (J,)``: the crossing of each project
        ``rows`` within its bracket [a, b], to ``|x| * 4 eps + xatol``, NaN where the bracket holds
        no sign change. When given it replaces SciPy's vectorised Chandrupatla search (e.g. a
        compiled one on the same worth, :meth:`ratescape.evaluate.kernel.PointEvaluator.roots_between`).

    Returns
    -------
    SwitchingResult
        ``value`` (P,), ``relative_change`` (P,), ``status`` (P,),
        ``n_crossings`` (P,), ``crossings`` (P, R). Scalar ``base``, ``low``
        and ``high`` give scalar ``value``, ``relative_change``, ``status``
        and ``n_crossings`` and ``crossings`` of shape (R,); ``worth_fn``
        is then called with arrays of shape (1,).

    Warnings
    --------
    Crossings are bracketed by a scan of ``n_scan`` points: two crossings
    closer together than one scan step (a touch of zero) can be missed.
    A worth that is exactly zero at a scan point counts as a crossing
    there.

    Notes
    -----
    Sign changes of worth on the scan bracket each crossing; each is then
    found to machine precision with Chandrupatla's bracketing method, for
    all projects at once. For the discount rate of a conventional
    investment the switching value is the IRR.

    References
    ----------
    A. Chandrupatla, "A new hybrid quadratic/bisection algorithm for finding
    the zero of a nonlinear function without using derivatives", Advances
    in Engineering Software 28(3), 1997, pp. 145-149.

    Examples
    --------
    Worth -100 + 60/(1+i) + 60/(1+i)^2 crosses zero at the IRR, 0.1306623...:

    >>> import numpy as np
    >>> fn = lambda i: -100 + 60 / (1 + i) + 60 / (1 + i) ** 2
    >>> res = switching_value(fn, 0.08, 0.0, 0.5)
    >>> round(res.value, 9), res.status
    (0.130662386, 0)
    """
    scalar = all(np.ndim(v) == 0 for v in (base, low, high))
    n = max(np.size(base), np.size(low), np.size(high)) if not scalar else 1
    base_ = _vec(base, n, "base")
    lo = _vec(low, n, "low")
    hi = _vec(high, n, "high")
    if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))) or np.any(lo >= hi):
        raise ValueError("low and high must be finite with low < high")
    if int(n_scan) != n_scan or n_scan < 2:
        raise ValueError(f"n_scan must be an integer >= 2, got {n_scan!r}")
    n_scan = int(n_scan)

    grid = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, n_scan)[None, :]  # (P, K)
    if scan_fn is not None and np.all(lo == lo[0]) and np.all(hi == hi[0]):
        W = np.asarray(scan_fn(grid[0]), dtype=float)                       # all scan points at once
        if W.shape != (n, n_scan):
            raise ValueError(f"scan_fn must return shape ({n}, {n_scan}), got shape {W.shape}")
    else:
        W = np.column_stack([_call(worth_fn, grid[:, k], n) for k in range(n_scan)])  # loop over scan points
    # events in ascending position: a zero at scan point k sits at 2k, a sign change between
    # points k and k + 1 at 2k + 1; nonzero() lists each project's events in that order
    events = np.zeros((n, 2 * n_scan - 1), dtype=bool)
    events[:, 0::2] = W == 0.0
    events[:, 1::2] = np.sign(W[:, :-1]) * np.sign(W[:, 1:]) < 0
    event_row, event_pos = np.nonzero(events)
    event_rank = np.arange(event_row.size) - np.searchsorted(event_row, event_row)   # r-th crossing of its row
    n_cross = np.bincount(event_row, minlength=n)
    R = max(int(n_cross.max()) if n_cross.size else 0, 1)
    crossings = np.full((n, R), np.nan)
    at_point = event_pos % 2 == 0
    crossings[event_row[at_point], event_rank[at_point]] = grid[event_row[at_point], event_pos[at_point] // 2]
    bracketed = ~at_point
    for r in range(R):  # loop over crossing rank, not over projects
        sel = bracketed & (event_rank == r)
        if np.any(sel):
            idx = event_row[sel]
            k = (event_pos[sel] - 1) // 2

            def f(x, j):
                j = j.astype(int)
                if rows_fn is not None:
                    return np.asarray(rows_fn(np.asarray(x, dtype=float), j), dtype=float)
                vals = base_.copy()
                vals[j] = x
                return _call(worth_fn, vals, n)[j]

            # absolute tolerance at the rounding level of the input's scale: a crossing at or near
            # zero is not chased down to the smallest normal number (about a thousand bisections)
            xatol = 4.0 * np.finfo(float).eps * max(1.0, float(np.max(np.abs(grid[idx]))))
            if roots_fn is not None:
                crossings[idx, r] = roots_fn(idx, grid[idx, k], grid[idx, k + 1], xatol)
                continue
            res = _elementwise.find_root(f, (grid[idx, k], grid[idx, k + 1]), args=(idx.astype(float),),
                                         tolerances={"xatol": xatol})
            crossings[idx, r] = res.x

    dist = np.abs(crossings - base_[:, None])
    has = n_cross > 0
    nearest = np.argmin(np.where(np.isnan(dist), np.inf, dist), axis=1)
    value = np.where(has, crossings[np.arange(n), nearest], np.nan)
    status = np.where(n_cross == 0, SWITCH_NONE, np.where(n_cross == 1, SWITCH_ONE, SWITCH_SEVERAL))
    w_base = _call(worth_fn, base_, n)
    status = np.where(w_base == 0.0, SWITCH_AT_BASE, status).astype(np.int8)
    value = np.where(w_base == 0.0, base_, value)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(base_ != 0, (value - base_) / np.abs(base_), np.nan)
    if scalar:
        return SwitchingResult(float(value[0]), float(rel[0]), int(status[0]), int(n_cross[0]), crossings[0])
    return SwitchingResult(value, rel, status, n_cross.astype(np.int64), crossings)


def linear_switching_multiplier(pw_fixed, pw_scaled):
    """Closed-form switching multiplier m* when worth is linear in a multiplier m.

    Parameters
    ----------
    pw_fixed : array_like [currency]
        Present worth of the cash flows the multiplier does not touch.
    pw_scaled : array_like [currency]
        Present worth of the cash flows multiplied by m (e.g. the first
        cost, signed: negative for an outlay). Broadcasts with pw_fixed.

    Returns
    -------
    ndarray or float
        m* = -pw_fixed / pw_scaled; NaN where pw_scaled = 0.

    Notes
    -----
    worth(m) = pw_fixed + m * pw_scaled = 0  =>  m* = -pw_fixed / pw_scaled.

    Examples
    --------
    >>> linear_switching_multiplier(1200.0, -1000.0)
    1.2
    """
    a = np.asarray(pw_fixed, dtype=float)
    b = np.asarray(pw_scaled, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(b != 0, -a / np.where(b != 0, b, 1.0), np.nan)
    return out if out.ndim else float(out)


def first_cost_switching_multiplier(pw_total, pw_investment):
    """Multiplier of the first cost at which present worth falls to zero (closed form).

    Parameters
    ----------
    pw_total : array_like [currency]
        Present worth of the project as given (multiplier 1).
    pw_investment : array_like [currency]
        Present worth of its investment lines (negative: an outlay).

    Returns
    -------
    ndarray or float
        m* = 1 - pw_total / pw_investment: the project breaks even when the
        first cost is m* times its estimate (m* - 1 is the tolerable
        overrun). NaN where pw_investment = 0.

    Notes
    -----
    worth(m) = (pw_total - pw_investment) + m * pw_investment; see
    :func:`linear_switching_multiplier`.

    Examples
    --------
    >>> first_cost_switching_multiplier(200.0, -1000.0)
    1.2
    """
    t = np.asarray(pw_total, dtype=float)
    inv = np.asarray(pw_investment, dtype=float)
    return linear_switching_multiplier(t - inv, inv)


class TornadoResult(NamedTuple):
    """One-at-a-time sensitivity of each project to each input."""

    #: input names, in the order of the rows below (I,)
    inputs: list
    #: worth with the input at its low value [currency]. Shape (I, P).
    worth_low: np.ndarray
    #: worth with the input at its high value [currency]. Shape (I, P).
    worth_high: np.ndarray
    #: |worth_high - worth_low| [currency]. Shape (I, P).
    swing: np.ndarray
    #: worth with every input at base [currency]. Shape (P,).
    worth_base: np.ndarray
    #: rank of each input by swing within each project, 0 = widest bar. Shape (I, P).
    rank: np.ndarray


def _by_input(d, names, n, what):
    if isinstance(d, dict):
        missing = [k for k in names if k not in d]
        if missing:
            raise ValueError(f"{what} has no value for input(s) {missing}")
        return {k: _vec(d[k], n, f"{what}[{k!r}]") for k in names}
    return {k: _vec(d, n, what) for k in names}


def _n_projects(*dicts):
    sizes = {np.size(v) for d in dicts if isinstance(d, dict) for v in d.values() if np.ndim(v) > 0}
    sizes |= {np.size(d) for d in dicts if not isinstance(d, dict) and np.ndim(d) > 0}
    if len(sizes) > 1:
        raise ValueError(f"inputs disagree on the number of projects: sizes {sorted(sizes)}")
    return sizes.pop() if sizes else 1


def tornado(worth_fn_by_input, base, low, high):
    """Worth of every project at the low and high value of each input, one at a time.

    Parameters
    ----------
    worth_fn_by_input : dict of str -> callable
        For each input name, ``fn(values (P,)) -> (P,)``: the worth
        [currency] with that input set to ``values``, the others at base.
    base, low, high : dict of str -> float or array_like (P,)
        Base, low and high value of each input (a single scalar or (P,)
        array applies to every input).

    Returns
    -------
    TornadoResult
        inputs (I,), worth_low (I, P), worth_high (I, P), swing (I, P),
        worth_base (P,), rank (I, P).

    Raises
    ------
    ValueError
        If the functions disagree on the worth at base (relative 1e-9),
        which means their "others at base" differ.

    Notes
    -----
    swing = |worth(high) - worth(low)|; a tornado chart sorts the inputs
    by swing, widest on top.

    Examples
    --------
    >>> import numpy as np
    >>> fns = {"benefit": lambda b: -100 + b, "cost": lambda c: 110 - c}
    >>> t = tornado(fns, {"benefit": 110, "cost": 100}, {"benefit": 90, "cost": 95},
    ...             {"benefit": 130, "cost": 105})
    >>> t.swing[:, 0].tolist(), t.rank[:, 0].tolist()
    ([40.0, 10.0], [0, 1])
    """
    if not isinstance(worth_fn_by_input, dict) or not worth_fn_by_input:
        raise ValueError("worth_fn_by_input must be a non-empty dict of input name -> callable")
    names = list(worth_fn_by_input)
    n = _n_projects(base, low, high)
    b = _by_input(base, names, n, "base")
    lo = _by_input(low, names, n, "low")
    hi = _by_input(high, names, n, "high")
    w_lo = np.stack([_call(worth_fn_by_input[k], lo[k], n) for k in names])
    w_hi = np.stack([_call(worth_fn_by_input[k], hi[k], n) for k in names])
    w_b = np.stack([_call(worth_fn_by_input[k], b[k], n) for k in names])
    ref = w_b[0]
    if not np.allclose(w_b, ref[None, :], rtol=1e-9, atol=1e-9 * max(1.0, float(np.max(np.abs(ref))))):
        raise ValueError("the worth functions disagree at the base values; each must hold the other inputs at base")
    swing = np.abs(w_hi - w_lo)
    order = np.argsort(-swing, axis=0, kind="stable")
    rank = np.empty_like(order)
    np.put_along_axis(rank, order, np.arange(len(names))[:, None] * np.ones((1, n), int), axis=0)
    return TornadoResult(names, w_lo, w_hi, swing, ref, rank)


def spider(worth_fn_by_input, base, pct_changes):
    """Worth of every project as each input moves by given fractions of its base value.

    Parameters
    ----------
    worth_fn_by_input : dict of str -> callable
        As for :func:`tornado`.
    base : dict of str -> float or array_like (P,)
        Base value of each input.
    pct_changes : array_like, shape (K,) [fraction; -0.2 = -20 %]
        Relative changes applied: the input is set to base * (1 + change).

    Returns
    -------
    worth : ndarray, shape (I, P, K) [currency]
        Rows in the order of ``worth_fn_by_input``.

    Examples
    --------
    >>> fns = {"benefit": lambda b: -100 + b}
    >>> spider(fns, {"benefit": 120.0}, [-0.5, 0.0, 0.5])[0, 0].tolist()
    [-40.0, 20.0, 80.0]
    """
    if not isinstance(worth_fn_by_input, dict) or not worth_fn_by_input:
        raise ValueError("worth_fn_by_input must be a non-empty dict of input name -> callable")
    pc = np.asarray(pct_changes, dtype=float)
    if pc.ndim != 1 or not np.all(np.isfinite(pc)):
        raise ValueError(f"pct_changes must be a finite array of shape (K,), got shape {pc.shape}")
    names = list(worth_fn_by_input)
    n = _n_projects(base)
    b = _by_input(base, names, n, "base")
    out = np.empty((len(names), n, pc.size))
    for i, k in enumerate(names):  # loop over inputs and changes, never over projects
        for j, c in enumerate(pc):
            out[i, :, j] = _call(worth_fn_by_input[k], b[k] * (1.0 + c), n)
    return out
