"""Measures of worth of cash-flow streams: present, future and annual worth,
capital recovery, benefit-cost ratio, profitability index, payback, MIRR.

Pure numpy. Broadcasting contract shared by every function here:

* ``amounts`` is an array whose **last axis is the period** t = 0, 1, ...,
  T-1 (t = 0 is "now"); leading axes (projects, alternatives, ...) are free.
  Amounts are in the currency of the input file; + is money in, - money out.
* rates are annual fractions (0.07 = 7 %); a rate is a scalar or an array
  that broadcasts against ``amounts.shape[:-1]``; the result has shape
  ``broadcast(rate.shape, amounts.shape[:-1])``.
* a scalar-shaped result is returned as a Python float.
* a shape that does not fit raises ValueError naming the shape.

Timing (keyword ``timing``) follows :func:`ratescape.evaluate.timing.discount_exponents`:
period t >= 1 is discounted over t (``"end"``, default), t - 1/2 (``"mid"``)
or t - 1 (``"beginning"``) periods; period 0 is always "now". With
``periods_per_year`` m the annual rate applies exactly over t/m years.
"""
from __future__ import annotations

import numpy as np

from .factors import _pa, _periods, _rate
from .timing import discount_exponents

__all__ = [
    "present_worth",
    "future_worth",
    "annual_worth",
    "capital_recovery_cost",
    "benefit_cost_ratio",
    "profitability_index",
    "payback_period",
    "discounted_payback_period",
    "mirr",
    "last_flow_period",
]


# ---------------------------------------------------------------- helpers --


def _amounts(amounts, name="amounts", min_periods=1):
    a = np.asarray(amounts, dtype=float)
    if a.ndim == 0:
        raise ValueError(
            f"{name} must have at least one dimension (the period axis, last), got shape {a.shape}"
        )
    if a.shape[-1] < min_periods:
        raise ValueError(
            f"{name} needs at least {min_periods} period(s) on its last axis, got shape {a.shape}"
        )
    return a


def _rate_for(rate, a, name="rate"):
    r = _rate(rate, name)
    try:
        shape = np.broadcast_shapes(r.shape, a.shape[:-1])
    except ValueError:
        raise ValueError(
            f"{name} of shape {r.shape} does not broadcast against the leading axes "
            f"{a.shape[:-1]} of amounts with shape {a.shape} (the last axis is the period)"
        ) from None
    return r, shape


def _out(x):
    x = np.asarray(x, dtype=float)
    return float(x) if x.ndim == 0 else x


def _discount_factors(rate, n_periods, timing, periods_per_year):
    """(1 + rate)^-tau for each period, shape rate.shape + (T,)."""
    tau = discount_exponents(n_periods, timing, periods_per_year)
    with np.errstate(over="ignore"):
        return np.exp(-np.log1p(rate)[..., None] * tau)


def _pw(a, r, timing, periods_per_year):
    df = _discount_factors(r, a.shape[-1], timing, periods_per_year)
    if r.ndim == 0:
        return a @ df
    return np.einsum("...t,...t->...", a, df)


# --------------------------------------------------------------- measures --


def present_worth(amounts, rate, *, timing="end", periods_per_year=1):
    """Present worth (net present value) of cash-flow streams at time 0.

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]
        Cash flows; the last axis is the period t = 0 .. T-1.
    rate : array_like, shape broadcasting against ``amounts.shape[:-1]`` [fraction per year]
        Discount rate, > -1.
    timing : {"end", "mid", "beginning"}, keyword-only
        Where in each period t >= 1 its amount falls.
    periods_per_year : float, keyword-only
        Periods per year m; the annual rate is applied exactly over t/m years.

    Returns
    -------
    float or ndarray, shape ``broadcast(rate.shape, amounts.shape[:-1])`` [currency at t = 0]

    Warnings
    --------
    ``amounts[..., 0]`` is at t = 0 and is not discounted (as in
    numpy_financial.npv). Spreadsheet NPV functions that treat the first
    value as the end of period 1 give this result divided by (1 + rate).

    Notes
    -----
    PW = sum_t A_t (1 + i)^(-tau_t), tau_t = t, t - 1/2 or t - 1 (t >= 1) over m.

    References
    ----------
    W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy,
    Pearson, ch. "Evaluating a Single Project" (present-worth method).

    Examples
    --------
    >>> round(present_worth([-40000, 5000, 8000, 12000, 30000], 0.08), 4)
    3065.2227
    >>> present_worth([[-100, 110], [-100, 121]], [0.10, 0.10]).round(10).tolist()
    [0.0, 10.0]
    """
    a = _amounts(amounts)
    r, _ = _rate_for(rate, a)
    return _out(_pw(a, r, timing, periods_per_year))


