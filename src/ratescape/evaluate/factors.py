"""Discrete compound-interest factors and life-cycle-cost present-value factors.

Pure numpy. Every factor broadcasts over its rate and period arguments; a
scalar call returns a Python float. The limits i -> 0 (and g -> i for the
geometric gradient) are not special cases bolted on: each factor is written
in ``log1p``/``expm1`` form with series for the cancelling parts, so it is
exact at i = 0 and accurate to a few units in the last place for tiny
rates such as 1e-12.

Trade notation: (X/Y, i, n) is "find X given Y" at rate i per period over n
periods, end-of-period cash flows.

==================  ==================================  ===========================
function            factor                              i = 0 limit
==================  ==================================  ===========================
f_given_p           (F/P) = (1+i)^n                     1
p_given_f           (P/F) = (1+i)^-n                    1
f_given_a           (F/A) = ((1+i)^n - 1)/i             n
p_given_a           (P/A) = (1 - (1+i)^-n)/i            n
a_given_f           (A/F) = 1/(F/A)                     1/n
a_given_p           (A/P) = 1/(P/A)                     1/n
p_given_g           (P/G) = ((1+i)^n - 1 - n i)/        n(n-1)/2
                    (i^2 (1+i)^n)
a_given_g           (A/G) = 1/i - n/((1+i)^n - 1)       (n-1)/2
p_given_a1_geometric (P/A1,g,i,n) =                      n/(1+i) when g = i
                    (1 - ((1+g)/(1+i))^n)/(i - g)
==================  ==================================  ===========================

References
----------
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson,
ch. "Money-Time Relationships and Equivalence" (factor definitions).
L. Blank, A. Tarquin, Engineering Economy, McGraw-Hill, ch. "Factors: How
Time and Interest Affect Money" (geometric gradient and the g = i case).
S. K. Fuller, S. R. Petersen, Life-Cycle Costing Manual for the Federal
Energy Management Program, NIST Handbook 135, U.S. Department of Commerce,
1995 (SPV, UPV, UPV*).
"""
from __future__ import annotations

import numpy as np

__all__ = [
    "f_given_p",
    "p_given_f",
    "f_given_a",
    "p_given_a",
    "a_given_f",
    "a_given_p",
    "p_given_g",
    "a_given_g",
    "p_given_a1_geometric",
    "interest_factor",
    "spv",
    "upv",
    "upv_star",
    "FACTOR_NAMES",
]

# ---------------------------------------------------------------- helpers --

# Coefficients of the series used where the closed forms cancel.
#   h(x) = (1 - e^-x (1 + x)) / x^2 = sum_j (-1)^j (j+1)/(j+2)! x^j,  |x| <= 1
#   q2(i) = (log1p(i) - i) / i^2     = sum_k (-1)^(k+1) i^(k-2)/k,    |i| <= 1/2
def _h_coefficients(m=26):
    out = []
    fact = 2.0  # (j+2)! for j = 0
    for j in range(m):
        if j > 0:
            fact *= j + 2
        out.append((-1.0) ** j * (j + 1) / fact)
    return np.array(out)


_H_COEF = _h_coefficients()
_Q2_COEF = np.array([(-1.0) ** (k + 1) / k for k in range(2, 64)])


def _horner(coef, x):
    acc = np.zeros_like(x)
    for c in coef[::-1]:
        acc = acc * x + c
    return acc


def _log1p_ratio(i):
    """log1p(i)/i, exactly 1 at i = 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log1p(i) / i
    return np.where(i == 0.0, 1.0, out)


def _expm1_ratio(x):
    """expm1(x)/x, exactly 1 at x = 0 (inf for huge positive x)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        out = np.expm1(x) / x
    return np.where(x == 0.0, 1.0, out)


def _h(x):
    """(1 - e^-x (1 + x)) / x^2 without cancellation; 1/2 at x = 0."""
    small = np.abs(x) <= 1.0
    xs = np.where(small, x, 0.0)
    series = _horner(_H_COEF, xs)
    xl = np.where(small, 2.0, x)
    with np.errstate(over="ignore", invalid="ignore"):
        pos = (-np.expm1(-xl) - xl * np.exp(-xl)) / (xl * xl)
        neg = (1.0 + np.exp(-xl) * (-xl - 1.0)) / (xl * xl)
    direct = np.where(xl > 0, pos, neg)
    return np.where(small, series, direct)


def _q2(i):
    """(log1p(i) - i)/i^2 without cancellation; -1/2 at i = 0."""
    small = np.abs(i) <= 0.5
    iss = np.where(small, i, 0.0)
    series = _horner(_Q2_COEF, iss)
    il = np.where(small, 1.0, i)
    direct = (np.log1p(il) - il) / (il * il)
    return np.where(small, series, direct)


