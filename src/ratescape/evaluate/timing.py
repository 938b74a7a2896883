"""Timing conventions: when within a period a cash flow happens.

Pure numpy. Period 0 is "now" under every convention; period t >= 1 is the
t-th period of the study.
"""
from __future__ import annotations

import numpy as np

TIMING_CONVENTIONS = ("end", "mid", "beginning")


def discount_exponents(n_periods: int, timing: str = "end", periods_per_year: float = 1.0) -> np.ndarray:
    """Exponent, in years, that discounts each period's cash flow to time 0.

    Parameters
    ----------
    n_periods : int
        Number of periods T including period 0.
    timing : {"end", "mid", "beginning"}
        Where in each period t >= 1 its cash flow falls: at the end (t), the
        middle (t - 1/2, the "mid-year convention") or the beginning (t - 1).
    periods_per_year : float
        Periods per year m; exponents are returned in years (tau / m) so that
        annual rates apply exactly: (1 + i)^(tau/m) = (1 + i_m)^tau with
        i_m = (1 + i)^(1/m) - 1.

    Returns
    -------
    ndarray, shape (T,)
        Exponent in years for each period; 0 for period 0.

    Warnings
    --------
    End-of-period is the default; beginning- and mid-period are options.

    References
    ----------
    ASTM E917, Standard Practice for Measuring Life-Cycle Costs of Buildings
    and Building Systems (end-of-year and mid-year conventions), ASTM
    International. Common practice.

    Examples
    --------
    >>> discount_exponents(3, "mid").tolist()
    [0.0, 0.5, 1.5]
    """
    if timing not in TIMING_CONVENTIONS:
        raise ValueError(f"timing must be one of {TIMING_CONVENTIONS}, got {timing!r}")
    if n_periods < 1:
        raise ValueError(f"n_periods must be >= 1, got {n_periods}")
    if not periods_per_year > 0:
        raise ValueError(f"periods_per_year must be > 0, got {periods_per_year}")
    t = np.arange(n_periods, dtype=float)
    shift = {"end": 0.0, "mid": 0.5, "beginning": 1.0}[timing]
    tau = np.where(t > 0, t - shift, 0.0)
    return tau / float(periods_per_year)