def future_worth(amounts, rate, *, timing="end", periods_per_year=1):
    """Future worth of cash-flow streams at the end of the last period (t = T-1).

    Parameters and broadcasting as :func:`present_worth`.

    Returns
    -------
    float or ndarray, shape ``broadcast(rate.shape, amounts.shape[:-1])`` [currency at t = T-1]

    Notes
    -----
    FW = PW (1 + i)^((T-1)/m); the future-worth date is the end of period
    T-1 under every timing convention.

    Examples
    --------
    >>> round(future_worth([-100, 0, 121], 0.10), 10)
    0.0
    """
    a = _amounts(amounts)
    r, _ = _rate_for(rate, a)
    years = (a.shape[-1] - 1) / float(periods_per_year)
    with np.errstate(over="ignore"):
        return _out(_pw(a, r, timing, periods_per_year) * np.exp(years * np.log1p(r)))


def annual_worth(amounts, rate, *, timing="end", periods_per_year=1):
    """Annual worth (equivalent uniform amount per period) of cash-flow streams.

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency], T >= 2
    rate : array_like [fraction per year], broadcasting against ``amounts.shape[:-1]``
    timing, periods_per_year : see :func:`present_worth`

    Returns
    -------
    float or ndarray, shape ``broadcast(rate.shape, amounts.shape[:-1])``
    [currency per period]

    Warnings
    --------
    The uniform series runs over the T-1 periods 1 .. T-1 at the per-period
    rate (1+i)^(1/m) - 1, end of period, whatever the ``timing`` used for PW.

    Notes
    -----
    AW = PW (A/P, i_m, T-1).

    References
    ----------
    W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy,
    Pearson, ch. "Evaluating a Single Project" (annual-worth method).

    Examples
    --------
    >>> round(annual_worth([-40000, 5000, 8000, 12000, 30000], 0.08), 4)
    925.4545
    """
    a = _amounts(amounts, min_periods=2)
    r, _ = _rate_for(rate, a)
    pw = _pw(a, r, timing, periods_per_year)
    i_m = np.expm1(np.log1p(r) / float(periods_per_year))
    return _out(pw / _pa(i_m, np.float64(a.shape[-1] - 1)))


def capital_recovery_cost(P, S, i, n):
    """Capital-recovery cost CR = (P - S)(A/P, i, n) + S i.

    The equivalent uniform annual cost of owning an asset bought for P and
    sold for S after n periods.

    Parameters
    ----------
    P : array_like [currency]
        First cost at t = 0.
    S : array_like [currency]
        Salvage (market) value at the end of period n.
    i : array_like [fraction per period], > -1
    n : array_like [periods], > 0
        All four broadcast together.

    Returns
    -------
    float or ndarray, shape ``broadcast(P, S, i, n)`` [currency per period]

    Notes
    -----
    CR = (P - S)(A/P, i, n) + S i = P (A/P, i, n) - S (A/F, i, n); the i = 0
    limit is (P - S)/n.

    References
    ----------
    D. G. Newnan, T. G. Eschenbach, J. P. Lavelle, Engineering Economic
    Analysis, Oxford University Press, annual-worth chapter.

    Examples
    --------
    >>> round(capital_recovery_cost(100000, 20000, 0.10, 5), 2)
    23103.8
    """
    P = np.asarray(P, dtype=float)
    S = np.asarray(S, dtype=float)
    i = _rate(i, "i")
    n = _periods(n, positive=True)
    return _out((P - S) / _pa(i, n) + S * i)


