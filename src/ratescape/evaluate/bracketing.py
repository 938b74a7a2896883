"""Chandrupatla's bracketing root finder on many independent problems at once (NumPy, lockstep).

Pure: arrays and a callable in, roots out. Used by the IRR's NumPy form
(:mod:`ratescape.evaluate.compiled_numpy`, which must take the compiled loop's steps bit for bit)
and by the indifference frontier (:mod:`ratescape.decide.frontier`).

References
----------
T. R. Chandrupatla, "A new hybrid quadratic/bisection algorithm for finding the zero of a
nonlinear function without using derivatives", Advances in Engineering Software 28(3), 1997,
pp. 145-149, with the steps and tests of ``scipy.optimize.elementwise.find_root`` (SciPy 1.15).
"""
from __future__ import annotations

from collections.abc import Callable

import numpy as np

#: |f| at or below this is a root (SciPy's default ``fatol``: the smallest normal double)
FATOL = 2.2250738585072014e-308


def _larger(a, b):
    """Python's ``max(a, b)`` elementwise (as compiled code evaluates it)."""
    return np.where(b > a, b, a)


def _smaller(a, b):
    return np.where(b < a, b, a)


def chandrupatla(f: Callable[[np.ndarray, np.ndarray], np.ndarray], x1, x2, f1, f2, *, xatol: float,
                 xrtol: float, maxiter: int = 2000) -> np.ndarray:
    """Roots of J problems, problem j bracketed by x1[j] and x2[j] where f takes the values f1[j]
    and f2[j] (opposite signs); NaN where there is no bracket, an end or value is not finite, or
    ``maxiter`` steps did not converge.

    ``f(idx, x)`` gives the function of problems ``idx`` (an index array) at points ``x``; it is
    called with the problems still running only. A problem stops at a point with
    |f| <= :data:`FATOL`, or when its bracket is narrower than |x| xrtol + xatol (the point of
    smaller |f| is returned). Steps: bisection first, then inverse quadratic interpolation where
    the three latest points allow it, else bisection, each step kept 0.5 tol inside the bracket.
    """
    x1 = np.array(x1, dtype=float)
    x2 = np.array(x2, dtype=float)
    f1 = np.array(f1, dtype=float)
    f2 = np.array(f2, dtype=float)
    J = x1.size
    out = np.full(J, np.nan)
    x3, f3 = x2.copy(), f2.copy()
    t = np.full(J, 0.5)
    act = np.arange(J)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for it in range(maxiter):
            if act.size == 0:
                break
            a1, b1, a2, b2 = x1[act], f1[act], x2[act], f2[act]
            first = np.abs(b1) < np.abs(b2)
            xmin = np.where(first, a1, a2)
            fmin = np.where(first, b1, b2)
            hit = np.abs(fmin) <= FATOL
            out[act[hit]] = xmin[hit]
            stop = hit | (np.sign(b1) == np.sign(b2)) | ~(np.isfinite(a1) & np.isfinite(a2)) \
                | (np.isnan(b1) & np.isnan(b2))
            dx = np.abs(a2 - a1)
            tol = np.abs(xmin) * xrtol + xatol
            close = ~stop & (dx < tol)
            out[act[close]] = xmin[close]
            go = ~stop & ~close
            act, dx, tol = act[go], dx[go], tol[go]
            if act.size == 0:
                break
            a1, b1, a2, b2, a3, b3 = x1[act], f1[act], x2[act], f2[act], x3[act], f3[act]
            if it > 0:                                   # the first step bisects (t = 0.5)
                xi1 = (a1 - a2) / (a3 - a2)
                phi1 = (b1 - b2) / (b3 - b2)
                alpha = (a3 - a1) / (a2 - a1)
                iqi = ((1.0 - np.sqrt(1.0 - xi1)) < phi1) & (phi1 < np.sqrt(xi1))
                tt = np.where(iqi, b1 / (b1 - b2) * b3 / (b3 - b2) - alpha * b1 / (b3 - b1) * b2 / (b2 - b3), 0.5)
                tl = 0.5 * tol / dx
                t[act] = _smaller(_larger(tt, tl), 1.0 - tl)
            x = a1 + t[act] * (a2 - a1)
            fx = np.asarray(f(act, x), dtype=float)
            same = np.sign(fx) == np.sign(b1)
            x3[act] = np.where(same, a1, a2)
            f3[act] = np.where(same, b1, b2)
            x2[act] = np.where(same, a2, a1)
            f2[act] = np.where(same, b2, b1)
            x1[act], f1[act] = x, fx
    return out


__all__ = ["FATOL", "chandrupatla"]
