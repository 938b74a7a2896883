"""Inflation and the exact Fisher relation between nominal and real rates.

(1 + i) = (1 + r)(1 + f) with i the nominal (market) rate, r the real rate
and f the general inflation rate, all as fractions per year.

References
----------
I. Fisher, The Theory of Interest, Macmillan, 1930, ch. 2.
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson,
ch. "Price Changes and Exchange Rates" (from memory).
"""
from __future__ import annotations

import numpy as np


def _check_rate(x, name):
    arr = np.asarray(x, dtype=float)
    if np.any(~np.isfinite(arr)):
        raise ValueError(f"{name} must be finite")
    if np.any(arr <= -1.0):
        raise ValueError(f"{name} must be greater than -1 (-100 %), got {arr[arr <= -1.0].ravel()[0]!r}")
    return arr


def nominal_rate(real_rate, inflation):
    """Nominal rate from real rate and inflation, exact Fisher: (1+r)(1+f) - 1.

    Parameters
    ----------
    real_rate, inflation : array_like [fraction per year]
        Broadcast against each other.

    Returns
    -------
    ndarray or float [fraction per year]

    Examples
    --------
    >>> round(nominal_rate(0.05, 0.03), 10)
    0.0815
    """
    r = _check_rate(real_rate, "real_rate")
    f = _check_rate(inflation, "inflation")
    out = (1.0 + r) * (1.0 + f) - 1.0
    return out if out.ndim else float(out)


def real_rate(nominal, inflation):
    """Real rate from nominal rate and inflation, exact Fisher: (1+i)/(1+f) - 1.

    Examples
    --------
    >>> round(real_rate(0.0815, 0.03), 10)
    0.05
    """
    i = _check_rate(nominal, "nominal")
    f = _check_rate(inflation, "inflation")
    out = (1.0 + i) / (1.0 + f) - 1.0
    return out if out.ndim else float(out)


def per_period_rate(annual_rate, periods_per_year):
    """Exact per-period rate for m periods a year: (1 + i)^(1/m) - 1.

    Examples
    --------
    >>> round(per_period_rate(0.1268250301319698, 12), 12)
    0.01
    """
    i = _check_rate(annual_rate, "annual_rate")
    m = float(periods_per_year)
    if not m > 0:
        raise ValueError(f"periods_per_year must be > 0, got {periods_per_year}")
    out = np.power(1.0 + i, 1.0 / m) - 1.0
    return out if out.ndim else float(out)
