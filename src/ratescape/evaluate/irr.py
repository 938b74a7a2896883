"""Internal rate of return with every root in a search range, vectorised over rows.

NumPy, plus one compiled loop. A cash-flow stream with more than one sign change can have no
IRR or several; this module never silently picks one. :func:`irr_roots`
returns every root it finds in a documented range together with a root
count, a status code, the Descartes sign-change count and the Norstrom
uniqueness flag; :func:`irr` returns a rate only where exactly one root
exists.

Method
------
Write u = log(1 + r). The present worth PW(u) = sum_t A_t e^(-u t) is
evaluated for all rows on a grid of ``grid_points`` values of u, evenly
spaced between log(1 + low) and log(1 + high), with one matrix product
(rows x periods) @ (periods x grid). For u < 0 each column is multiplied by
e^(u L) (L the last non-zero period; same roots and multiplicities), so no
factor exceeds 1 and nothing overflows. The same product on |A_t| gives the
rounding scale S(u) = sum_t |A_t| e^(-u t) (scaled alike) and a bound B2 on
|PW''| over each cell. A cell is *proved* free of roots when PW has one sign
at both ends and min |PW(end)| - (rounding error) > B2 h^2 / 8 (the chord
differs from PW by at most that). Every other cell goes to a compiled,
certifying search (:func:`ratescape.evaluate.irr_kernels.cell_roots`) that splits
it until, on each piece, PW or PW' or PW'' keeps one sign (tests from the
same magnitude bounds, rounding allowed for): no root; one root where the
ends differ in sign (PW monotone); or at most two, either side of the one
extremum u*. No root is left unproved: a piece that fits none of these once
narrower than 64 eps (1 + |u|) makes the row ``unresolved``.

Rows whose amounts change sign exactly once (the conventional investment) skip the grid: by
Descartes' rule they have exactly one simple root r > -1, inside [low, high] iff PW differs in sign
at the two ends, and a compiled safeguarded Newton iteration on the Horner form finds it row by
row (:func:`ratescape.evaluate.irr_kernels.single_sign_change_solve`).

Tolerance
---------
Every root is refined by safeguarded Newton (bisection when a step leaves
its bracket or exceeds half the step before last) until PW is at its
rounding level or the bracket is below 4 eps (1 + |u|), and is then checked:
|PW(r)| <= 1e-10 * sum_t |A_t| (1+r)^-t at u = log(1 + r)
(``irr_kernels.ROOT_TOL``; a touching root: max(1e-10, touch_tol)). A root
that fails the check, or an iteration limit reached, gives the row the
status ``unresolved`` and no root: never an unconverged value. (The
returned float r carries 1 + r only to eps / (1 + r) relative, which
matters only for r within ~1e-6 of -100 %.)

Limits: roots outside [low, high] are not reported. Where PW reaches zero at
an extremum without a certified sign change (a double root, or two roots
whose PW dips between them by less than its rounding error or
``touch_tol`` * S, about 1e-6 apart in u or closer) one *touching* root is
reported. Three or more roots at one point (to ~64 eps), a triple root, or
a flat cluster in which PW stays within its rounding error, are
``unresolved``. End-of-period amounts and per-period rates (as
numpy_financial.irr).

References
----------
J. H. Lorie, L. J. Savage, "Three Problems in Rationing Capital", Journal of
Business 28(4), 1955, 229-239 (multiple IRRs).
C. J. Norstrom, "A Sufficient Condition for a Unique Nonnegative Internal
Rate of Return", Journal of Financial and Quantitative Analysis 7(3), 1972,
1835-1839 (from memory).
R. Descartes' rule of signs: the number of roots r > -1 is at most the
number of sign changes of the amounts and has the same parity (common
practice).
"""
from __future__ import annotations

from enum import IntEnum
from typing import NamedTuple

import os

import numpy as np

__all__ = ["IrrStatus", "IrrResult", "irr_roots", "irr", "sign_changes"]

_EPS = np.finfo(float).eps
_CHUNK_ELEMENTS = 2_000_000  # rows x grid points per matrix product