def _pad_periods(arrays, names):
    out = [_amounts(x, name) for x, name in zip(arrays, names)]
    T = max(x.shape[-1] for x in out)
    out = [
        np.concatenate([x, np.zeros(x.shape[:-1] + (T - x.shape[-1],))], axis=-1)
        if x.shape[-1] < T
        else x
        for x in out
    ]
    try:
        lead = np.broadcast_shapes(*(x.shape[:-1] for x in out))
    except ValueError:
        shapes = ", ".join(f"{n} {x.shape}" for n, x in zip(names, out))
        raise ValueError(f"leading axes do not broadcast: {shapes}") from None
    return out, lead


def benefit_cost_ratio(benefits, costs, investment, rate, *, modified=False, timing="end",
                       periods_per_year=1):
    """Benefit-cost ratio, conventional or modified.

    Parameters
    ----------
    benefits : array_like, shape (..., T_b) [currency]
        Benefits per period (positive amounts), t = 0 first.
    costs : array_like, shape (..., T_c) [currency]
        Operating and maintenance costs per period (positive amounts).
    investment : array_like, shape (..., T_i) [currency]
        Investment (first cost) per period (positive amounts); ``[P]`` is a
        single outlay at t = 0.
    rate : array_like [fraction per year], broadcasting against the leading axes
    modified : bool, keyword-only
        False (default) for the conventional ratio, True for the modified one.
    timing, periods_per_year : see :func:`present_worth`

    Returns
    -------
    float or ndarray, shape ``broadcast(rate, leading axes)`` [dimensionless]

    Warnings
    --------
    Streams whose period axes differ in length are padded with zeros at the
    end. Salvage value is the caller's choice: subtract it from investment
    (as a negative investment at its period) or add it to benefits; the
    ratio differs, the accept/reject decision (ratio > 1) does not.

    Notes
    -----
    conventional B/C = PW(B) / (PW(I) + PW(O&M));
    modified B/C = (PW(B) - PW(O&M)) / PW(I).
    Both exceed 1 exactly when PW(B) - PW(O&M) - PW(I) > 0 and the
    denominator is positive. A ratio whose denominator is zero or negative
    (no investment, such as a sale; or costs that net to an inflow) is not
    defined and is NaN, never infinity or a negative ratio (common practice:
    a ratio of benefits to costs needs costs to divide by).

    References
    ----------
    L. Blank, A. Tarquin, Engineering Economy, McGraw-Hill, ch. "Benefit/Cost
    Analysis and Public Sector Economics".

    Examples
    --------
    >>> b = [0] + [25000] * 10; c = [0] + [5000] * 10
    >>> round(benefit_cost_ratio(b, c, [100000], 0.07), 4)
    1.2995
    >>> round(benefit_cost_ratio(b, c, [100000], 0.07, modified=True), 4)
    1.4047
    >>> float(benefit_cost_ratio(b, c, [0], 0.07, modified=True))   # nothing invested
    nan
    """
    (b, c, inv), lead = _pad_periods([benefits, costs, investment],
                                    ["benefits", "costs", "investment"])
    r = _rate(rate, "rate")
    try:
        np.broadcast_shapes(r.shape, lead)
    except ValueError:
        raise ValueError(
            f"rate of shape {r.shape} does not broadcast against the leading axes {lead}"
        ) from None
    pb = _pw(b, r, timing, periods_per_year)
    pc = _pw(c, r, timing, periods_per_year)
    pi = _pw(inv, r, timing, periods_per_year)
    with np.errstate(divide="ignore", invalid="ignore"):
        denominator = pi if modified else pi + pc
        ratio = np.where(denominator > 0, ((pb - pc) if modified else pb) / denominator, np.nan)
    return _out(ratio)


