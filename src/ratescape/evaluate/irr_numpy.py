"""The IRR kernels of :mod:`ratescape.evaluate.irr_kernels` in plain NumPy, for the few rows a small
run has (issue 16, part 3: a first run compiles only what it needs; compiling the certified cell
search alone costs about 3 s of CPU).

Each function is its compiled counterpart vectorised over rows: the same floating operations in
the same order for every row (sums left to right, as ``np.cumsum``; rows at different steps kept
apart by masks), and the exponential of the C library (``math.exp``, which compiled code calls
too; NumPy's own SIMD ``exp`` differs in the last bit now and then). So the roots, statuses and
flags are the compiled kernels' bit for bit; the tests compare the two. The cell search runs the
compiled depth-first order in lockstep: every row pops one cell of its own stack per step, so the
cell count, the order roots are listed in and where a row stops are the same too.

Methods and references: see :mod:`ratescape.evaluate.irr_kernels` and :mod:`ratescape.evaluate.irr`.
"""
from __future__ import annotations

import math

import numpy as np

from .compiled import ANCHOR_STEPS

_EPS = np.finfo(float).eps
ROOT_NONE, ROOT_FOUND, ROOT_NOT_CONVERGED = 0, 1, 2   # as irr_kernels


def _exp_one(v: float) -> float:
    try:
        return math.exp(v)
    except OverflowError:
        return math.inf


_EXP = np.frompyfunc(_exp_one, 1, 1)


def libm_exp(x) -> np.ndarray:
    """exp of each element by the C library (``math.exp``; +inf on overflow), as compiled code computes it."""
    x = np.asarray(x, dtype=float)
    if not x.size:
        return np.empty(x.shape)
    with np.errstate(over="ignore"):
        return _EXP(x).astype(float)


def _sequential_sum(x):
    """Sum along the last axis adding left to right from 0.0 (a compiled loop's order); ``x`` is a
    temporary and is overwritten."""
    if not x.shape[-1]:
        return np.zeros(x.shape[:-1])
    x[..., 0] += 0.0                                   # 0.0 + (-0.0) is 0.0, as the loop starts
    return np.cumsum(x, axis=-1)[..., -1]


# ------------------------------------------------------------------------------- stream facts --
def stream_facts_numpy(A):
    """``irr_kernels.stream_facts`` for (N, T) amounts: sign changes of the non-zero amounts and of
    their running sums, last non-zero period, all finite, total non-zero."""
    A = np.asarray(A, dtype=float)
    N, T = A.shape
    cum = np.cumsum(A, axis=1)                                     # sequential, as the loop adds

    def changes(x):
        nz = x != 0.0                                              # NaN counts as non-zero, sign -1
        sign = np.where(x > 0.0, 1, -1)
        seen = np.where(nz, np.arange(T), -1)
        np.maximum.accumulate(seen, axis=1, out=seen)              # last non-zero place up to t
        prev = np.full((N, T), -1)
        prev[:, 1:] = seen[:, :-1]
        prev_sign = np.take_along_axis(sign, np.maximum(prev, 0), axis=1)
        return (nz & (prev >= 0) & (sign != prev_sign)).sum(axis=1).astype(np.int64), seen

    sc, seen = changes(A) if T else (np.zeros(N, np.int64), np.zeros((N, 0), int))
    sc_cum, _ = changes(cum) if T else (np.zeros(N, np.int64), None)
    last = np.maximum(seen[:, -1], 0).astype(np.int64) if T else np.zeros(N, np.int64)
    finite = np.isfinite(A).all(axis=1)
    total_nonzero = cum[:, -1] != 0.0 if T else np.zeros(N, bool)
    return sc, sc_cum, last, finite, total_nonzero