def _rate(x, name):
    arr = np.asarray(x, dtype=float)
    bad = ~np.isfinite(arr)
    if np.any(bad):
        raise ValueError(f"{name} must be finite, got {arr[bad].ravel()[0]!r}")
    if np.any(arr <= -1.0):
        raise ValueError(
            f"{name} must be greater than -1 (-100 %), got {arr[arr <= -1.0].ravel()[0]!r}"
        )
    return arr


def _periods(n, name="n", positive=False):
    arr = np.asarray(n, dtype=float)
    bad = ~np.isfinite(arr) | (arr <= 0 if positive else arr < 0)
    if np.any(bad):
        need = "> 0" if positive else ">= 0"
        raise ValueError(f"{name} must be finite and {need}, got {arr[bad].ravel()[0]!r}")
    return arr


def _out(a):
    a = np.asarray(a, dtype=float)
    return float(a) if a.ndim == 0 else a


def _pa(i, n):
    """(P/A) on validated arrays: n * (log1p(i)/i) * (1 - e^-x)/x, x = n log1p(i)."""
    x = n * np.log1p(i)
    return n * _log1p_ratio(i) * _expm1_ratio(-x)


def _fa(i, n):
    x = n * np.log1p(i)
    return n * _log1p_ratio(i) * _expm1_ratio(x)


def _pg(i, n):
    """(P/G) = n^2 (L/i)^2 h(x) + n q2(i) e^-x with L = log1p(i), x = n L."""
    lg = np.log1p(i)
    x = n * lg
    ratio = _log1p_ratio(i)
    with np.errstate(over="ignore", invalid="ignore"):
        return n * n * ratio * ratio * _h(x) + n * _q2(i) * np.exp(-x)


# ---------------------------------------------------------------- factors --


def f_given_p(i, n):
    """Single-payment compound-amount factor (F/P, i, n) = (1 + i)^n.

    Parameters
    ----------
    i : array_like [fraction per period]
        Interest rate per period, > -1.
    n : array_like [periods]
        Number of periods, >= 0 (need not be an integer). Broadcasts with `i`.

    Returns
    -------
    float or ndarray, shape ``broadcast(i, n)``

    Notes
    -----
    Computed as exp(n log1p(i)).

    References
    ----------
    W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson.

    Examples
    --------
    >>> round(f_given_p(0.10, 5), 4)
    1.6105
    """
    i = _rate(i, "i")
    n = _periods(n)
    with np.errstate(over="ignore"):
        return _out(np.exp(n * np.log1p(i)))


def p_given_f(i, n):
    """Single-payment present-worth factor (P/F, i, n) = (1 + i)^-n.

    Parameters and returns as :func:`f_given_p`.

    Examples
    --------
    >>> round(p_given_f(0.10, 5), 4)
    0.6209
    """
    i = _rate(i, "i")
    n = _periods(n)
    with np.errstate(over="ignore"):
        return _out(np.exp(-n * np.log1p(i)))


def f_given_a(i, n):
    """Uniform-series compound-amount factor (F/A, i, n) = ((1+i)^n - 1)/i.

    Parameters and returns as :func:`f_given_p`.

    Warnings
    --------
    End-of-period payments: the first of n payments falls at the end of
    period 1, the last at the end of period n (the future-worth date).

    Notes
    -----
    Written as n (log1p(i)/i) (expm1(x)/x) with x = n log1p(i); equals n
    exactly at i = 0.

    Examples
    --------
    >>> round(f_given_a(0.10, 5), 4)
    6.1051
    >>> f_given_a(0.0, 5)
    5.0
    """
    i = _rate(i, "i")
    n = _periods(n)
    return _out(_fa(i, n))


def p_given_a(i, n):
    """Uniform-series present-worth factor (P/A, i, n) = (1 - (1+i)^-n)/i.

    Parameters and returns as :func:`f_given_p`.

    Warnings
    --------
    End-of-period payments, first one at the end of period 1.

    Notes
    -----
    Written as n (log1p(i)/i) (-expm1(-x)/x) with x = n log1p(i); equals n
    exactly at i = 0.

    Examples
    --------
    >>> round(p_given_a(0.10, 5), 4)
    3.7908
    >>> p_given_a(0.0, 5)
    5.0
    """
    i = _rate(i, "i")
    n = _periods(n)
    return _out(_pa(i, n))


def a_given_p(i, n):
    """Capital-recovery factor (A/P, i, n) = i (1+i)^n / ((1+i)^n - 1).

    Parameters
    ----------
    i : array_like [fraction per period]
        Interest rate per period, > -1.
    n : array_like [periods]
        Number of periods, > 0. Broadcasts with `i`.

    Returns
    -------
    float or ndarray, shape ``broadcast(i, n)``

    Notes
    -----
    The reciprocal of (P/A, i, n); equals 1/n exactly at i = 0.
    (A/P) = (A/F) + i.

    Examples
    --------
    >>> round(a_given_p(0.10, 5), 4)
    0.2638
    """
    i = _rate(i, "i")
    n = _periods(n, positive=True)
    return _out(1.0 / _pa(i, n))