class IrrStatus(IntEnum):
    """Status code of one row of :func:`irr_roots` (stored as int8).

    UNIQUE (0)          exactly one root in [low, high]; ``irr`` returns it
    NONE (1)            the amounts change sign but no root lies in [low, high]
    MULTIPLE (2)        two or more roots in [low, high]; ``irr`` returns NaN
    NO_SIGN_CHANGE (3)  all non-zero amounts have one sign: no IRR at any rate
    ZERO_FLOWS (4)      every amount is zero: PW = 0 at every rate
    NONFINITE (5)       an amount is NaN or infinite
    UNRESOLVED (6)      a root could not be certified or refined to tolerance (a cluster of three
                        or more roots, or a root of multiplicity three or more, within about
                        64 eps of each other in log(1 + r); or an iteration limit reached): no
                        roots are reported (count 0) and ``irr`` returns NaN, rather than a guess
    """

    UNIQUE = 0
    NONE = 1
    MULTIPLE = 2
    NO_SIGN_CHANGE = 3
    ZERO_FLOWS = 4
    NONFINITE = 5
    UNRESOLVED = 6


_STATUS_LABELS = np.array([s.name.lower() for s in IrrStatus])
#: Status names by code, for storing and reading the int8 codes as text.
STATUS_LABELS = _STATUS_LABELS


class IrrResult(NamedTuple):
    """Every IRR found per row, with counts and flags.

    Attributes
    ----------
    roots : ndarray, shape (..., K) [fraction per period]
        Roots sorted ascending, NaN-padded; K = max(1, largest count).
    count : ndarray of int, shape (...)
        Number of roots found in [low, high] (a touching root counts once).
    status : ndarray of int8, shape (...)
        :class:`IrrStatus` codes; ``labels`` gives their names.
    sign_changes : ndarray of int, shape (...)
        Sign changes of the non-zero amounts (Descartes: upper bound on the
        number of roots r > -1, same parity).
    norstrom : ndarray of bool, shape (...)
        True where the cumulative amounts change sign exactly once and their
        total is non-zero: then exactly one root r > 0 exists (Norstrom 1972).
    touching : ndarray of bool, shape (...)
        True where a root is a touching (double) root: PW reaches zero
        without changing sign.
    """

    roots: np.ndarray
    count: np.ndarray
    status: np.ndarray
    sign_changes: np.ndarray
    norstrom: np.ndarray
    touching: np.ndarray

    @property
    def labels(self):
        """Status names ("unique", "none", "multiple", ...), shape (...); str for one row."""
        out = _STATUS_LABELS[np.asarray(self.status, dtype=int)]
        return str(out) if out.ndim == 0 else out


def sign_changes(amounts):
    """Number of sign changes in each stream, zeros skipped.

    Parameters
    ----------
    amounts : array_like, shape (..., T)

    Returns
    -------
    int or ndarray of int, shape (...)

    Examples
    --------
    >>> sign_changes([-100, 0, 50, -10, 0])
    2
    """
    a = np.asarray(amounts, dtype=float)
    if a.ndim == 0:
        raise ValueError(f"amounts must have a period axis (last), got shape {a.shape}")
    out = _sign_changes(a)
    return int(out) if out.ndim == 0 else out


def _sign_changes(a):
    lead = a.shape[:-1]
    s = np.sign(a.reshape(-1, a.shape[-1]))
    out = np.count_nonzero(s[..., 1:] * s[..., :-1] < 0, axis=-1)
    has_zero = (s == 0).any(axis=-1)
    if has_zero.any():  # skip zeros: carry the last non-zero sign forward
        sz = s[has_zero]
        T = a.shape[-1]
        idx = np.where(sz != 0, np.arange(T), 0)
        idx = np.maximum.accumulate(idx, axis=-1)
        sf = np.take_along_axis(sz, idx, axis=-1)
        out[has_zero] = np.count_nonzero(sf[..., 1:] * sf[..., :-1] < 0, axis=-1)
    return out.reshape(lead)