def profitability_index(amounts, rate, *, investment=None, timing="end", periods_per_year=1):
    """Profitability index: present worth of the flows other than the investment per unit of
    present worth of the investment, PI = 1 + PW / PV(I).

    The one definition ratescape uses, here and in the stored ``profitability_index`` column
    (:func:`ratescape.evaluate.compiled.index_from_worth`).

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]
        The project's net cash flows, investment included (as :func:`present_worth`).
    rate : array_like [fraction per year], broadcasting against ``amounts.shape[:-1]``
    investment : array_like, shape (..., T_i) [currency], keyword-only
        The investment outlays I_t per period as positive amounts (the project's
        ``investment`` lines, with their sign flipped), t = 0 first; shorter or longer streams
        are padded with zeros. Default: the net outlay at t = 0, max(-amounts[..., 0], 0)
        (the investment "now" of a conventional stream).
    timing, periods_per_year : see :func:`present_worth`

    Returns
    -------
    float or ndarray [dimensionless]; NaN where PV(I) <= 0 (no investment: no index).

    Warnings
    --------
    PI > 1 exactly when PW > 0. The investment is every outlay on investment lines, in
    whatever period (staged capital): PV(I) discounts them all. The "net" index of some texts,
    PW / PV(I), is PI - 1; ratescape stores only PI.

    Notes
    -----
    PI = (PW(A) + PV(I)) / PV(I) = PV(flows other than the investment) / PV(I); with the default
    investment, PV(I) = -A_0 and PI = sum_{t>=1} A_t (1+i)^-tau_t / (-A_0).

    References
    ----------
    S. A. Ross, R. W. Westerfield, J. F. Jaffe, Corporate Finance, McGraw-Hill, chapter on net
    present value and other investment rules: PI = PV of the cash flows after the initial
    investment / initial investment (from memory). R. A. Brealey, S. C. Myers, F. Allen,
    Principles of Corporate Finance, McGraw-Hill, capital-rationing section: the ratio NPV /
    investment, here PI - 1 (from memory). C. S. Park, Contemporary Engineering Economics,
    Pearson (investment at several periods discounted in the denominator; from memory).

    Examples
    --------
    >>> round(profitability_index([-100, 60, 60], 0.0), 6)
    1.2
    >>> round(profitability_index([-60, 20, 60, 60], 0.0, investment=[60, 40]), 6)   # staged
    1.8
    """
    a = _amounts(amounts)
    r, _ = _rate_for(rate, a)
    if investment is None:
        inv = np.zeros_like(a)
        inv[..., :1] = np.maximum(-a[..., :1], 0.0)
    else:
        (a, inv), _ = _pad_periods([a, investment], ["amounts", "investment"])
    pw = _pw(a, r, timing, periods_per_year)
    pv_inv = _pw(inv, r, timing, periods_per_year)
    with np.errstate(divide="ignore", invalid="ignore"):
        pi = np.where(pv_inv > 0, 1.0 + pw / np.where(pv_inv > 0, pv_inv, 1.0), np.nan)
    return _out(pi)


def _payback(cum, interpolate):
    """Payback index from cumulative sums along the last axis."""
    T = cum.shape[-1]
    neg = cum < 0
    any_neg = neg.any(axis=-1)
    # index of the last period whose cumulative amount is negative
    last_neg = T - 1 - np.argmax(neg[..., ::-1], axis=-1)
    ends_ok = cum[..., -1] >= 0
    k = np.minimum(last_neg + 1, T - 1)
    if interpolate:
        before = np.take_along_axis(cum, np.maximum(k - 1, 0)[..., None], axis=-1)[..., 0]
        at = np.take_along_axis(cum, k[..., None], axis=-1)[..., 0]
        step = at - before
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(step > 0, -before / np.where(step > 0, step, 1.0), 1.0)
        value = (k - 1) + frac
    else:
        value = k.astype(float)
    out = np.where(any_neg, value, 0.0)
    out = np.where(ends_ok & ~np.isnan(cum).any(axis=-1), out, np.nan)
    return out