def a_given_f(i, n):
    """Sinking-fund factor (A/F, i, n) = i / ((1+i)^n - 1).

    Parameters and returns as :func:`a_given_p` (n > 0).

    Notes
    -----
    The reciprocal of (F/A, i, n); equals 1/n exactly at i = 0.

    Examples
    --------
    >>> round(a_given_f(0.10, 5), 4)
    0.1638
    """
    i = _rate(i, "i")
    n = _periods(n, positive=True)
    return _out(1.0 / _fa(i, n))


def p_given_g(i, n):
    """Arithmetic-gradient present-worth factor (P/G, i, n).

    Present worth of 0, G, 2G, ..., (n-1)G paid at the ends of periods
    1 .. n, per unit G.

    Parameters and returns as :func:`f_given_p`.

    Warnings
    --------
    The gradient series starts at zero at the end of period 1 (textbook
    convention); a base amount A1 must be added separately with (P/A).

    Notes
    -----
    (P/G) = ((1+i)^n - 1 - n i) / (i^2 (1+i)^n). To avoid the cancellation of
    the numerator for small i it is evaluated as
    n^2 (L/i)^2 h(x) + n q(i) e^-x with L = log1p(i), x = n L,
    h(x) = (1 - e^-x (1+x))/x^2 and q(i) = (log1p(i) - i)/i^2, both by
    series near zero. At i = 0 it equals n (n - 1)/2 exactly.

    Examples
    --------
    >>> round(p_given_g(0.10, 5), 4)
    6.8618
    >>> p_given_g(0.0, 10)
    45.0
    """
    i = _rate(i, "i")
    n = _periods(n)
    return _out(_pg(i, n))


def a_given_g(i, n):
    """Arithmetic-gradient uniform-series factor (A/G, i, n) = 1/i - n/((1+i)^n - 1).

    Parameters and returns as :func:`a_given_p` (n > 0).

    Notes
    -----
    Evaluated as (P/G)(A/P) in cancellation-free form; (n - 1)/2 exactly at
    i = 0.

    Examples
    --------
    >>> round(a_given_g(0.10, 5), 4)
    1.8101
    >>> a_given_g(0.0, 10)
    4.5
    """
    i = _rate(i, "i")
    n = _periods(n, positive=True)
    return _out(_pg(i, n) / _pa(i, n))


def p_given_a1_geometric(g, i, n):
    """Geometric-gradient present-worth factor (P/A1, g, i, n).

    Present worth of A1, A1(1+g), ..., A1(1+g)^(n-1) paid at the ends of
    periods 1 .. n, per unit A1.

    Parameters
    ----------
    g : array_like [fraction per period]
        Growth rate of the series, > -1.
    i : array_like [fraction per period]
        Interest rate, > -1.
    n : array_like [periods]
        Number of payments, >= 0. `g`, `i`, `n` broadcast together.

    Returns
    -------
    float or ndarray, shape ``broadcast(g, i, n)``

    Warnings
    --------
    A1 is the amount at the end of period 1 (textbook convention). The NIST
    UPV* factor instead escalates a base-year amount, so its first payment is
    A0 (1 + e); see :func:`upv_star`.

    Notes
    -----
    (P/A1) = (1 - ((1+g)/(1+i))^n)/(i - g), and n/(1+i) when g = i. It is
    evaluated as n (expm1(n w)/(n w)) (log1p(d)/d)/(1+i) with
    d = (g - i)/(1+i) and w = log1p(d), which is exact at g = i and smooth
    across it.

    References
    ----------
    L. Blank, A. Tarquin, Engineering Economy, McGraw-Hill (geometric
    gradient, g = i case).

    Examples
    --------
    >>> round(1000 * p_given_a1_geometric(0.07, 0.12, 10), 2)
    7332.6
    >>> p_given_a1_geometric(0.10, 0.10, 1) == 1 / 1.1
    True
    """
    g = _rate(g, "g")
    i = _rate(i, "i")
    n = _periods(n)
    return _out(_geometric(g, i, n))


def _geometric(g, i, n):
    d = (g - i) / (1.0 + i)
    w = np.log1p(d)
    return n * _expm1_ratio(n * w) * _log1p_ratio(d) / (1.0 + i)


FACTOR_NAMES = ("F/P", "P/F", "F/A", "P/A", "A/F", "A/P", "P/G", "A/G", "P/A1")

_DISPATCH = {
    "F/P": f_given_p,
    "P/F": p_given_f,
    "F/A": f_given_a,
    "P/A": p_given_a,
    "A/F": a_given_f,
    "A/P": a_given_p,
    "P/G": p_given_g,
    "A/G": a_given_g,
}