# ------------------------------------------------------------- one sign change: Newton solve --
def _scaled_worth(A, L, u):
    """``irr_kernels._scaled_worth`` of rows A (n, T) with last periods L (n,) at u (n,)."""
    n, T = A.shape
    value = np.zeros(n)
    slope = np.zeros(n)
    size = np.zeros(n)
    pos = u >= 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        f = np.where(pos, libm_exp(-u), libm_exp(u))              # v = e^-u (u >= 0) or w = e^u
        absA = np.abs(A)
        for i in range(T):                                       # step i: t = L - i (u >= 0), t = i (u < 0)
            live = i <= L
            t = np.where(pos, L - i, i)
            t = np.clip(t, 0, T - 1)
            a = A[np.arange(n), t]
            aa = absA[np.arange(n), t]
            new_slope = slope * f + value
            new_value = value * f + a
            new_size = size * f + aa
            slope = np.where(live, new_slope, slope)
            value = np.where(live, new_value, value)
            size = np.where(live, new_size, size)
        slope = np.where(pos, -f * slope, f * slope)
    return value, slope, size


def _newton_or_bisect(x, f, df, lo, hi, step2):
    with np.errstate(divide="ignore", invalid="ignore"):
        xn = np.where(df != 0.0, x - f / df, np.nan)
    bad = ~((xn > lo) & (xn < hi)) | (np.abs(xn - x) > 0.5 * step2)
    return np.where(bad, 0.5 * (lo + hi), xn)


def _steps_done(xn, step1, lo, hi):
    tol = 4.0 * _EPS * (np.abs(xn) + 1.0)
    return (step1 <= tol) | (hi - lo <= tol)


def _bracketed_step(act, xa, f, df, below, lo, hi, step1, step2):
    """One safeguarded Newton step of the rows ``act`` at ``xa`` (the compiled kernels' step, row by
    row): the bracket [lo, hi] shrinks to the side of the root (``below``: the worth at ``xa`` has the
    sign of the low end), the step is Newton's or a bisection (:func:`_newton_or_bisect`), and the
    step sizes are shifted, all in place. Returns the new points and which rows are done."""
    lo[act] = np.where(below, xa, lo[act])
    hi[act] = np.where(below, hi[act], xa)
    xn = _newton_or_bisect(xa, f, df, lo[act], hi[act], step2[act])
    step2[act] = step1[act]
    step1[act] = np.abs(xn - xa)
    return xn, _steps_done(xn, step1[act], lo[act], hi[act])


def single_roots_numpy(A, last, u_lo: float, u_hi: float, maxiter: int):
    """``irr_kernels._single_roots`` over all rows at once: (N, T), (N,) -> u (N,), code (N,) int8.

    Safeguarded Newton (W. H. Press et al., Numerical Recipes, 3rd ed., Cambridge University Press,
    2007, section 9.4, ``rtsafe``; from memory) from a secant guess, as the compiled kernel."""
    A = np.asarray(A, dtype=float)
    L = np.asarray(last, dtype=np.int64)
    N = A.shape[0]
    roots = np.full(N, np.nan)
    code = np.full(N, ROOT_NONE, dtype=np.int8)
    fa = _scaled_worth(A, L, np.full(N, u_lo))[0]
    fb = _scaled_worth(A, L, np.full(N, u_hi))[0]
    at_lo = fa == 0.0
    at_hi = ~at_lo & (fb == 0.0)
    roots[at_lo], code[at_lo] = u_lo, ROOT_FOUND
    roots[at_hi], code[at_hi] = u_hi, ROOT_FOUND
    rows = np.flatnonzero(~at_lo & ~at_hi & ((fa < 0.0) != (fb < 0.0)))
    if rows.size == 0:
        return roots, code
    fa, fb = fa[rows], fb[rows]
    lo = np.full(rows.size, float(u_lo))
    hi = np.full(rows.size, float(u_hi))
    sign_lo = fa < 0.0
    x = lo - fa * (hi - lo) / (fb - fa)                          # secant first guess
    step1 = hi - lo
    step2 = hi - lo
    converged = np.zeros(rows.size, bool)
    checked = np.zeros(rows.size, bool)
    x_out = x.copy()
    act = np.arange(rows.size)                                   # rows still iterating (indexes into rows)
    for _ in range(maxiter):
        if act.size == 0:
            break
        f, df, size = _scaled_worth(A[rows[act]], L[rows[act]], x[act])
        small = (f == 0.0) | (np.abs(f) <= 8.0 * _EPS * size)
        stop = act[small]
        x_out[stop] = x[stop]
        converged[stop] = True
        checked[stop] = True
        keep = ~small
        act, f, df = act[keep], f[keep], df[keep]
        xa = x[act]
        below = (f < 0.0) == sign_lo[act]
        xn, done = _bracketed_step(act, xa, f, df, below, lo, hi, step1, step2)
        x[act] = xn
        x_out[act[done]] = xn[done]
        converged[act[done]] = True
        act = act[~done]
    x_out[act] = x[act]                                          # maxiter reached: not converged
    check = np.flatnonzero(converged & ~checked)
    if check.size:
        f, _, size = _scaled_worth(A[rows[check]], L[rows[check]], x_out[check])
        converged[check] = np.abs(f) <= 1e-10 * size               # irr_kernels.ROOT_TOL
    roots[rows] = np.where(converged, x_out, np.nan)
    code[rows] = np.where(converged, ROOT_FOUND, ROOT_NOT_CONVERGED)
    return roots, code