def payback_period(amounts, *, interpolate=True):
    """Simple (undiscounted) payback period of cash-flow streams.

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]
        Cash flows, last axis the period t = 0 .. T-1.
    interpolate : bool, keyword-only
        True (default): interpolate linearly within the period of recovery;
        False: whole periods (the first period index at which the
        cumulative amount is recovered).

    Returns
    -------
    float or ndarray, shape ``amounts.shape[:-1]`` [periods]
        NaN where the cumulative amount is still negative at t = T-1 (never
        paid back); 0 where it is never negative.

    Warnings
    --------
    For streams with later outlays the cumulative amount can recover, fall
    below zero and recover again; this function reports the **last**
    recovery (after which the cumulative amount stays >= 0). For
    conventional streams that is the usual "first period with cumulative
    amount >= 0". Linear interpolation within the period is common
    practice, not universal.

    Notes
    -----
    With C_t = sum_{s<=t} A_s and k the first period after the last negative
    C: payback = k (whole) or (k - 1) + (-C_{k-1}) / (C_k - C_{k-1}).

    References
    ----------
    C. S. Park, Contemporary Engineering Economics, Pearson (payback
    screening). Interpolation: common practice.

    Examples
    --------
    >>> payback_period([-1000, 300, 400, 500, 200])
    2.6
    >>> payback_period([-1000, 300, 400, 500, 200], interpolate=False)
    3.0
    """
    a = _amounts(amounts)
    return _out(_payback(np.cumsum(a, axis=-1), interpolate))


def discounted_payback_period(amounts, rate, *, interpolate=True, timing="end",
                              periods_per_year=1):
    """Discounted payback period: payback on the cumulative present worth.

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]
    rate : array_like [fraction per year], broadcasting against ``amounts.shape[:-1]``
    interpolate : bool, keyword-only
        As :func:`payback_period`.
    timing, periods_per_year : see :func:`present_worth`

    Returns
    -------
    float or ndarray, shape ``broadcast(rate.shape, amounts.shape[:-1])``
    [periods]; NaN where never paid back.

    Warnings
    --------
    Same recovery convention as :func:`payback_period`; the result is in
    periods (period indices), not years, when ``periods_per_year`` != 1.

    Notes
    -----
    As :func:`payback_period` with C_t = sum_{s<=t} A_s (1+i)^-tau_s.

    References
    ----------
    C. S. Park, Contemporary Engineering Economics, Pearson (discounted
    payback).

    Examples
    --------
    >>> round(discounted_payback_period([-1000, 300, 400, 500, 200], 0.10), 6)
    3.154
    """
    a = _amounts(amounts)
    r, shape = _rate_for(rate, a)
    df = _discount_factors(r, a.shape[-1], timing, periods_per_year)
    disc = np.broadcast_to(a, shape + a.shape[-1:]) * df
    return _out(_payback(np.cumsum(disc, axis=-1), interpolate))


def last_flow_period(amounts):
    """Each stream's horizon: the index of its last non-zero amount (0 for an all-zero stream).

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency]

    Returns
    -------
    ndarray of int, shape ``amounts.shape[:-1]`` [periods]

    Examples
    --------
    >>> last_flow_period([[-100, 60, 60, 0, 0], [0, 0, 0, 0, 0]]).tolist()
    [2, 0]
    """
    a = _amounts(amounts)
    nz = a != 0
    T = a.shape[-1]
    return np.where(nz.any(axis=-1), T - 1 - np.argmax(nz[..., ::-1], axis=-1), 0)


