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


def steps_per_period(timing: str = "end") -> int:
    """Steps per period k of the finest grid on which every flow of a timing convention falls.

    End and beginning of period place every flow at a whole period (k = 1); mid-period places
    period 0 at 0 and period t >= 1 at t - 1/2, so the grid has half-period steps (k = 2).
    """
    if timing not in TIMING_CONVENTIONS:
        raise ValueError(f"timing must be one of {TIMING_CONVENTIONS}, got {timing!r}")
    return 2 if timing == "mid" else 1


def stream_on_timing_grid(amounts, timing: str = "end") -> np.ndarray:
    """Cash flows (..., T) placed at the times their convention gives them, on a grid of 1/k periods.

    Parameters
    ----------
    amounts : array_like (..., T) [currency], period t = 0 .. T-1 on the last axis.
    timing : {"end", "mid", "beginning"}

    Returns
    -------
    ndarray (..., G) [currency]: position g holds the flows that fall g/k periods from now
    (k = :func:`steps_per_period`). End: the stream itself. Beginning: period 0 and period 1
    both fall "now" and add up at position 0, period t >= 2 at t - 1. Mid: period 0 at 0,
    period t >= 1 at position 2t - 1 (time t - 1/2), the positions between are zero.

    Notes
    -----
    sum_t A_t (1 + i)^(-tau_t) = sum_g G_g (1 + x)^(-g) with (1 + x)^k = 1 + i (per-period
    rates), so the internal rates of return x of the positioned stream, mapped by
    i = (1 + x)^k - 1, are exactly the rates at which the present worth under ``timing`` is zero.
    A uniform shift of every flow (period 0 included) would leave the roots unchanged; the
    conventions shift only t >= 1, which is why the stream must be repositioned.

    Examples
    --------
    >>> stream_on_timing_grid([-100.0, 60.0, 60.0], "beginning").tolist()
    [-40.0, 60.0]
    >>> stream_on_timing_grid([-100.0, 60.0, 60.0], "mid").tolist()
    [-100.0, 60.0, 0.0, 60.0]
    """
    a = np.asarray(amounts, dtype=float)
    if a.ndim == 0 or a.shape[-1] < 1:
        raise ValueError(f"amounts must have a period axis (last), got shape {a.shape}")
    k = steps_per_period(timing)
    T = a.shape[-1]
    tau = discount_exponents(T, timing) * k                  # in grid steps: whole numbers
    pos = np.rint(tau).astype(np.int64)
    out = np.zeros(a.shape[:-1] + (int(pos[-1]) + 1 if T > 1 else 1,))
    out[..., pos[1:]] = a[..., 1:]                           # t >= 1: distinct, increasing positions
    out[..., 0] += a[..., 0]                                 # period 0 is "now" (adds to period 1 at beginning)
    return out