def _check_args(amounts, low, high, grid_points):
    a = np.asarray(amounts, dtype=float)
    if a.ndim == 0 or a.shape[-1] < 1:
        raise ValueError(
            f"amounts must have a period axis (last) with at least 1 period, got shape {a.shape}"
        )
    low = float(low)
    high = float(high)
    if not (np.isfinite(low) and np.isfinite(high) and -1.0 < low < high):
        raise ValueError(f"need -1 < low < high (finite), got low={low!r}, high={high!r}")
    if grid_points is None:
        grid_points = max(256, 4 * a.shape[-1])
    if int(grid_points) != grid_points or grid_points < 8:
        raise ValueError(f"grid_points must be an integer >= 8, got {grid_points!r}")
    return a, low, high, int(grid_points)


def _split(n, min_rows):
    """Row cuts for up to four threads (the kernels release the GIL), one block when small."""
    workers = max(1, min(4, os.cpu_count() or 1, n // min_rows))
    return np.linspace(0, n, workers + 1).astype(int)


def _single_roots_threaded(A, last, u_low, u_high):
    """:func:`ratescape.evaluate.irr_kernels.single_sign_change_solve` over row blocks on all cores."""
    from concurrent.futures import ThreadPoolExecutor

    from .irr_kernels import single_sign_change_solve
    cuts = _split(A.shape[0], 20_000)
    if cuts.size == 2:
        return single_sign_change_solve(A, last, u_low, u_high)
    with ThreadPoolExecutor(max_workers=cuts.size - 1) as pool:
        parts = list(pool.map(lambda ab: single_sign_change_solve(A[ab[0]:ab[1]], last[ab[0]:ab[1]], u_low, u_high),
                              zip(cuts[:-1], cuts[1:])))
    return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])


def _cells_threaded(A, last, rows, u0, u1, touch_tol):
    """:func:`ratescape.evaluate.irr_kernels.cell_roots` over blocks of cells on all cores."""
    from concurrent.futures import ThreadPoolExecutor

    from .irr_kernels import cell_roots
    if rows.size == 0:  # (no call: loading the compiled kernel costs ~0.1 s the first time)
        return np.empty((0, 1)), np.empty((0, 1), bool), np.empty(0, np.int64), np.empty(0, np.int8)
    cuts = _split(rows.size, 5_000)
    if cuts.size == 2:
        return cell_roots(A, last, rows, u0, u1, touch_tol)
    with ThreadPoolExecutor(max_workers=cuts.size - 1) as pool:
        parts = list(pool.map(lambda ab: cell_roots(A, last, rows[ab[0]:ab[1]], u0[ab[0]:ab[1]], u1[ab[0]:ab[1]],
                                                    touch_tol), zip(cuts[:-1], cuts[1:])))
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(4))