def mirr(amounts, finance_rate, reinvest_rate, *, horizon=None, timing="end"):
    """Modified internal rate of return of cash-flow streams, each over its own horizon.

    Parameters
    ----------
    amounts : array_like, shape (..., T) [currency], T >= 2
        Cash flows, last axis the period t = 0 .. T-1.
    finance_rate : array_like [fraction per period]
        Rate at which the outflows (negative amounts) are discounted to t = 0.
    reinvest_rate : array_like [fraction per period]
        Rate at which the inflows (positive amounts) are compounded to the end of the horizon.
        Both rates broadcast against ``amounts.shape[:-1]``.
    horizon : array_like of int, keyword-only, broadcasting against ``amounts.shape[:-1]`` [periods]
        The period N at whose end the inflows are compounded and over which the ratio is
        annualised. Default: each stream's own last non-zero period
        (:func:`last_flow_period`), so trailing zeros (padding to a portfolio's longest
        project) do not change a stream's MIRR. Amounts after ``horizon`` are refused.
    timing : {"end", "mid", "beginning"}, keyword-only
        Where in each period t >= 1 its amount falls (:func:`ratescape.evaluate.timing.discount_exponents`);
        the terminal date is the end of period N under every convention.

    Returns
    -------
    float or ndarray, shape ``broadcast(rates, amounts.shape[:-1])`` [fraction per period]
        NaN for rows without both a positive and a negative amount, or with a horizon of 0
        (every flow now: no time over which to earn a rate).

    Warnings
    --------
    Rates are per period. With end-of-period timing and a stream whose last amount is
    non-zero this is numpy_financial.mirr (which always uses the full length T - 1; pass
    ``horizon=T - 1`` to reproduce it on padded streams).

    Notes
    -----
    MIRR = (FW_N(positive amounts, reinvest) / PW(-negative amounts, finance))^(1/N) - 1, with
    FW_N = sum_t A+_t (1 + r)^(N - tau_t), PW = sum_t A-_t (1 + f)^(-tau_t). With finance = reinvest
    = i, MIRR > i exactly when PW(i) > 0, under every timing.

    References
    ----------
    W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson, external rate of
    return / MIRR (the terminal date is the end of the project's own life N; from memory).
    numpy-financial, ``mirr``.

    Examples
    --------
    >>> round(mirr([-1600, 10000, -10000], 0.10, 0.10), 10)
    0.0559895554
    >>> round(mirr([-100, 0, 121, 0, 0], 0.10, 0.10), 10)     # trailing zeros: own horizon 2
    0.1
    """
    a = _amounts(amounts, min_periods=2)
    f = _rate(finance_rate, "finance_rate")
    r = _rate(reinvest_rate, "reinvest_rate")
    try:
        np.broadcast_shapes(f.shape, r.shape, a.shape[:-1])
    except ValueError:
        raise ValueError(
            f"finance_rate of shape {f.shape} and reinvest_rate of shape {r.shape} do not "
            f"broadcast against the leading axes {a.shape[:-1]} of amounts with shape {a.shape}"
        ) from None
    T = a.shape[-1]
    last = last_flow_period(a)
    if horizon is None:
        n = last
    else:
        n = np.asarray(horizon)
        if n.dtype.kind not in "iu" and not np.all(n == np.round(n)):
            raise ValueError("horizon must hold whole numbers of periods")
        n = np.broadcast_to(n.astype(np.int64), a.shape[:-1])
        if np.any(n < 0) or np.any(n > T - 1):
            raise ValueError(f"horizon must lie in 0 .. {T - 1} (the last period of amounts)")
        if np.any(last > n):
            raise ValueError("amounts after the horizon must be zero (the horizon is the stream's last period)")
    tau = discount_exponents(T, timing)
    n_f = np.asarray(n, dtype=float)
    pos = np.where(a > 0, a, 0.0)
    neg = np.where(a < 0, -a, 0.0)
    with np.errstate(over="ignore", invalid="ignore"):
        # compounding (1 + r)^(N - tau_t) only over t <= N (later amounts are zero)
        grow = np.exp(np.log1p(r)[..., None] * (n_f[..., None] - tau))
        fw_pos = np.einsum("...t,...t->...", pos, np.where(tau <= n_f[..., None], grow, 0.0))
        pw_neg = np.einsum("...t,...t->...", neg, np.exp(-np.log1p(f)[..., None] * tau))
    ok = (pos > 0).any(axis=-1) & (neg > 0).any(axis=-1) & (n_f > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(ok, np.power(fw_pos / pw_neg, 1.0 / np.where(n_f > 0, n_f, 1.0)) - 1.0, np.nan)
    return _out(out)
