"""Compiled (Numba) kernels of the IRR search: the one-sign-change Newton solve and the certified
cell search for streams with several sign changes.

Pure functions: arrays in, arrays out; :mod:`ratescape.evaluate.irr` drives them and documents the
method and the tolerance each returned root is checked against.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .compiled import ANCHOR_STEPS
from .irr_numpy import cell_roots_numpy, single_roots_numpy, stream_facts_numpy

# Up to these many rows (cells) a call runs the NumPy forms of irr_numpy.py (the same numbers, bit
# for bit) and the Numba kernel is not compiled: a small run's few rows cost milliseconds there,
# against about 1 s (one sign change) and 3 s (cell search) of CPU to compile the kernels on a
# first run. Above them the compiled kernels pay for their compilation.
NUMPY_MAX_ROWS = 2_000
NUMPY_MAX_CELLS = 1_000
NUMPY_MAX_FACTS = 50_000


def _use_compiled(n: int, limit: int, compiled: bool | None) -> bool:
    return n > limit if compiled is None else bool(compiled)

_EPS = np.finfo(float).eps
# arguments passed as typed NumPy scalars, not Python literals: Numba compiles a callee once per
# literal value it is called with, and these kernels are compiled on a run's first use
ORDER_WORTH = np.int64(0)     # _refine: root of the worth itself
ORDER_SLOPE = np.int64(1)     # _refine: root of its derivative
CROSSING = np.bool_(False)    # _add_root: a root where the worth changes sign
TOUCHING = np.bool_(True)     # _add_root: a touching (double) root


@njit(cache=True, nogil=True)
def _scaled_worth(a, L, u):
    """Worth of a[0..L] at u = log(1 + r), scaled by a positive factor so no term exceeds |a_t|.

    u >= 0: f = sum a_t e^(-u t); u < 0: e^(u L) f = sum a_t e^(u (L - t)). Returns the value, its
    derivative in u (of the same scaled form) and sum |terms| (the rounding scale).
    """
    value = 0.0
    slope = 0.0
    size = 0.0
    if u >= 0.0:
        v = np.exp(-u)
        for t in range(L, -1, -1):                # Horner in v <= 1
            slope = slope * v + value
            value = value * v + a[t]
            size = size * v + abs(a[t])
        # d/du sum a_t v^t = -v d/dv (...)
        slope = -v * slope
    else:
        w = np.exp(u)
        for t in range(0, L + 1):                 # Horner in w < 1, from t = 0 (highest power L - t)
            slope = slope * w + value
            value = value * w + a[t]
            size = size * w + abs(a[t])
        slope = w * slope
    return value, slope, size


# Root status codes of the compiled IRR kernels.
ROOT_NONE, ROOT_FOUND, ROOT_NOT_CONVERGED = 0, 1, 2


# Every root a kernel returns satisfies |worth| <= ROOT_TOL * sum |terms| at it (checked on return);
# one that does not is reported as not converged, never as a root.
ROOT_TOL = 1e-10


_MAXITER = 300


@njit(cache=True, nogil=True)
def _newton_or_bisect(x, f, df, lo, hi, step2):
    """One safeguarded Newton step in the bracket [lo, hi]: bisection instead when Newton leaves the
    bracket or its step is over half the step before last (Newton creeping along a steep
    exponential), the rule of rtsafe (W. H. Press et al., Numerical Recipes, 3rd ed., Cambridge
    University Press, 2007, section 9.4)."""
    xn = x - f / df if df != 0.0 else np.nan
    if not (xn > lo and xn < hi) or abs(xn - x) > 0.5 * step2:
        xn = 0.5 * (lo + hi)
    return xn


@njit(cache=True, nogil=True)
def _steps_done(xn, step1, lo, hi):
    """The last step or the bracket is below 4 eps (1 + |u|): the iterate is final."""
    tol = 4.0 * _EPS * (abs(xn) + 1.0)
    return step1 <= tol or hi - lo <= tol


@njit(cache=True, nogil=True)
def _single_roots(A, last, u_lo, u_hi, maxiter, roots, code):
    N = A.shape[0]
    for r in range(N):
        a = A[r]
        L = last[r]
        fa, _, _ = _scaled_worth(a, L, u_lo)
        fb, _, _ = _scaled_worth(a, L, u_hi)
        code[r] = ROOT_NONE
        roots[r] = np.nan
        if fa == 0.0:
            roots[r] = u_lo
            code[r] = ROOT_FOUND
            continue
        if fb == 0.0:
            roots[r] = u_hi
            code[r] = ROOT_FOUND
            continue
        if (fa < 0.0) == (fb < 0.0):
            continue
        lo = u_lo
        hi = u_hi
        sign_lo = fa < 0.0
        x = lo - fa * (hi - lo) / (fb - fa)       # secant first guess
        step1 = hi - lo                           # the last two step lengths
        step2 = hi - lo
        converged = False
        checked = False
        for it in range(maxiter):
            f, df, size = _scaled_worth(a, L, x)
            if f == 0.0 or abs(f) <= 8.0 * _EPS * size:
                converged = True
                checked = True
                break
            if (f < 0.0) == sign_lo:
                lo = x
            else:
                hi = x
            xn = _newton_or_bisect(x, f, df, lo, hi, step2)
            step2 = step1
            step1 = abs(xn - x)
            if _steps_done(xn, step1, lo, hi):
                x = xn
                converged = True
                break
            x = xn
        if converged and not checked:
            f, df, size = _scaled_worth(a, L, x)
            converged = abs(f) <= ROOT_TOL * size
        roots[r] = x if converged else np.nan
        code[r] = ROOT_FOUND if converged else ROOT_NOT_CONVERGED


def single_sign_change_solve(amounts, last, u_low: float, u_high: float, maxiter: int = _MAXITER, *,
                             compiled: bool | None = None):
    """The IRR of streams whose amounts change sign once, with a status code per row.

    By Descartes' rule of signs such a stream has exactly one root in r > -1, so a root lies in
    the range iff the worth differs in sign at its ends. Safeguarded Newton on the worth
    polynomial (Horner form, scaled so that no term overflows), one row at a time: (N, T), (N,)
    last non-zero period -> u (N,) in u = log(1 + r), code (N,) int8: ``ROOT_NONE`` (no root in
    [u_low, u_high]), ``ROOT_FOUND`` or ``ROOT_NOT_CONVERGED`` (u is NaN).

    The iteration stops where |worth| is at the rounding level of its terms (8 eps sum |terms|)
    or a step or the bracket is below 4 eps (1 + |u|); a Newton step that leaves the bracket, or
    is over half the step before last, is replaced by a bisection (so Newton cannot creep along a
    steep exponential), and ``maxiter`` (300) is far above the ~60 bisections that reach machine
    precision from any range. A root found by a small step is checked:
    |worth| <= ``ROOT_TOL`` * sum |terms|; a row that fails the check or reaches ``maxiter``
    gets ``ROOT_NOT_CONVERGED``, never a value. (Safeguarded Newton: W. H. Press et al.,
    Numerical Recipes, 3rd ed., Cambridge University Press, 2007, ``rtsafe``; from memory.)

    ``compiled``: None (default) runs the Numba kernel above ``NUMPY_MAX_ROWS`` rows and
    :func:`ratescape.evaluate.irr_numpy.single_roots_numpy` (the same numbers) up to it.
    """
    A = np.ascontiguousarray(amounts, dtype=float)
    last = np.ascontiguousarray(last, dtype=np.int64)
    if not _use_compiled(A.shape[0], NUMPY_MAX_ROWS, compiled):
        return single_roots_numpy(A, last, float(u_low), float(u_high), int(maxiter))
    roots = np.empty(A.shape[0])
    code = np.empty(A.shape[0], dtype=np.int8)
    _single_roots(A, last, float(u_low), float(u_high), int(maxiter), roots, code)
    return roots, code


def single_sign_change_roots(amounts, last, u_low: float, u_high: float):
    """:func:`single_sign_change_solve` as (u, found): u is NaN and found False where there is no
    root in the range **or** the iteration did not converge (use the solve form to tell them
    apart)."""
    roots, code = single_sign_change_solve(amounts, last, u_low, u_high)
    return roots, code == ROOT_FOUND


# ---------------------------------------------------------------- certified roots in one cell --
# Worth of a[0..L] at u = log(1 + r) times the constant e^(k u), k = L on cells left of u = 0 and
# k = 0 elsewhere, so every factor e^(u (k - t)) stays near or below 1:
#     g(u) = sum_t a_t e^(u d_t),  d_t = k - t,  g^(j)(u) = sum_t a_t d_t^j e^(u d_t).
# All d_t have one sign, so each |term| of g^(j) is monotone in u and its largest value on a cell
# [p, q] is at an end: B_j = max(M_j(p), M_j(q)), M_j = sum_t |a_t| |d_t|^j e^(u d_t), bounds
# |g^(j)| on the whole cell. The computed g^(j) differs from the exact one by at most
# (2 L + 80) eps M_j (recursive summation, factors re-anchored with exp() every ANCHOR_STEPS steps).
_NMOM = 4


@njit(cache=True, nogil=True)
def _moments(a, L, k, x, out):
    """out[j] = g^(j)(x), out[4 + j] = M_j(x), j = 0..3 (see above)."""
    for j in range(2 * _NMOM):
        out[j] = 0.0
    if k == L:                                     # d = L - t >= 0, factor e^(x d), d = 0, 1, ...
        q = np.exp(x)
        fac = 1.0
        for d in range(0, L + 1):
            if d % ANCHOR_STEPS == 0:
                fac = np.exp(x * d)
            c = a[L - d]
            if c != 0.0:
                term = c * fac
                aterm = abs(term)
                dd = float(d)
                out[0] += term
                out[4] += aterm
                out[1] += term * dd
                out[5] += aterm * dd
                out[2] += term * dd * dd
                out[6] += aterm * dd * dd
                out[3] += term * dd * dd * dd
                out[7] += aterm * dd * dd * dd
            fac *= q
    else:                                          # k = 0: d = -t <= 0, factor e^(-x t)
        q = np.exp(-x)
        fac = 1.0
        for t in range(0, L + 1):
            if t % ANCHOR_STEPS == 0:
                fac = np.exp(-x * t)
            c = a[t]
            if c != 0.0:
                term = c * fac
                aterm = abs(term)
                dd = float(t)
                out[0] += term
                out[4] += aterm
                out[1] -= term * dd
                out[5] += aterm * dd
                out[2] += term * dd * dd
                out[6] += aterm * dd * dd
                out[3] -= term * dd * dd * dd
                out[7] += aterm * dd * dd * dd
            fac *= q


@njit(cache=True, nogil=True)
def _certain_sign(v, err):
    if v > err:
        return 1
    if v < -err:
        return -1
    return 0


@njit(cache=True, nogil=True)
def _refine(a, L, k, p, q, order, s_lo, maxiter, m):
    """Root of g^(order) in [p, q] where it changes sign (``s_lo`` its sign at p) and has exactly
    one root: safeguarded Newton (bisection when a step leaves the bracket or is over half the step
    before last). Returns (u, converged)."""
    cerr = (2.0 * L + 80.0) * _EPS
    lo = p
    hi = q
    x = 0.5 * (p + q)
    step1 = hi - lo
    step2 = hi - lo
    for it in range(maxiter):
        _moments(a, L, k, x, m)
        f = m[order]
        df = m[order + 1]
        if f == 0.0 or abs(f) <= cerr * m[_NMOM + order]:
            return x, True
        if (1 if f > 0.0 else -1) == s_lo:
            lo = x
        else:
            hi = x
        xn = _newton_or_bisect(x, f, df, lo, hi, step2)
        step2 = step1
        step1 = abs(xn - x)
        if _steps_done(xn, step1, lo, hi):
            return xn, True
        x = xn
    return x, False


@njit(cache=True, nogil=True)
def _add_root(x, touching, roots, touch, n, cap):
    """Append x unless it repeats a root already listed (to 4 eps); returns the new count or
    -1 when there is no room."""
    for i in range(n):
        if abs(roots[i] - x) <= 4.0 * _EPS * (1.0 + abs(x)):
            touch[i] = touch[i] or touching
            return n
    if n >= cap:
        return -1
    roots[n] = x
    touch[n] = touching
    return n + 1


@njit(cache=True, nogil=True)
def _monotone_piece(a, L, k, p, q, sa, sb, maxiter, roots, touch, n, cap, m):
    """Roots of g on [p, q] where g is monotone: one if the end signs differ, none if they agree.
    An end whose value is within rounding of 0 (sign 0) leaves the count 0 or 1 undecided: the
    piece is unresolved (-1). Returns the new count, -1 when unresolved or out of room, -2 when
    the refinement did not converge."""
    if sa == 0 or sb == 0:
        return -1
    if sa == sb:
        return n
    x, ok = _refine(a, L, k, p, q, ORDER_WORTH, sa, maxiter, m)
    if not ok:
        return -2
    return _add_root(x, CROSSING, roots, touch, n, cap)


@njit(cache=True, nogil=True)
def _cell_roots(a, L, u0, u1, touch_tol, maxcells, maxiter, roots, touch, cap):
    """Every root of the worth in [u0, u1], each certified (see :func:`cell_roots`).

    Returns (count, flag): flag 0 resolved, 1 unresolved (a cluster narrower than the cell
    width limit, too many cells or roots), 2 a refinement did not converge.
    """
    m = np.empty(2 * _NMOM)
    ma = np.empty(2 * _NMOM)
    mb = np.empty(2 * _NMOM)
    cerr = (2.0 * L + 80.0) * _EPS
    grow = 1.0 + cerr                               # rounding of the bounds B_j themselves
    stack_p = np.empty(256)
    stack_q = np.empty(256)
    top = 0
    stack_p[0] = u0
    stack_q[0] = u1
    top = 1
    n = 0
    cells = 0
    while top > 0:
        top -= 1
        p = stack_p[top]
        q = stack_q[top]
        cells += 1
        h = q - p
        k = L if p + q < 0.0 else 0
        _moments(a, L, k, p, ma)
        _moments(a, L, k, q, mb)
        s0a = _certain_sign(ma[0], cerr * ma[4])
        s0b = _certain_sign(mb[0], cerr * mb[4])
        s1a = _certain_sign(ma[1], cerr * ma[5])
        s1b = _certain_sign(mb[1], cerr * mb[5])
        s2a = _certain_sign(ma[2], cerr * ma[6])
        s2b = _certain_sign(mb[2], cerr * mb[6])
        B1 = max(ma[5], mb[5]) * grow
        B2 = max(ma[6], mb[6]) * grow
        B3 = max(ma[7], mb[7]) * grow
        # (A) no root: g keeps one sign. |g| >= each end's value minus B1 times the distance to it,
        # and differs from the chord by at most B2 h^2 / 8.
        if s0a != 0 and s0a == s0b:
            la = abs(ma[0]) - cerr * ma[4]
            lb = abs(mb[0]) - cerr * mb[4]
            if la + lb > B1 * h or min(la, lb) > B2 * h * h / 8.0:
                continue
        # (B) g' keeps one sign: g monotone, at most one root
        mono = False
        if s1a != 0 and s1a == s1b:
            la = abs(ma[1]) - cerr * ma[5]
            lb = abs(mb[1]) - cerr * mb[5]
            mono = la + lb > B2 * h or min(la, lb) > B3 * h * h / 8.0
        if mono:
            n = _monotone_piece(a, L, k, p, q, s0a, s0b, maxiter, roots, touch, n, cap, m)
            if n < 0:
                return 0, (1 if n == -1 else 2)
            continue
        # (C) g'' keeps one sign: g' monotone with one root u* here (it changes sign), so g is
        # monotone on [p, u*] and on [u*, q]: at most two roots, found piece by piece
        if s2a != 0 and s2a == s2b and s1a != 0 and s1b != 0 and s1a != s1b:
            la = abs(ma[2]) - cerr * ma[6]
            lb = abs(mb[2]) - cerr * mb[6]
            if la + lb > B3 * h:
                us, ok = _refine(a, L, k, p, q, ORDER_SLOPE, s1a, maxiter, m)
                if not ok:
                    return 0, 2
                _moments(a, L, k, us, m)
                ss = _certain_sign(m[0], cerr * m[4])
                if s0a != 0 and s0a == s0b and (ss == 0 or (ss == s0a and abs(m[0]) <= touch_tol * m[4])):
                    # the worth reaches zero (to rounding, or within touch_tol) without crossing:
                    # a touching (double) root at the extremum u*
                    n = _add_root(us, TOUCHING, roots, touch, n, cap)
                    if n < 0:
                        return 0, 1
                    continue
                n = _monotone_piece(a, L, k, p, us, s0a, ss, maxiter, roots, touch, n, cap, m)
                if n >= 0:
                    n = _monotone_piece(a, L, k, us, q, ss, s0b, maxiter, roots, touch, n, cap, m)
                if n < 0:
                    return 0, (1 if n == -1 else 2)
                continue
        # otherwise split the cell in two
        if h <= 64.0 * _EPS * (1.0 + abs(p)) or cells >= maxcells or top + 2 > stack_p.size:
            return 0, 1
        mid = 0.5 * (p + q)
        stack_p[top] = mid
        stack_q[top] = q
        stack_p[top + 1] = p
        stack_q[top + 1] = mid
        top += 2
    # every root must zero the worth to ROOT_TOL (or touch_tol for a touching root)
    for i in range(n):
        kk = L if roots[i] < 0.0 else 0
        _moments(a, L, kk, roots[i], m)
        if abs(m[0]) > max(ROOT_TOL, touch_tol if touch[i] else 0.0) * m[4]:
            return 0, 2
    return n, 0


@njit(cache=True, nogil=True)
def _cells_kernel(A, last, rows, u0, u1, touch_tol, maxcells, maxiter, roots, touch, count, flag):
    for j in range(rows.size):
        r = rows[j]
        n, f = _cell_roots(A[r], last[r], u0[j], u1[j], touch_tol, maxcells, maxiter, roots[j], touch[j],
                           roots.shape[1])
        count[j] = n
        flag[j] = f


def cell_roots(amounts, last, rows, u0, u1, touch_tol=1e-12, cap=8, maxcells=4000, maxiter=_MAXITER, *,
               compiled: bool | None = None):
    """Every root of the worth of ``amounts[rows[j]]`` in the cell [u0[j], u1[j]] of u = log(1 + r).

    Each root is certified: the cell is split until, on each piece, one of these holds (bounds
    from the magnitudes of the terms, see ``_moments``, with the rounding error of every computed
    value allowed for): (A) the worth keeps one sign, so no root; (B) its derivative keeps one
    sign, so one root when the end values differ in sign, none when they agree; (C) its second
    derivative keeps one sign, so the derivative has one root u*, and the two pieces either side
    of u* are case (B). A piece narrower than 64 eps (1 + |u|) that fits none of them (a cluster of
    three or more roots, a root of multiplicity three or more, or worth at the rounding level
    over the whole piece) leaves the cell *unresolved*. Roots are refined by safeguarded Newton
    to a bracket of 4 eps (1 + |u|) or worth at the rounding level, and checked:
    |worth| <= ``ROOT_TOL`` sum |terms|. Where the worth reaches zero at u* (to rounding, or
    within ``touch_tol`` sum |terms|) without changing sign, u* is one *touching* root.

    Returns
    -------
    roots (J, cap) NaN-padded, touching (J, cap) bool, count (J,), flag (J,) int8:
    0 resolved, 1 unresolved, 2 not converged (count 0 and no roots where the flag is set).

    References
    ----------
    Rolle's theorem and the interpolation-error bound |g - chord| <= max|g''| h^2 / 8 (common
    practice); the certification is in the spirit of interval Newton / Krawczyk exclusion tests,
    R. E. Moore, R. B. Kearfott, M. J. Cloud, Introduction to Interval Analysis, SIAM, 2009
    (from memory).

    ``compiled``: None (default) runs the Numba kernel above ``NUMPY_MAX_CELLS`` cells and
    :func:`ratescape.evaluate.irr_numpy.cell_roots_numpy` (the same depth-first search in lockstep
    over the cells, the same numbers) up to it.
    """
    A = np.ascontiguousarray(amounts, dtype=float)
    last = np.ascontiguousarray(last, dtype=np.int64)
    rows = np.ascontiguousarray(rows, dtype=np.int64)
    J = rows.size
    if not _use_compiled(J, NUMPY_MAX_CELLS, compiled):
        roots, touch, count, flag = cell_roots_numpy(A, last, rows, np.asarray(u0, dtype=float),
                                                     np.asarray(u1, dtype=float), float(touch_tol), int(cap),
                                                     int(maxcells), int(maxiter))
    else:
        roots = np.full((J, cap), np.nan)
        touch = np.zeros((J, cap), dtype=np.bool_)
        count = np.zeros(J, dtype=np.int64)
        flag = np.zeros(J, dtype=np.int8)
        _cells_kernel(A, last, rows, np.ascontiguousarray(u0, dtype=float), np.ascontiguousarray(u1, dtype=float),
                      float(touch_tol), int(maxcells), int(maxiter), roots, touch, count, flag)
    bad = flag != 0
    roots[bad] = np.nan
    touch[bad] = False
    return roots, touch, count, flag


@njit(cache=True, nogil=True)
def _stream_facts(A, sc, sc_cum, last, finite, total_nonzero):
    N, T = A.shape
    for r in range(N):
        changes = 0
        changes_cum = 0
        prev = 0.0          # last non-zero sign seen (0 = none yet)
        prev_cum = 0.0
        cum = 0.0
        lst = 0
        ok = True
        for t in range(T):
            a = A[r, t]
            if not np.isfinite(a):
                ok = False
            cum += a
            if a != 0.0:
                lst = t
                s = 1.0 if a > 0.0 else -1.0
                if prev != 0.0 and s != prev:
                    changes += 1
                prev = s
            if cum != 0.0:
                s = 1.0 if cum > 0.0 else -1.0
                if prev_cum != 0.0 and s != prev_cum:
                    changes_cum += 1
                prev_cum = s
        sc[r] = changes
        sc_cum[r] = changes_cum
        last[r] = lst
        finite[r] = ok
        total_nonzero[r] = cum != 0.0


def stream_facts(amounts, *, compiled: bool | None = None):
    """Per row of (N, T) amounts: sign changes of the non-zero amounts and of their running sums,
    the last non-zero period (0 if none), whether every amount is finite, and whether the total is
    non-zero. One pass per row (the NumPy form needs several full-size temporaries: it runs up to
    ``NUMPY_MAX_FACTS`` rows, or as ``compiled`` says, and then nothing is compiled).
    """
    A = np.ascontiguousarray(amounts, dtype=float)
    if not _use_compiled(A.shape[0], NUMPY_MAX_FACTS, compiled):
        return stream_facts_numpy(A)
    N = A.shape[0]
    sc = np.empty(N, dtype=np.int64)
    sc_cum = np.empty(N, dtype=np.int64)
    last = np.empty(N, dtype=np.int64)
    finite = np.empty(N, dtype=np.bool_)
    total_nonzero = np.empty(N, dtype=np.bool_)
    _stream_facts(A, sc, sc_cum, last, finite, total_nonzero)
    return sc, sc_cum, last, finite, total_nonzero
