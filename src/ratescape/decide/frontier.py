"""Indifference frontier of mutually exclusive alternatives on a decision map.

On a plane of two inputs x and y (for instance the discount rate and
inflation), each point is coloured by the alternative of greatest worth.
The *indifference frontier* is the set of lines where two alternatives
share the top worth. This module draws it precisely: not as the staircase
of grid cells, but at the true roots of worth_a - worth_b, found by
bracketing root finding on the exact worth functions.

Method
------
1. For each pair (a, b), the zero contour of the grid difference
   values[a] - values[b] is traced with contourpy in grid-index space, so
   each contour point lies on a known grid edge (or node) and the points
   come ordered into polylines.
2. Each point is moved to the exact root of worth_a - worth_b along its
   grid edge, for all points at once, with a vectorised bracketing solver
   (Chandrupatla's method, :func:`_bracketed_roots`; checked against
   ``scipy.optimize.elementwise.find_root``).
3. A point belongs to the frontier only where a and b are the top two
   (no third alternative is worth more); polylines are cut where that
   fails, and each cut end is extended to the *triple point* where
   worth_a = worth_b = worth_c (a 2 x 2 root solve).
4. Optionally, ``densify`` extra points are inserted between consecutive
   points by root finding along short transversals, so the drawn line
   follows the curve between grid lines.

Pure numpy/scipy plus contourpy (contour topology only).

References
----------
A. Chandrupatla, "A new hybrid quadratic/bisection algorithm for finding
the zero of a nonlinear function without using derivatives", Advances in
Engineering Software 28(3), 1997, pp. 145-149.
W. E. Lorensen, H. E. Cline, "Marching cubes: a high resolution 3D surface
construction algorithm", Computer Graphics 21(4), 1987 (the square
case of the grid contouring idea).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import root as _root

from ratescape.evaluate.bracketing import chandrupatla

#: SciPy's default tolerances of ``find_root`` on x: 4 eps relative, 4 tiny absolute
_EPS, _TINY = np.finfo(float).eps, np.finfo(float).tiny

__all__ = [
    "Frontier",
    "indifference_frontier",
    "KIND_EDGE",
    "KIND_TRANSVERSAL",
    "KIND_TRIPLE",
]

#: point found on a grid edge (or at a grid node)
KIND_EDGE = 0
#: point inserted between two others by root finding along a transversal
KIND_TRANSVERSAL = 1
#: end point where three alternatives share the top worth
KIND_TRIPLE = 2

_TINY = 1e-300


@dataclass(frozen=True)
class Frontier:
    """Indifference frontier as ordered polylines, one row per point.

    Every array has shape (n,), one entry per point. Points of one
    ``segment`` are consecutive rows, ordered by ``point`` (0, 1, ...).
    ``alternative_a`` < ``alternative_b`` are the row indices (into the
    ``values``/``worth_at`` rows) of the two alternatives that are
    indifferent along the segment. A closed loop repeats its first point
    at its end. ``kind`` says how a point was found (KIND_EDGE,
    KIND_TRANSVERSAL, KIND_TRIPLE); ``residual`` is
    |worth_a - worth_b| at the point [currency] and
    ``converged`` whether it is within the requested tolerance.
    """

    alternative_a: np.ndarray
    alternative_b: np.ndarray
    segment: np.ndarray
    point: np.ndarray
    x: np.ndarray
    y: np.ndarray
    kind: np.ndarray
    residual: np.ndarray
    converged: np.ndarray

    def __len__(self):
        return int(self.x.size)

    @property
    def n_segments(self) -> int:
        """Number of polylines."""
        return int(np.unique(self.segment).size)

    def polylines(self):
        """List of (alternative_a, alternative_b, xy) with xy of shape (m, 2), one per segment."""
        out = []
        for s in np.unique(self.segment):
            sel = self.segment == s
            i0 = np.flatnonzero(sel)[0]
            out.append((int(self.alternative_a[i0]), int(self.alternative_b[i0]),
                        np.column_stack([self.x[sel], self.y[sel]])))
        return out

    def as_columns(self):
        """Dict of column name -> array, in the order of the ``frontiers`` table."""
        return {
            "alternative_a": self.alternative_a,
            "alternative_b": self.alternative_b,
            "segment": self.segment,
            "point": self.point,
            "x": self.x,
            "y": self.y,
            "kind": self.kind,
            "residual": self.residual,
            "converged": self.converged,
        }


def _empty_frontier():
    i = np.zeros(0, dtype=np.int64)
    f = np.zeros(0)
    return Frontier(i, i.copy(), i.copy(), i.copy(), f, f.copy(), np.zeros(0, np.int8), f.copy(),
                    np.zeros(0, bool))


def _check_axis(v, name):
    a = np.asarray(v, dtype=float)
    if a.ndim != 1 or a.size < 2:
        raise ValueError(f"{name} must have shape (n{name},) with at least 2 values, got shape {a.shape}")
    if not np.all(np.isfinite(a)) or np.any(np.diff(a) <= 0):
        raise ValueError(f"{name} must be finite and strictly increasing")
    return a


class _Engine:
    """Exact worths at points given in grid-index coordinates (u along x, v along y)."""

    def __init__(self, x, y, worth_at, n_alt, rtol, atol):
        self.x, self.y, self.fn, self.n_alt = x, y, worth_at, n_alt
        self.rtol, self.atol = rtol, atol
        self.iu = np.arange(x.size, dtype=float)
        self.iv = np.arange(y.size, dtype=float)

    def phys(self, u, v):
        return np.interp(u, self.iu, self.x), np.interp(v, self.iv, self.y)

    def worth_xy(self, xp, yp):
        xp = np.ascontiguousarray(xp, dtype=float).ravel()
        yp = np.ascontiguousarray(yp, dtype=float).ravel()
        w = np.asarray(self.fn(xp, yp), dtype=float)
        if w.shape != (self.n_alt, xp.size):
            raise ValueError(
                f"worth_at must return shape (A, n) = ({self.n_alt}, {xp.size}), got shape {w.shape}"
            )
        return w

    def worth(self, u, v):
        return self.worth_xy(*self.phys(u, v))

    def tol(self, *ws):
        """Allowed |difference| between worths ws at each point [currency]."""
        return self.rtol * np.max(np.abs(np.stack(ws)), axis=0) + self.atol

    def diff(self, u, v, a, b):
        shape = np.shape(u)
        w = self.worth(u, v)
        return (w[a] - w[b]).reshape(shape)


def _bracketed_roots(f, f0, f1, args):
    """Roots t in [0, 1] of f(t, *args) (vectorised), each bracketed: f0 = f(0) and f1 = f(1) have
    opposite signs. Returns (t, found); t is NaN where no root was found.

    Chandrupatla's method with SciPy's steps and default tolerances
    (:func:`ratescape.evaluate.bracketing.chandrupatla`), called here rather than
    ``scipy.optimize.elementwise.find_root`` (the test's reference): the frontier solves small
    arrays thousands of times, one group at a time, where SciPy's per-call work dominated (300
    groups over 2,601 scenarios: 9.7 s with it, 5.8 s without; the same points to the last bit
    or two). The known end values are passed in, not evaluated again.
    """
    def at(idx, t):
        return f(t, *(arg[idx] for arg in args))

    f0 = np.asarray(f0, dtype=float)
    t = chandrupatla(at, np.zeros(f0.size), np.ones(f0.size), f0, f1, xatol=4 * _TINY, xrtol=4 * _EPS)
    return t, np.isfinite(t)


def _root_on_paths(eng, a, b, u0, v0, du, dv, d0, d1):
    """Root t in [0, 1] of worth_a - worth_b along u0 + t du, v0 + t dv (vectorised).

    d0, d1 are the exact differences at t = 0 and t = 1. Returns t and a
    flag that a root was bracketed (or sits exactly at an end).
    """
    n = u0.size
    t = np.full(n, np.nan)
    ok = np.zeros(n, bool)
    z0, z1 = d0 == 0, d1 == 0
    t[z0] = 0.0
    t[~z0 & z1] = 1.0
    ok |= z0 | z1
    br = ~ok & (np.sign(d0) * np.sign(d1) < 0)
    if np.any(br):
        def f(tt, uu, vv, ddu, ddv):
            return eng.diff(uu + tt * ddu, vv + tt * ddv, a, b)

        t[br], ok[br] = _bracketed_roots(f, d0[br], d1[br], (u0[br], v0[br], du[br], dv[br]))
    return t, ok


def _refine_grid_points(eng, a, b, U, V):
    """Move contour points (index coords) to exact roots on their grid edges."""
    n = U.size
    nx, ny = eng.x.size, eng.y.size
    ru, rv = np.round(U), np.round(V)
    on_u = np.abs(U - ru) <= 1e-9
    on_v = np.abs(V - rv) <= 1e-9
    node = on_u & on_v
    vert = on_u & ~on_v  # on a vertical grid line, v varies along the edge
    horiz = ~on_u & on_v
    other = ~on_u & ~on_v  # not expected from the serial algorithm: snap
    snap_u = other & (np.abs(U - ru) <= np.abs(V - rv))
    vert |= snap_u
    horiz |= other & ~snap_u
    u0 = np.where(vert | node, ru, np.minimum(np.floor(U), nx - 2))
    v0 = np.where(horiz | node, rv, np.minimum(np.floor(V), ny - 2))
    du = np.where(horiz, 1.0, 0.0)
    dv = np.where(vert, 1.0, 0.0)

    # exact differences at both ends of each edge (nodes: the node itself)
    W = eng.worth(np.concatenate([u0, u0 + du]), np.concatenate([v0, v0 + dv]))
    d = W[a] - W[b]
    sc = eng.tol(W[a], W[b])
    d0, d1 = d[:n], d[n:]
    s0, s1 = sc[:n], sc[n:]

    # nodes whose exact difference is not (near) zero: find an incident edge with a sign change
    bad_node = node & (np.abs(d0) > s0)
    if np.any(bad_node):
        k = np.flatnonzero(bad_node)
        steps = np.array([[1, 0], [-1, 0], [0, 1], [0, -1]], float)
        cu = u0[k, None] + steps[None, :, 0]
        cv = v0[k, None] + steps[None, :, 1]
        inside = (cu >= 0) & (cu <= nx - 1) & (cv >= 0) & (cv <= ny - 1)
        Wn = eng.worth(np.clip(cu, 0, nx - 1).ravel(), np.clip(cv, 0, ny - 1).ravel())
        dn = (Wn[a] - Wn[b]).reshape(cu.shape)
        change = inside & (np.sign(dn) != np.sign(d0[k, None])) & (dn != d0[k, None])
        has = change.any(axis=1)
        j = np.argmax(change, axis=1)
        kk = k[has]
        du[kk] = steps[j[has], 0]
        dv[kk] = steps[j[has], 1]
        d1[kk] = dn[has, j[has]]
    at_node = node & ~bad_node
    d1 = np.where(at_node, d0, d1)

    t, found = _root_on_paths(eng, a, b, u0, v0, du, dv, np.where(at_node, 0.0, d0), d1)
    # no exact sign change (grid values and worth_at disagree near a zero): keep the nearer end
    miss = ~found
    if np.any(miss):
        end1 = np.abs(d1) / s1 < np.abs(d0) / s0
        t[miss] = np.where(end1[miss], 1.0, 0.0)
        lin = (np.minimum(np.abs(d0) / s0, np.abs(d1) / s1) > 1.0) & miss
        # linear interpolation of the contour point as the best remaining guess
        t[lin] = np.where(horiz[lin], U[lin] - u0[lin], V[lin] - v0[lin])
    return u0 + t * du, v0 + t * dv


def _evaluate(eng, a, b, u, v):
    """Residual [currency], tolerance flag, top-two margin and validity at points (index coords)."""
    W = eng.worth(u, v)
    wa, wb = W[a], W[b]
    resid = np.abs(wa - wb)
    others = np.delete(W, [a, b], axis=0)
    if others.shape[0]:
        best_other = others.max(axis=0)
        margin = np.minimum(wa, wb) - best_other
        valid = margin >= -eng.tol(wa, wb, best_other)
        offender = np.delete(np.arange(W.shape[0]), [a, b])[np.argmax(others, axis=0)]
    else:
        margin = np.full(u.size, np.inf)
        valid = np.ones(u.size, bool)
        offender = np.full(u.size, -1)
    return resid, resid <= eng.tol(wa, wb), margin, valid, offender


def _triple_point(eng, a, b, c, p_ok, p_bad, m_ok, m_bad):
    """Point where worth_a = worth_b = worth_c near the chord p_ok -> p_bad (index coords)."""
    x, y = eng.x, eng.y
    hx = (x[-1] - x[0]) / (x.size - 1)
    hy = (y[-1] - y[0]) / (y.size - 1)
    frac = m_ok / (m_ok - m_bad) if np.isfinite(m_ok - m_bad) and m_ok != m_bad else 0.5
    frac = float(np.clip(frac, 0.0, 1.0))
    g = p_ok + frac * (p_bad - p_ok)
    gx, gy = eng.phys(g[:1], g[1:])
    w0 = eng.worth_xy(gx, gy)
    s = float(max(abs(w0[a, 0]), abs(w0[b, 0]), abs(w0[c, 0]))) + eng.atol / eng.rtol + _TINY

    def F(z):
        w = eng.worth_xy(np.array([x[0] + z[0] * hx]), np.array([y[0] + z[1] * hy]))[:, 0]
        return np.array([(w[a] - w[b]) / s, (w[a] - w[c]) / s])

    z0 = np.array([(gx[0] - x[0]) / hx, (gy[0] - y[0]) / hy])
    try:
        sol = _root(F, z0, method="hybr", options={"xtol": 1e-14})
    except (ValueError, FloatingPointError):  # pragma: no cover - defensive
        return None
    z = sol.x
    if not np.all(np.isfinite(z)) or np.max(np.abs(z - z0)) > 3.0:
        return None
    px, py = x[0] + z[0] * hx, y[0] + z[1] * hy
    tol_box = 1e-9
    if px < x[0] - tol_box * hx or px > x[-1] + tol_box * hx or py < y[0] - tol_box * hy or py > y[-1] + tol_box * hy:
        return None
    px, py = float(np.clip(px, x[0], x[-1])), float(np.clip(py, y[0], y[-1]))
    w = eng.worth_xy(np.array([px]), np.array([py]))[:, 0]
    sc = float(eng.tol(w[a:a + 1], w[b:b + 1], w[c:c + 1])[0])
    if abs(w[a] - w[b]) > sc or abs(w[a] - w[c]) > sc:
        return None
    rest = np.delete(w, [a, b, c])
    if rest.size and rest.max() > min(w[a], w[b], w[c]) + sc:
        return None
    # back to index coordinates
    return np.array([np.interp(px, x, eng.iu), np.interp(py, y, eng.iv)])


def _split_valid(P, valid, closed):
    """Split a polyline (m, 2) into runs of valid points.

    Returns a list of (points, start_neighbour, end_neighbour) where the
    neighbours are the invalid points just outside the run (or None), and
    a flag per run that it is a full closed loop.
    """
    m = P.shape[0]
    if closed:
        body, vb = P[:-1], valid[:-1]
        if vb.all():
            return [(P, None, None, True)]
        if not vb.any():
            return []
        r = int(np.argmin(vb))  # first invalid point
        body = np.roll(body, -r, axis=0)
        vb = np.roll(vb, -r)
        # close the ring so the last run sees the first (invalid) point as its neighbour
        P, valid, m = np.vstack([body, body[:1]]), np.concatenate([vb, vb[:1]]), body.shape[0] + 1
    runs = []
    i = 0
    while i < m:
        if not valid[i]:
            i += 1
            continue
        j = i
        while j + 1 < m and valid[j + 1]:
            j += 1
        runs.append((P[i:j + 1], i - 1 if i > 0 else None, j + 1 if j + 1 < m else None, False))
        i = j + 1
    return [(pts, None if s is None else P[s], None if e is None else P[e], c) for pts, s, e, c in runs]


def indifference_frontier(x, y, values, worth_at, *, densify=0, rtol=1e-9, atol=None):
    """Indifference frontier between mutually exclusive alternatives on an x-y grid.

    Parameters
    ----------
    x : array_like, shape (nx,)
        Grid values of the first input (e.g. the discount rate [fraction
        per year]), strictly increasing.
    y : array_like, shape (ny,)
        Grid values of the second input (e.g. inflation [fraction per
        year]), strictly increasing.
    values : array_like, shape (A, ny, nx) [currency] or None
        Worth of each of the A alternatives at each grid node (row j of y,
        column k of x). Include do nothing as an explicit row of zeros when
        the group is optional. ``None``: computed here with ``worth_at``.
    worth_at : callable
        ``worth_at(x (n,), y (n,)) -> (A, n)``: the exact worth of every
        alternative (same rows as ``values``) at arbitrary points; used for
        the root finding. Must be continuous in x and y.
    densify : int, optional
        Extra points inserted between consecutive frontier points by root
        finding along transversals (0 = only grid-line crossings).
    rtol : float, optional
        Relative tolerance: each returned point has
        |worth_a - worth_b| <= rtol * max(|worth_a|, |worth_b|) + atol,
        unless its ``converged`` flag is False.
    atol : float, optional [currency]
        Absolute floor of that tolerance, needed where both worths are near
        0 (an alternative against do nothing, whose worth is exactly 0).
        Default: rtol * 1e-3 * max |values|, i.e. the scale is
        max(|worth_a|, |worth_b|) + 1e-3 * (largest |worth| on the grid).

    Returns
    -------
    Frontier
        Columnar points (alternative_a, alternative_b, segment, point, x, y,
        kind, residual [currency], converged); empty when one alternative is preferred
        over the whole grid.

    Warnings
    --------
    The topology comes from the grid: a frontier piece that crosses no
    grid line (a loop inside one cell, or the a-b boundary between two
    triple points in the same cell) is not found. Refine the grid to see
    such detail. Alternatives equal everywhere have no frontier.

    Notes
    -----
    A point (x, y) is on the frontier between a and b when
    worth_a(x, y) = worth_b(x, y) >= worth_c(x, y) for every other c.
    Along each grid edge crossed by the zero contour of worth_a - worth_b,
    the root is bracketed by the edge's end nodes and found to machine
    precision with Chandrupatla's method. Triple points solve
    worth_a = worth_b = worth_c with Powell's hybrid method.

    References
    ----------
    A. Chandrupatla, Advances in Engineering Software 28(3), 1997,
    pp. 145-149.
    I. Fisher, The Theory of Interest, Macmillan, 1930 (the crossover rate
    of two investments).

    Examples
    --------
    Two alternatives; B beats A when the rate exceeds 0.05 (independent of y):

    >>> import numpy as np
    >>> x = np.linspace(0.0, 0.1, 5); y = np.linspace(0.0, 0.04, 3)
    >>> def worth_at(xp, yp):
    ...     return np.vstack([0.05 - xp, np.zeros_like(xp)])
    >>> fr = indifference_frontier(x, y, None, worth_at)
    >>> np.allclose(fr.x, 0.05), fr.y.tolist(), fr.segment.tolist()
    (True, [0.0, 0.02, 0.04], [0, 0, 0])
    """
    x = _check_axis(x, "x")
    y = _check_axis(y, "y")
    if not callable(worth_at):
        raise ValueError("worth_at must be callable: worth_at(x (n,), y (n,)) -> (A, n)")
    if int(densify) != densify or densify < 0:
        raise ValueError(f"densify must be a non-negative integer, got {densify!r}")
    densify = int(densify)
    if not 0 < rtol < 1:
        raise ValueError(f"rtol must be in (0, 1), got {rtol!r}")
    X, Y = np.meshgrid(x, y)
    if values is None:
        w = np.asarray(worth_at(X.ravel(), Y.ravel()), dtype=float)
        if w.ndim != 2 or w.shape[1] != X.size:
            raise ValueError(f"worth_at must return shape (A, {X.size}), got shape {w.shape}")
        values = w.reshape(w.shape[0], y.size, x.size)
    vals = np.asarray(values, dtype=float)
    if vals.ndim != 3 or vals.shape[1:] != (y.size, x.size):
        raise ValueError(f"values must have shape (A, ny, nx) = (A, {y.size}, {x.size}), got shape {vals.shape}")
    if not np.all(np.isfinite(vals)):
        raise ValueError("values must be finite")
    n_alt = vals.shape[0]
    if n_alt < 2:
        return _empty_frontier()
    if atol is None:
        atol = rtol * 1e-3 * float(np.max(np.abs(vals)))
    if not (np.isfinite(atol) and atol >= 0):
        raise ValueError(f"atol must be finite and >= 0, got {atol!r}")

    import contourpy  # topology only

    eng = _Engine(x, y, worth_at, n_alt, float(rtol), float(atol))
    rows = []  # (a, b, seg_points (m,2) index coords, kinds (m,))
    for a in range(n_alt - 1):
        for b in range(a + 1, n_alt):
            d = vals[a] - vals[b]
            if not (np.any(d > 0) and np.any(d <= 0)):
                continue
            gen = contourpy.contour_generator(eng.iu, eng.iv, d, name="serial",
                                              line_type=contourpy.LineType.Separate)
            lines = []
            for ln in gen.lines(0.0):
                ln = np.asarray(ln, float)
                keep = np.ones(len(ln), bool)
                keep[1:] = np.any(ln[1:] != ln[:-1], axis=1)
                ln = ln[keep]
                if len(ln):
                    lines.append(ln)
            if not lines:
                continue
            sizes = [len(ln) for ln in lines]
            allp = np.vstack(lines)
            ur, vr = _refine_grid_points(eng, a, b, allp[:, 0], allp[:, 1])
            _, _, margin, valid, offender = _evaluate(eng, a, b, ur, vr)
            pos = np.cumsum([0] + sizes)
            for li, ln in enumerate(lines):
                sl = slice(pos[li], pos[li + 1])
                P = np.column_stack([ur[sl], vr[sl]])
                # drop consecutive duplicates created by refinement (contour through a node)
                keep = np.ones(len(P), bool)
                keep[1:] = np.any(np.abs(np.diff(P, axis=0)) > 1e-12, axis=1)
                P, vl, mg, off = P[keep], valid[sl][keep], margin[sl][keep], offender[sl][keep]
                closed = len(P) > 2 and np.all(np.abs(P[0] - P[-1]) <= 1e-12)
                idx_of = {tuple(p): k for k, p in enumerate(P)}
                for pts, s_nb, e_nb, _full in _split_valid(P, vl, closed):
                    kinds = [KIND_EDGE] * len(pts)
                    pts = list(pts)
                    for end, nb in (("start", s_nb), ("end", e_nb)):
                        if nb is None:
                            continue
                        p_ok = pts[0] if end == "start" else pts[-1]
                        k_ok, k_bad = idx_of[tuple(p_ok)], idx_of[tuple(nb)]
                        tp = _triple_point(eng, a, b, int(off[k_bad]), np.asarray(p_ok), np.asarray(nb),
                                           mg[k_ok], mg[k_bad])
                        if tp is None or np.all(np.abs(tp - p_ok) <= 1e-12):
                            continue
                        if end == "start":
                            pts.insert(0, tp)
                            kinds.insert(0, KIND_TRIPLE)
                        else:
                            pts.append(tp)
                            kinds.append(KIND_TRIPLE)
                    rows.append((a, b, np.asarray(pts, float), np.asarray(kinds, np.int8)))

    if not rows:
        return _empty_frontier()
    if densify:
        rows = _densify(eng, rows, densify)

    seg_a, seg_b, seg_id, pt_id, us, vs, ks = [], [], [], [], [], [], []
    for s, (a, b, pts, kinds) in enumerate(rows):
        m = len(pts)
        seg_a.append(np.full(m, a))
        seg_b.append(np.full(m, b))
        seg_id.append(np.full(m, s))
        pt_id.append(np.arange(m))
        us.append(pts[:, 0])
        vs.append(pts[:, 1])
        ks.append(kinds)
    A_ = np.concatenate(seg_a).astype(np.int64)
    B_ = np.concatenate(seg_b).astype(np.int64)
    U = np.concatenate(us)
    V = np.concatenate(vs)
    xp, yp = eng.phys(U, V)
    W = eng.worth_xy(xp, yp)
    k = np.arange(U.size)
    wa, wb = W[A_, k], W[B_, k]
    resid = np.abs(wa - wb)
    return Frontier(
        alternative_a=A_,
        alternative_b=B_,
        segment=np.concatenate(seg_id).astype(np.int64),
        point=np.concatenate(pt_id).astype(np.int64),
        x=xp,
        y=yp,
        kind=np.concatenate(ks).astype(np.int8),
        residual=resid,
        converged=resid <= eng.tol(wa, wb),
    )


def _densify(eng, rows, n_extra):
    """Insert n_extra points between consecutive points by transversal root finding."""
    x, y = eng.x, eng.y
    hx = (x[-1] - x[0]) / (x.size - 1)
    hy = (y[-1] - y[0]) / (y.size - 1)
    out = []
    for a, b, pts, kinds in rows:
        if len(pts) < 2:
            out.append((a, b, pts, kinds))
            continue
        px, py = eng.phys(pts[:, 0], pts[:, 1])
        Z = np.column_stack([(px - x[0]) / hx, (py - y[0]) / hy])  # normalised physical coords
        P, Q = Z[:-1], Z[1:]
        chord = Q - P
        L = np.hypot(chord[:, 0], chord[:, 1])
        nrm = np.column_stack([-chord[:, 1], chord[:, 0]]) / np.where(L > 0, L, 1.0)[:, None]
        s = np.arange(1, n_extra + 1) / (n_extra + 1)
        C = P[:, None, :] + s[None, :, None] * chord[:, None, :]  # (m-1, k, 2)
        start = C - L[:, None, None] * nrm[:, None, :]
        step = 2.0 * L[:, None, None] * nrm[:, None, :] * np.ones_like(C)
        su, sv = start[..., 0].ravel(), start[..., 1].ravel()
        tu, tv = step[..., 0].ravel(), step[..., 1].ravel()

        def to_idx(zx, zy):
            return np.interp(x[0] + zx * hx, x, eng.iu), np.interp(y[0] + zy * hy, y, eng.iv)

        # keep the transversal inside the grid box
        lo_x, hi_x = 0.0, (x[-1] - x[0]) / hx
        lo_y, hi_y = 0.0, (y[-1] - y[0]) / hy
        inside = ((np.minimum(su, su + tu) >= lo_x) & (np.maximum(su, su + tu) <= hi_x)
                  & (np.minimum(sv, sv + tv) >= lo_y) & (np.maximum(sv, sv + tv) <= hi_y)
                  & (np.repeat(L, n_extra) > 0))

        def diff_z(zx, zy):
            shape = np.shape(zx)
            w = eng.worth_xy(x[0] + np.ravel(zx) * hx, y[0] + np.ravel(zy) * hy)
            return (w[a] - w[b]).reshape(shape)

        # worths only inside the grid box: outside it a rate can leave the model's domain
        # (an inflation at or below -100 % on a wide grid), and those points are unused anyway
        d0 = np.full(su.size, np.nan)
        d1 = np.full(su.size, np.nan)
        if np.any(inside):
            d0[inside] = diff_z(su[inside], sv[inside])
            d1[inside] = diff_z(su[inside] + tu[inside], sv[inside] + tv[inside])
        t = np.full(su.size, np.nan)
        ok = np.zeros(su.size, bool)
        br = inside & (np.sign(d0) * np.sign(d1) < 0)
        if np.any(br):
            t[br], ok[br] = _bracketed_roots(lambda tt, a0, b0, c0, e0: diff_z(a0 + tt * c0, b0 + tt * e0),
                                             d0[br], d1[br], (su[br], sv[br], tu[br], tv[br]))
        zx, zy = su + t * tu, sv + t * tv
        ui, vi = to_idx(np.where(ok, zx, 0.0), np.where(ok, zy, 0.0))
        if np.any(ok):
            _, conv, _, valid, _ = _evaluate(eng, a, b, ui[ok], vi[ok])
            good = np.zeros(su.size, bool)
            good[ok] = conv & valid
        else:
            good = ok
        good = good.reshape(-1, n_extra)
        ui, vi = ui.reshape(-1, n_extra), vi.reshape(-1, n_extra)
        new_pts, new_kinds = [pts[0]], [kinds[0]]
        for i in range(len(pts) - 1):
            for j in range(n_extra):
                if good[i, j]:
                    new_pts.append(np.array([ui[i, j], vi[i, j]]))
                    new_kinds.append(KIND_TRANSVERSAL)
            new_pts.append(pts[i + 1])
            new_kinds.append(kinds[i + 1])
        out.append((a, b, np.asarray(new_pts), np.asarray(new_kinds, np.int8)))
    return out