def irr_roots(amounts, *, low=-0.99, high=10.0, grid_points=None, touch_tol=1e-12):
    """Every internal rate of return in [low, high] of each cash-flow stream.

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]
        Cash flows, last axis the period t = 0 .. T-1 (end of period).
    low, high : float, keyword-only [fraction per period]
        Search range of the rate, -1 < low < high. Default -0.99 .. 10
        (-99 % .. 1000 %).
    grid_points : int, keyword-only
        Points of the search grid in log(1 + r); default max(256, 4 T).
    touch_tol : float, keyword-only
        At an extremum of PW with no certified sign change, a touching
        (double) root is reported when |PW| <= touch_tol * sum |A_t| (1+r)^-t
        there (or PW is within its rounding error).

    Returns
    -------
    IrrResult
        ``roots`` (..., K), ``count``, ``status``, ``sign_changes``,
        ``norstrom``, ``touching`` (...). For 1-D ``amounts`` the per-row
        fields are Python ints / bools and ``roots`` has shape (K,).

    Warnings
    --------
    Only roots inside [low, high] are reported. None in it is missed: each
    grid cell is proved root-free or searched until each root is certified
    (see module notes); where that fails the row's status is ``unresolved``
    and it lists no roots.

    Each reported root r satisfies |PW(r)| <= 1e-10 * sum_t |A_t| (1+r)^-t
    (a touching root: max(1e-10, touch_tol)), checked at u = log(1 + r).

    Notes
    -----
    The IRR r solves sum_t A_t (1 + r)^-t = 0. See the module docstring for
    the method.

    References
    ----------
    Lorie & Savage (1955); Norstrom (1972); see module docstring.

    Examples
    --------
    >>> res = irr_roots([-1600, 10000, -10000])
    >>> res.roots.round(12).tolist(), res.count, res.labels
    ([0.25, 4.0], 2, 'multiple')
    >>> irr_roots([-1000, 2500, -2000]).labels
    'none'
    """
    a, low, high, G = _check_args(amounts, low, high, grid_points)
    lead = a.shape[:-1]
    T = a.shape[-1]
    A = a.reshape(-1, T)
    P = A.shape[0]

    from .irr_kernels import ROOT_FOUND, ROOT_NOT_CONVERGED, stream_facts
    sc, sc_cum, last, finite, total_nonzero = stream_facts(A)       # one compiled pass per row
    if not finite.all():
        A = np.where(finite[:, None], A, 0.0)
        sc = np.where(finite, sc, 0)
        last = np.where(finite, last, 0)
    zero_rows = finite & (sc == 0) & ~(A[np.arange(P), last] != 0)
    norstrom = (sc_cum == 1) & total_nonzero & finite

    t = np.arange(T, dtype=float)
    u = np.linspace(np.log1p(low), np.log1p(high), G)

    # only rows that can have a root need the grid
    search = np.flatnonzero(finite & (sc > 0))
    # Rows whose amounts change sign once have exactly one root r > -1 (Descartes' rule of signs),
    # simple and never touching: it is in range iff PW differs in sign at the ends, and a compiled
    # safeguarded Newton finds it row by row (evaluate/compiled.py), with no grid.
    single = search[sc[search] == 1]
    single_u, single_code = _single_roots_threaded(A[single], last[single], u[0], u[-1])
    search = search[sc[search] != 1]
    unresolved = np.zeros(P, bool)
    unresolved[single[single_code == ROOT_NOT_CONVERGED]] = True
    single_found = single_code == ROOT_FOUND
    # the other rows, grouped by their last non-zero period L: each group's factors are scaled by
    # e^(L min(u, 0)) so they stay <= 1 without underflowing a short stream to zero. A cell of the
    # grid goes to the certifying kernel unless it is PROVED free of roots here: both ends of one
    # sign and |PW| at each, less its rounding error, above B2 h^2 / 8, where B2 bounds |PW''| on
    # the cell (the chord differs from PW by at most that: interpolation error, common practice).
    h = u[1] - u[0]
    cell_rows, cell_g = [], []
    blocks = []
    for L in np.unique(last[search]):  # a loop over distinct horizons, not over rows
        group = search[last[search] == L]
        tt = t[:L + 1]
        D = np.exp(-np.outer(tt, u) + L * np.minimum(u, 0.0))  # (L+1, G), entries <= 1
        # B2 per cell: sum |A_t| d_t^2 e^(u d_t) at the end where it is largest, d_t = k - t with
        # k = L left of u = 0 and k = 0 right of it (the same scale as D); the cell across u = 0
        # (two scales) is never excluded here
        left = u[1:] <= 0.0
        d = np.where(left[None, :], L - tt[:, None], -tt[:, None])          # (L+1, G-1)
        u_big = np.where(left, u[1:], u[:-1])
        W2 = d * d * np.exp(d * u_big[None, :])
        W = np.concatenate([D, W2 * (1.0 + 1e-12)], axis=1)
        step = max(1, _CHUNK_ELEMENTS // (2 * u.size))
        blocks += [(group[k:k + step], L, D, W) for k in range(0, group.size, step)]
    straddle = (u[:-1] < 0.0) & (u[1:] > 0.0)
    for rows, L, D, W in blocks:  # loop over blocks of rows, not rows
        Ar = A[rows, :L + 1]
        F = Ar @ D
        S = np.abs(Ar) @ W
        M0, B2 = S[:, :G], S[:, G:]
        err = (2.0 * L + 80.0) * _EPS * M0        # bound on the rounding error of F
        neg = F < 0
        same = neg[:, :-1] == neg[:, 1:]
        margin = np.abs(F) - err
        clear = same & (np.minimum(margin[:, :-1], margin[:, 1:]) > B2 * (h * h / 8.0)) & ~straddle
        k1 = np.flatnonzero(~clear)
        cell_rows.append(rows[k1 // (G - 1)])
        cell_g.append(k1 % (G - 1))

    def cat(parts, dtype=float):
        return np.concatenate(parts) if parts else np.empty(0, dtype=dtype)

    cell_rows = cat(cell_rows, int)
    cell_g = cat(cell_g, int)
    c_roots, c_touch, c_count, c_flag = _cells_threaded(A, last, cell_rows, u[cell_g], u[cell_g + 1], touch_tol)
    unresolved[cell_rows[c_flag != 0]] = True
    have = ~np.isnan(c_roots)
    all_rows = np.concatenate([single[single_found], np.broadcast_to(cell_rows[:, None], have.shape)[have]])
    all_u = np.concatenate([single_u[single_found], c_roots[have]])
    all_touch = np.concatenate([np.zeros(int(single_found.sum()), bool), c_touch[have]])
    keep = ~unresolved[all_rows]  # an unresolved row reports no roots, only its status
    all_rows, all_u, all_touch = all_rows[keep], all_u[keep], all_touch[keep]
    order = np.lexsort((all_u, all_rows))
    all_rows, all_u, all_touch = all_rows[order], all_u[order], all_touch[order]
    if all_rows.size > 1:  # a root at a grid point shared by two cells is listed by both
        dup = np.zeros(all_rows.size, bool)
        dup[1:] = (all_rows[1:] == all_rows[:-1]) & (
            np.abs(all_u[1:] - all_u[:-1]) <= 1e-12 * (1.0 + np.abs(all_u[1:]))
        )
        all_touch[np.flatnonzero(dup) - 1] |= all_touch[dup]
        all_rows, all_u, all_touch = all_rows[~dup], all_u[~dup], all_touch[~dup]

    count = np.bincount(all_rows, minlength=P)
    K = max(1, int(count.max()) if P else 1)
    first = np.concatenate([[0], np.cumsum(count)[:-1]]) if P else np.empty(0, int)
    pos = np.arange(all_rows.size) - first[all_rows]
    roots = np.full((P, K), np.nan)
    roots[all_rows, pos] = np.expm1(all_u)
    touching = np.zeros(P, bool)
    touching[all_rows[all_touch]] = True

    status = np.where(count == 1, IrrStatus.UNIQUE,
                      np.where(count > 1, IrrStatus.MULTIPLE, IrrStatus.NONE))
    status = np.where(sc == 0, IrrStatus.NO_SIGN_CHANGE, status)
    status = np.where(zero_rows, IrrStatus.ZERO_FLOWS, status)
    status = np.where(~finite, IrrStatus.NONFINITE, status)
    status = np.where(unresolved, IrrStatus.UNRESOLVED, status).astype(np.int8)

    if not lead:
        return IrrResult(roots[0], int(count[0]), int(status[0]), int(sc[0]),
                         bool(norstrom[0]), bool(touching[0]))
    return IrrResult(
        roots.reshape(lead + (K,)),
        count.reshape(lead),
        status.reshape(lead),
        sc.reshape(lead),
        norstrom.reshape(lead),
        touching.reshape(lead),
    )


def irr(amounts, *, low=-0.99, high=10.0, grid_points=None, touch_tol=1e-12):
    """Internal rate of return of each stream where it is unique in [low, high].

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]
        Cash flows, last axis the period t = 0 .. T-1 (end of period).
    low, high, grid_points, touch_tol : keyword-only
        As :func:`irr_roots`.

    Returns
    -------
    float or ndarray, shape (...) [fraction per period]
        The root where exactly one root lies in [low, high]; NaN where there
        is none **or several**. Use :func:`irr_roots` for every root, the
        count and the status of each row.

    Warnings
    --------
    Unlike numpy_financial.irr this never picks one of several roots.

    Notes
    -----
    sum_t A_t (1 + r)^-t = 0.

    Examples
    --------
    >>> round(irr([-100, 39, 59, 55, 20]), 10)
    0.2809484212
    >>> irr([-1600, 10000, -10000])
    nan
    """
    res = irr_roots(amounts, low=low, high=high, grid_points=grid_points, touch_tol=touch_tol)
    if np.ndim(res.count) == 0:
        return float(res.roots[0]) if res.count == 1 else float("nan")
    return np.where(res.count == 1, res.roots[..., 0], np.nan)