# ----------------------------------------------------------- certified roots in a grid cell --
_NMOM = 4
_STACK = 256


def _moments(A, L, k, x):
    """``irr_kernels._moments`` for rows A (n, T), L, k, x (n,): (8, n), rows 0-3 the values
    g^(j)(x), rows 4-7 the magnitudes M_j(x)."""
    n, T = A.shape
    D = int(L.max()) + 1 if n else 0
    left = k == L                                                # factor e^(x d) with d = L - t
    xs = np.where(left, x, -x)                                   # else e^(-x t)
    d = np.arange(D)
    t = np.where(left[:, None], L[:, None] - d, d)               # (n, D): the amount multiplied at step d
    live = d[None, :] <= L[:, None]
    c = np.where(live, A[np.arange(n)[:, None], np.clip(t, 0, T - 1)], 0.0)
    fac = np.empty((n, D))
    q = libm_exp(xs)
    with np.errstate(over="ignore", invalid="ignore"):
        anchor = libm_exp(np.multiply.outer(xs, np.arange(0, D, ANCHOR_STEPS, dtype=float)))
        f = np.ones(n)
        for j in range(D):                                       # fac *= q, re-anchored every ANCHOR_STEPS
            if j % ANCHOR_STEPS == 0:
                f = anchor[:, j // ANCHOR_STEPS]
            fac[:, j] = f
            f = f * q
        use = c != 0.0
        term = c * fac
        aterm = np.abs(term)
        dd = d.astype(float)
        t1 = term * dd
        t2 = t1 * dd
        t3 = t2 * dd
        a1 = aterm * dd
        a2 = a1 * dd
        a3 = a2 * dd
        sgn = left[:, None]
        out = np.empty((2 * _NMOM, n))
        zero = 0.0
        out[0] = _sequential_sum(np.where(use, term, zero))
        out[4] = _sequential_sum(np.where(use, aterm, zero))
        out[1] = _sequential_sum(np.where(use, np.where(sgn, t1, -t1), zero))
        out[5] = _sequential_sum(np.where(use, a1, zero))
        out[2] = _sequential_sum(np.where(use, t2, zero))
        out[6] = _sequential_sum(np.where(use, a2, zero))
        out[3] = _sequential_sum(np.where(use, np.where(sgn, t3, -t3), zero))
        out[7] = _sequential_sum(np.where(use, a3, zero))
    return out


def _certain_sign(v, err):
    return np.where(v > err, 1, np.where(v < -err, -1, 0))


def _refine(A, L, k, p, q, order, s_lo, maxiter):
    """``irr_kernels._refine`` for n rows at once: (u, converged) (n,)."""
    cerr = (2.0 * L + 80.0) * _EPS
    lo = p.copy()
    hi = q.copy()
    x = 0.5 * (p + q)
    step1 = hi - lo
    step2 = hi - lo
    out = x.copy()
    ok = np.zeros(p.size, bool)
    act = np.arange(p.size)
    for _ in range(maxiter):
        if act.size == 0:
            break
        m = _moments(A[act], L[act], k[act], x[act])
        f, df = m[order], m[order + 1]
        small = (f == 0.0) | (np.abs(f) <= cerr[act] * m[_NMOM + order])
        out[act[small]] = x[act[small]]
        ok[act[small]] = True
        keep = ~small
        act, f, df = act[keep], f[keep], df[keep]
        xa = x[act]
        below = np.where(f > 0.0, 1, -1) == s_lo[act]
        xn, done = _bracketed_step(act, xa, f, df, below, lo, hi, step1, step2)
        out[act[done]] = xn[done]
        ok[act[done]] = True
        x[act] = xn
        act = act[~done]
    out[act] = x[act]
    return out, ok


class _Cells:
    """The state of every row's depth-first cell search (one stack per row)."""

    def __init__(self, A, L, u0, u1, cap):
        J = u0.size
        self.A, self.L, self.cap = A, L, cap
        self.stack_p = np.empty((J, _STACK))
        self.stack_q = np.empty((J, _STACK))
        self.stack_p[:, 0] = u0
        self.stack_q[:, 0] = u1
        self.top = np.ones(J, dtype=np.int64)
        self.n = np.zeros(J, dtype=np.int64)
        self.cells = np.zeros(J, dtype=np.int64)
        self.roots = np.full((J, cap), np.nan)
        self.touch = np.zeros((J, cap), dtype=bool)
        self.flag = np.full(J, -1, dtype=np.int8)                # -1 still searching

    def add_root(self, jobs, x, touching):
        """``irr_kernels._add_root`` for distinct jobs; a job with no room is flagged unresolved."""
        if jobs.size == 0:
            return
        near = (np.abs(self.roots[jobs] - x[:, None]) <= (4.0 * _EPS * (1.0 + np.abs(x)))[:, None]) \
            & (np.arange(self.cap)[None, :] < self.n[jobs][:, None])
        seen = near.any(axis=1)
        first = np.argmax(near, axis=1)
        js, fs = jobs[seen], first[seen]
        self.touch[js, fs] = self.touch[js, fs] | touching
        new = ~seen
        full = new & (self.n[jobs] >= self.cap)
        self.flag[jobs[full]] = 1
        add = new & ~full
        ja = jobs[add]
        self.roots[ja, self.n[ja]] = x[add]
        self.touch[ja, self.n[ja]] = touching
        self.n[ja] += 1

    def monotone_piece(self, jobs, k, p, q, sa, sb, maxiter):
        """``irr_kernels._monotone_piece``: flags 1 (an end's sign undecided) or 2 (no convergence)."""
        undecided = (sa == 0) | (sb == 0)
        self.flag[jobs[undecided]] = 1
        go = ~undecided & (sa != sb)
        if not go.any():
            return
        j = jobs[go]
        x, ok = _refine(self.A[j], self.L[j], k[go], p[go], q[go], 0, sa[go], maxiter)
        self.flag[j[~ok]] = 2
        self.add_root(j[ok], x[ok], False)


def cell_roots_numpy(A, last, rows, u0, u1, touch_tol, cap, maxcells, maxiter):
    """``irr_kernels._cells_kernel`` over all cells at once: roots (J, cap), touching (J, cap),
    count (J,), flag (J,) int8 (0 resolved, 1 unresolved, 2 not converged; count 0 where set).

    The certification (Rolle's theorem and the interpolation-error bound, common practice; in the
    spirit of interval exclusion tests, R. E. Moore, R. B. Kearfott, M. J. Cloud, Introduction to
    Interval Analysis, SIAM, 2009, from memory) is :func:`ratescape.evaluate.irr_kernels.cell_roots`'s."""
    A = np.asarray(A, dtype=float)[rows]
    L = np.asarray(last, dtype=np.int64)[rows]
    s = _Cells(A, L, np.asarray(u0, dtype=float), np.asarray(u1, dtype=float), cap)
    while True:
        jobs = np.flatnonzero((s.flag < 0) & (s.top > 0))
        if jobs.size == 0:
            break
        s.top[jobs] -= 1
        p = s.stack_p[jobs, s.top[jobs]]
        q = s.stack_q[jobs, s.top[jobs]]
        s.cells[jobs] += 1
        h = q - p
        Lj = L[jobs]
        k = np.where(p + q < 0.0, Lj, 0)
        cerr = (2.0 * Lj + 80.0) * _EPS
        grow = 1.0 + cerr
        ma = _moments(A[jobs], Lj, k, p)
        mb = _moments(A[jobs], Lj, k, q)
        s0a, s0b = _certain_sign(ma[0], cerr * ma[4]), _certain_sign(mb[0], cerr * mb[4])
        s1a, s1b = _certain_sign(ma[1], cerr * ma[5]), _certain_sign(mb[1], cerr * mb[5])
        s2a, s2b = _certain_sign(ma[2], cerr * ma[6]), _certain_sign(mb[2], cerr * mb[6])
        B1 = np.maximum(ma[5], mb[5]) * grow
        B2 = np.maximum(ma[6], mb[6]) * grow
        B3 = np.maximum(ma[7], mb[7]) * grow
        # (A) no root
        la, lb = np.abs(ma[0]) - cerr * ma[4], np.abs(mb[0]) - cerr * mb[4]
        no_root = (s0a != 0) & (s0a == s0b) & ((la + lb > B1 * h) | (np.minimum(la, lb) > B2 * h * h / 8.0))
        # (B) monotone
        la, lb = np.abs(ma[1]) - cerr * ma[5], np.abs(mb[1]) - cerr * mb[5]
        mono = ~no_root & (s1a != 0) & (s1a == s1b) & ((la + lb > B2 * h) | (np.minimum(la, lb) > B3 * h * h / 8.0))
        if mono.any():
            s.monotone_piece(jobs[mono], k[mono], p[mono], q[mono], s0a[mono], s0b[mono], maxiter)
        # (C) convex or concave with one extremum
        la, lb = np.abs(ma[2]) - cerr * ma[6], np.abs(mb[2]) - cerr * mb[6]
        convex = ~no_root & ~mono & (s2a != 0) & (s2a == s2b) & (s1a != 0) & (s1b != 0) & (s1a != s1b) \
            & (la + lb > B3 * h)
        if convex.any():
            c = np.flatnonzero(convex)
            j = jobs[c]
            us, ok = _refine(A[j], Lj[c], k[c], p[c], q[c], 1, s1a[c], maxiter)
            s.flag[j[~ok]] = 2
            c, j, us = c[ok], j[ok], us[ok]
            m = _moments(A[j], Lj[c], k[c], us)
            ss = _certain_sign(m[0], cerr[c] * m[4])
            touching = (s0a[c] != 0) & (s0a[c] == s0b[c]) & (
                (ss == 0) | ((ss == s0a[c]) & (np.abs(m[0]) <= touch_tol * m[4])))
            s.add_root(j[touching], us[touching], True)
            c, j, us, ss = c[~touching], j[~touching], us[~touching], ss[~touching]
            s.monotone_piece(j, k[c], p[c], us, s0a[c], ss, maxiter)
            on = s.flag[j] < 0
            c, j, us, ss = c[on], j[on], us[on], ss[on]
            s.monotone_piece(j, k[c], us, q[c], ss, s0b[c], maxiter)
        # otherwise split the cell in two
        split = np.flatnonzero(~no_root & ~mono & ~convex)
        if split.size:
            j = jobs[split]
            ps, qs = p[split], q[split]
            stuck = (h[split] <= 64.0 * _EPS * (1.0 + np.abs(ps))) | (s.cells[j] >= maxcells) | (s.top[j] + 2 > _STACK)
            s.flag[j[stuck]] = 1
            j, ps, qs = j[~stuck], ps[~stuck], qs[~stuck]
            mid = 0.5 * (ps + qs)
            t = s.top[j]
            s.stack_p[j, t], s.stack_q[j, t] = mid, qs
            s.stack_p[j, t + 1], s.stack_q[j, t + 1] = ps, mid
            s.top[j] += 2
    # every root must zero the worth to ROOT_TOL (or touch_tol for a touching root)
    good = np.flatnonzero(s.flag < 0)
    jj, ii = np.nonzero(np.arange(cap)[None, :] < s.n[good][:, None])
    if jj.size:
        j = good[jj]
        x = s.roots[j, ii]
        m = _moments(A[j], L[j], np.where(x < 0.0, L[j], 0), x)
        tol = np.maximum(1e-10, np.where(s.touch[j, ii], touch_tol, 0.0))     # irr_kernels.ROOT_TOL
        s.flag[j[np.abs(m[0]) > tol * m[4]]] = 2
    s.flag[s.flag < 0] = 0
    count = np.where(s.flag == 0, s.n, 0)
    return s.roots, s.touch, count, s.flag