def interest_factor(factor, i, n, *, g=None):
    """Any compound-interest factor by its trade name, e.g. ``"A/P"``.

    Parameters
    ----------
    factor : str
        One of ``"F/P", "P/F", "F/A", "P/A", "A/F", "A/P", "P/G", "A/G",
        "P/A1"`` (the last is the geometric gradient and needs `g`). Spaces
        and case are ignored.
    i : array_like [fraction per period]
    n : array_like [periods]
    g : array_like [fraction per period], optional
        Growth rate, only for ``"P/A1"``.

    Returns
    -------
    float or ndarray, shape ``broadcast(i, n[, g])``

    Examples
    --------
    >>> round(interest_factor("A/P", 0.10, 5), 4)
    0.2638
    >>> round(interest_factor("P/A1", 0.12, 10, g=0.07), 4)
    7.3326
    """
    if not isinstance(factor, str):
        raise TypeError(f"factor must be a string such as 'A/P', got {type(factor).__name__}")
    key = factor.replace(" ", "").upper()
    if key == "P/A1":
        if g is None:
            raise ValueError("factor 'P/A1' (geometric gradient) needs the growth rate g=")
        return p_given_a1_geometric(g, i, n)
    if key not in _DISPATCH:
        raise ValueError(f"unknown factor {factor!r}; expected one of {', '.join(FACTOR_NAMES)}")
    if g is not None:
        raise ValueError(f"g= applies only to the geometric gradient 'P/A1', not {factor!r}")
    return _DISPATCH[key](i, n)


# ------------------------------------------------ NIST Handbook 135 factors --


def spv(d, t):
    """Single present value factor SPV = 1/(1 + d)^t (NIST Handbook 135).

    Parameters
    ----------
    d : array_like [fraction per year]
        Discount rate, > -1 (real or nominal, consistent with the amounts).
    t : array_like [years]
        Time of the amount, >= 0. Broadcasts with `d`.

    Returns
    -------
    float or ndarray, shape ``broadcast(d, t)``

    References
    ----------
    S. K. Fuller, S. R. Petersen, Life-Cycle Costing Manual for the Federal
    Energy Management Program, NIST Handbook 135, U.S. Department of
    Commerce, 1995.

    Examples
    --------
    >>> round(spv(0.03, 10), 4)
    0.7441
    """
    d = _rate(d, "d")
    t = _periods(t, "t")
    with np.errstate(over="ignore"):
        return _out(np.exp(-t * np.log1p(d)))


def upv(d, n):
    """Uniform present value factor UPV = ((1+d)^n - 1)/(d (1+d)^n) (NIST Handbook 135).

    The same number as (P/A, d, n); n at d = 0.

    Parameters
    ----------
    d : array_like [fraction per year]
    n : array_like [years], >= 0

    Returns
    -------
    float or ndarray, shape ``broadcast(d, n)``

    References
    ----------
    S. K. Fuller, S. R. Petersen, NIST Handbook 135, 1995.

    Examples
    --------
    >>> round(upv(0.03, 20), 4)
    14.8775
    """
    d = _rate(d, "d")
    n = _periods(n)
    return _out(_pa(d, n))


def upv_star(d, e, n):
    """Modified uniform present value factor UPV* for an escalating annual amount.

    Present worth of A0 (1+e)^t for t = 1 .. n per unit base-year amount A0.

    Parameters
    ----------
    d : array_like [fraction per year]
        Discount rate, > -1.
    e : array_like [fraction per year]
        Escalation rate of the amount, > -1.
    n : array_like [years], >= 0
        `d`, `e`, `n` broadcast together.

    Returns
    -------
    float or ndarray, shape ``broadcast(d, e, n)``

    Warnings
    --------
    UPV* escalates from the base year (t = 0): the year-1 amount is
    A0 (1 + e). Hence UPV* = (1 + e) (P/A1, g=e, i=d, n), not the textbook
    geometric-gradient factor itself.

    Notes
    -----
    UPV* = ((1+e)/(d-e)) (1 - ((1+e)/(1+d))^n), and exactly n when e = d.

    References
    ----------
    S. K. Fuller, S. R. Petersen, NIST Handbook 135, 1995.

    Examples
    --------
    >>> round(upv_star(0.03, 0.02, 20), 6)
    18.081229
    >>> upv_star(0.03, 0.03, 20)
    20.0
    """
    d = _rate(d, "d")
    e = _rate(e, "e")
    n = _periods(n)
    dd = (e - d) / (1.0 + d)
    w = np.log1p(dd)
    growth = (1.0 + e) / (1.0 + d)
    return _out(n * _expm1_ratio(n * w) * _log1p_ratio(dd) * growth)
