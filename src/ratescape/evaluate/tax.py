"""After-tax cash flows as line classes for the present-worth kernel.

The engine sums line classes c = (basis, escalation, multiplier): each has an
amounts matrix A_c (P, T) and a per-scenario multiplier m_c,s, and
PW = sum_c A_c @ D_c (see DEVELOPERS.md, "kernel contract"). With an income
tax rate tau_s (which may vary by scenario) the after-tax analysis needs only
three multipliers, named here:

==============  ===========  ===========================================
multiplier      value        used for
==============  ===========  ===========================================
``"one"``       1            investment (capitalised, not expensed), loan
                             principal and payments, investment tax credit
``"after_tax"`` 1 - tau_s    operating lines (benefit, cost, other) and the
                             sale price at disposal (salvage)
``"tax"``       tau_s        tax shields: depreciation, book value written
                             off at disposal, deductible loan interest
==============  ===========  ===========================================

Assumptions (screening level; state them with every after-tax result):

* Tax is linear: a project's loss in a year offsets the firm's other taxable
  income in that year (common practice for a profitable firm), so the tax
  effect of every line is tau_s times its amount. For a stand-alone project
  :func:`after_tax_cash_flows_carry_forward` carries losses forward instead.
* Tax falls at the same point of the period as the flow it arises from (the end of the year
  under end-of-period timing; see the README, "After-tax screening", for the mid and beginning
  conventions and the reason).
* Depreciation is fixed in nominal money (a share of historical cost), so
  inflation erodes the value of the tax shield.
* The whole gain on disposal (depreciation recapture and any gain above cost)
  is taxed at the ordinary rate; a loss on disposal saves tax at that rate.
* Staged capital: each investment line is its own asset, depreciated from its own service
  period (:func:`staged_asset_lines`); working capital and land are never deducted (land's cost
  is deducted at its sale; see :mod:`ratescape.evaluate.kinds`).
* MACRS: the asset is sold at the end of year ``life``; deductions of tax
  years up to ``life`` are taken in full (the disposal-year convention is not
  applied) and the book value left is written off at disposal.

References
----------
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson,
chapters "Depreciation and Income Taxes" and "Price Changes and Exchange
Rates" (from memory).
D. G. Newnan, T. G. Eschenbach, J. P. Lavelle, Engineering Economic
Analysis, Oxford University Press, chapters "Income Taxes" and "Inflation
and Price Change" (from memory).
Internal Revenue Service, Publication 946, How to Depreciate Property.
"""
from __future__ import annotations

import numpy as np

from . import depreciation as _dep
from .kinds import KIND_RULES

__all__ = [
    "MULTIPLIERS",
    "KIND_MULTIPLIER",
    "multiplier_values",
    "after_tax_lines",
    "staged_asset_lines",
    "loan_schedule",
    "tax_immediate_offset",
    "after_tax_cash_flows_carry_forward",
    "carry_forward_adjustment",
    "carried_loss_streams",
    "carried_loss_worth_per_project",
]

MULTIPLIERS = ("one", "after_tax", "tax")

#: multiplier name of each cash-flow ``kind`` after tax (the engine relabels its own lines with this).
KIND_MULTIPLIER = {kind: rule.after_tax for kind, rule in KIND_RULES.items()}


def _check_tax_rate(tax_rate, name="tax_rate"):
    t = np.asarray(tax_rate, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t < 0) or np.any(t >= 1):
        raise ValueError(f"{name} must satisfy 0 <= {name} < 1")
    return t


def multiplier_values(tax_rate):
    """Per-scenario values of the three after-tax multipliers.

    Parameters
    ----------
    tax_rate : array_like, shape (S,) or scalar [fraction]
        Income-tax rate tau_s of each scenario.

    Returns
    -------
    dict {"one", "after_tax", "tax": ndarray shape (S,) or float}
        1, 1 - tau_s, tau_s.

    Examples
    --------
    >>> m = multiplier_values([0.0, 0.25])
    >>> m["after_tax"].tolist(), m["tax"].tolist()
    ([1.0, 0.75], [0.0, 0.25])
    """
    t = _check_tax_rate(tax_rate)
    out = {"one": np.ones_like(t), "after_tax": 1.0 - t, "tax": t.copy()}
    if t.ndim == 0:
        out = {k: float(v) for k, v in out.items()}
    return out


def _as_vector(x, p, name, dtype=float):
    a = np.asarray(x, dtype=dtype)
    if a.ndim == 0:
        return np.full(p, a.item(), dtype=dtype)
    if a.shape != (p,):
        raise ValueError(f"{name} must be a scalar or shape (P,) = ({p},), got {a.shape}")
    return a


def _as_int_vector(x, p, name, minimum):
    a = np.asarray(x)
    if a.dtype.kind == "f":
        if np.any(~np.isfinite(a)) or np.any(a != np.round(a)):
            raise ValueError(f"{name} must hold whole numbers of years")
        a = a.astype(np.int64)
    elif a.dtype.kind not in "iu":
        raise ValueError(f"{name} must hold integers, got dtype {a.dtype}")
    a = _as_vector(a, p, name, dtype=np.int64)
    if np.any(a < minimum):
        raise ValueError(f"{name} must be >= {minimum}")
    return a


def loan_schedule(principal, rate, term, n_periods):
    """Level-payment loan: payment and interest of each period, nominal.

    Parameters
    ----------
    principal : array_like, shape (P,) [currency at t = 0]
    rate : array_like, scalar or (P,) [fraction per period, nominal, fixed]
    term : array_like of int, scalar or (P,) [periods], 1 <= term <= n_periods - 1
    n_periods : int
        T, number of periods t = 0 .. T - 1.

    Returns
    -------
    payment, interest : ndarray, shape (P, T) [currency of each period]
        Payment A = L (A/P, i, n) at t = 1..n (zero elsewhere) and the
        interest part I_t = i * balance_{t-1}.

    Notes
    -----
    A = L i (1+i)^n / ((1+i)^n - 1), and A = L / n when i = 0.

    Examples
    --------
    >>> pay, intr = loan_schedule([1000.0], 0.10, 2, 4)
    >>> pay.round(4).tolist(), intr.round(4).tolist()
    ([[0.0, 576.1905, 576.1905, 0.0]], [[0.0, 100.0, 52.381, 0.0]])
    """
    L = np.asarray(principal, dtype=float)
    if L.ndim != 1:
        raise ValueError(f"principal must have shape (P,), got {L.shape}")
    p = L.shape[0]
    i = _as_vector(rate, p, "rate")
    n = _as_int_vector(term, p, "term", 1)
    T = int(n_periods)
    if np.any(n > T - 1):
        raise ValueError(f"loan term must be <= n_periods - 1 = {T - 1}")
    if np.any(~np.isfinite(i)) or np.any(i <= -1):
        raise ValueError("loan rate must be finite and > -1")
    growth = (1.0 + i) ** n
    with np.errstate(divide="ignore", invalid="ignore"):
        crf = np.where(i == 0.0, 1.0 / n, i * growth / (growth - 1.0))
    payment_amount = L * crf
    payment = np.zeros((p, T))
    interest = np.zeros((p, T))
    balance = L.copy()
    for t in range(1, int(n.max(initial=0)) + 1):  # loop over periods, not projects
        active = t <= n
        it = np.where(active, i * balance, 0.0)
        pay = np.where(active, payment_amount, 0.0)
        interest[:, t] = it
        payment[:, t] = pay
        balance = balance + it - pay
    return payment, interest


def after_tax_lines(
    first_cost,
    life,
    n_periods,
    *,
    method="macrs",
    recovery_years=5,
    salvage=0.0,
    convention=None,
    quarter=None,
    declining_rate=2.0,
    itc_rate=0.0,
    itc_period=1,
    itc_basis_reduction=0.0,
    loan_amount=0.0,
    loan_rate=0.0,
    loan_term=None,
    include_capital_lines=False,
):
    """Extra line classes of an after-tax analysis for a chunk of projects.

    Parameters
    ----------
    first_cost : array_like, shape (P,) [currency at t = 0]
        Depreciable first cost of each project, paid at t = 0.
    life : array_like of int, scalar or (P,) [years]
        Year of disposal N (1 <= N <= T - 1): the asset is sold at the end
        of year N and its remaining book value written off.
    n_periods : int
        T, the number of periods t = 0 .. T - 1 of the chunk's matrices.
    method : str or array_like of str, scalar or (P,)
        Depreciation method per call or per project (see
        :func:`ratescape.evaluate.depreciation.depreciation_schedule`).
    recovery_years : int or array_like of int, scalar or (P,) [years]
    salvage : array_like, scalar or (P,) [currency]
        Estimated salvage used by straight-line / declining-balance /
        units-of-production depreciation (ignored by MACRS). With
        ``include_capital_lines`` it is also the sale price at year N, in
        base-year (real) money.
    convention, quarter, declining_rate :
        Passed to ``depreciation_schedule`` (one value per call).
    itc_rate : float or (P,) [fraction of first cost]
        Investment tax credit, received as a nominal amount in
        ``itc_period`` (default 1: with the first year's tax return; 0 for
        a credit taken at purchase).
    itc_basis_reduction : float [fraction of the credit]
        Share of the credit that reduces the depreciable basis (0 = none).
    loan_amount : array_like, scalar or (P,) [currency at t = 0]
        Debt L borrowed at t = 0; 0 = equity financed.
    loan_rate : float or (P,) [fraction per year, nominal, fixed by contract]
    loan_term : int or (P,) [years]; required when any loan_amount > 0.
    include_capital_lines : bool
        Also return the investment (-first_cost at t = 0, real, "one") and the
        sale price (+salvage at t = N, real, "after_tax") lines, for projects
        given parametrically without a cash-flow file.

    Returns
    -------
    dict {(basis, escalation, multiplier): ndarray (P, T)}
        Keys among ``("nominal", 0.0, "tax")`` (depreciation D_t at t = 1..N
        plus the book value BV_N at t = N: the tax shield, and loan interest
        I_t), ``("nominal", 0.0, "one")`` (loan inflow L at t = 0, payments
        -A at t = 1..n, investment tax credit) and, with
        ``include_capital_lines``, ``("real", 0.0, "one")`` and
        ``("real", 0.0, "after_tax")``. Only non-empty classes are returned.

    Warnings
    --------
    End-of-period timing: tax year k lands at period k; t = 0 is the purchase.
    The operating lines of the project are not produced here: relabel them
    with :data:`KIND_MULTIPLIER` (benefit, cost, other, salvage ->
    ``"after_tax"``; investment -> ``"one"``).
    Assumes tax is linear: a loss in one year offsets the firm's other
    taxable income that year (common practice), so every line's tax is
    tau times its amount. For a stand-alone project use
    :func:`after_tax_cash_flows_carry_forward`.
    The gain on disposal (recapture and any gain above cost) is taxed at the
    ordinary rate. MACRS deductions of years up to N are taken in full (the
    disposal-year convention is not applied); the rest is written off at N.

    Notes
    -----
    After-tax cash flow of year t (nominal money):

    ATCF_t = (1 - tau) X_t + tau (D_t + I_t + [t = N] BV_N)
             - P_0 [t = 0] + (1 - tau) S_N [t = N]
             + L [t = 0] - A [1 <= t <= n] + ITC [t = t_ITC]
    where X_t are the operating lines (real basis, inflated), D_t, BV_N, I_t,
    A, L and ITC are nominal, and S_N the real sale price inflated to year N.
    Because D_t is nominal, its present worth falls as inflation rises.

    References
    ----------
    W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy,
    Pearson, after-tax cash-flow table (from memory).

    Examples
    --------
    >>> lines = after_tax_lines([100_000.0], 6, 8, method="macrs", recovery_years=5)
    >>> lines[("nominal", 0.0, "tax")].round(2).tolist()
    [[0.0, 20000.0, 32000.0, 19200.0, 11520.0, 11520.0, 5760.0, 0.0]]
    >>> lines = after_tax_lines([100_000.0], 3, 5, method="macrs", recovery_years=5)
    >>> lines[("nominal", 0.0, "tax")].round(2).tolist()   # BV 28,800 written off in year 3
    [[0.0, 20000.0, 32000.0, 48000.0, 0.0]]
    """
    cost = np.asarray(first_cost, dtype=float)
    if cost.ndim != 1:
        raise ValueError(f"first_cost must have shape (P,), got {cost.shape}")
    if np.any(~np.isfinite(cost)) or np.any(cost < 0):
        raise ValueError("first_cost must be finite and >= 0")
    p = cost.shape[0]
    T = _dep._check_int(n_periods, "n_periods", minimum=2)
    N = _as_int_vector(life, p, "life", 1)
    if np.any(N > T - 1):
        raise ValueError(f"life must be <= n_periods - 1 = {T - 1} (disposal must fall inside the matrix)")
    salvage_v = _as_vector(salvage, p, "salvage")
    methods = np.asarray(method, dtype=object)
    methods = np.full(p, methods.item(), dtype=object) if methods.ndim == 0 else methods
    if methods.shape != (p,):
        raise ValueError(f"method must be a string or shape (P,) = ({p},), got {methods.shape}")
    rec = _as_int_vector(recovery_years, p, "recovery_years", 1)
    itc = _as_vector(itc_rate, p, "itc_rate")
    if np.any(~np.isfinite(itc)) or np.any(itc < 0) or np.any(itc >= 1):
        raise ValueError("itc_rate must satisfy 0 <= itc_rate < 1")
    itc_t = _dep._check_int(itc_period, "itc_period", minimum=0)
    if itc_t > T - 1:
        raise ValueError(f"itc_period must be <= n_periods - 1 = {T - 1}")
    red = float(itc_basis_reduction)
    if not 0.0 <= red <= 1.0:
        raise ValueError(f"itc_basis_reduction must be in [0, 1], got {itc_basis_reduction!r}")

    credit = itc * cost
    basis = cost - red * credit
    t_index = np.arange(T)

    # --- depreciation shield: group by (method, recovery_years), a handful of groups
    shield = np.zeros((p, T))
    groups = {}
    for k, (m, r) in enumerate(zip(methods.tolist(), rec.tolist())):
        groups.setdefault((m, r), []).append(k)
    for (m, r), members in groups.items():  # loop over distinct methods, not projects
        idx = np.asarray(members)
        sched = _dep.depreciation_schedule(
            basis[idx], m, r, salvage=np.minimum(salvage_v[idx], basis[idx]), convention=convention,
            quarter=quarter, declining_rate=declining_rate,
        )  # (G, Y)
        Y = sched.shape[-1]
        years = np.arange(1, Y + 1)
        kept = np.where(years[None, :] <= N[idx, None], sched, 0.0)  # deductions up to disposal
        bv_at_disposal = basis[idx] - kept.sum(axis=-1)
        block = np.zeros((idx.size, T))
        ncol = min(Y, T - 1)
        block[:, 1:ncol + 1] = kept[:, :ncol]
        block[np.arange(idx.size), N[idx]] += bv_at_disposal
        shield[idx] = block

    tax_lines = shield
    one_nominal = np.zeros((p, T))
    if np.any(credit != 0):
        one_nominal[:, itc_t] += credit

    # --- debt financing
    L = _as_vector(loan_amount, p, "loan_amount")
    if np.any(~np.isfinite(L)) or np.any(L < 0):
        raise ValueError("loan_amount must be finite and >= 0")
    if np.any(L > 0):
        if loan_term is None:
            raise ValueError("loan_amount > 0 needs loan_term (years)")
        payment, interest = loan_schedule(L, loan_rate, loan_term, T)
        one_nominal[:, 0] += L
        one_nominal -= payment
        tax_lines = tax_lines + interest

    out = {("nominal", 0.0, "tax"): tax_lines}
    if np.any(one_nominal != 0):
        out[("nominal", 0.0, "one")] = one_nominal
    if include_capital_lines:
        inv = np.zeros((p, T))
        inv[:, 0] = -cost
        out[("real", 0.0, "one")] = inv
        sale = np.where(t_index[None, :] == N[:, None], salvage_v[:, None], 0.0)
        out[("real", 0.0, "after_tax")] = sale
    return out


def staged_asset_lines(cost, period, disposal, n_periods, *, method="macrs", recovery_years=5, salvage=0.0,
                       convention=None, quarter=None, itc_rate=0.0, itc_period=1):
    """Tax deductions of assets placed in service in their own periods (staged capital).

    Each row r is one asset: its cost is paid in period k_r, its depreciation schedule starts
    there (tax year j of the asset lands at period k_r + j, so the first year's convention, e.g.
    the MACRS half-year, applies to each asset in its own first year), and whatever book value is
    left at the project's disposal period N_r is written off there.

    Parameters
    ----------
    cost : array_like, shape (R,) [currency of period k_r]
        Depreciable cost of each asset, in the money of its own service period.
    period : array_like of int, shape (R,)
        Service period k_r (0 <= k_r <= N_r).
    disposal : array_like of int, shape (R,)
        Disposal period N_r (N_r <= n_periods - 1). An asset with N_r = k_r is written off in full
        at once (placed in service and disposed of in the same period).
    n_periods : int
        T, periods t = 0 .. T - 1.
    method, recovery_years, salvage, convention, quarter :
        As :func:`after_tax_lines` (per row where it allows arrays); ``salvage`` is each asset's
        estimated salvage for straight-line and declining balance, in the same money as its cost.
    itc_rate, itc_period :
        Investment tax credit (fraction of cost) received ``itc_period`` periods after service.

    Returns
    -------
    shield, credit : ndarray, shape (R, T) [money of each asset's service period]
        Deductions D (plus the book value written off at N_r) and tax credits. Both are fixed
        shares of the cost, so an asset whose cost grows with inflation up to k_r has deductions
        fixed in then-current money from k_r on: multiply by the tax rate and discount them in a
        line class frozen at k_r (``LineClass.frozen_at``).

    Notes
    -----
    The loop runs over distinct service periods (a handful), not over assets.

    References
    ----------
    Internal Revenue Service, Publication 946, How to Depreciate Property: each property's
    recovery period begins on the date it is placed in service, and the half-year convention
    treats it as placed in service at the midpoint of that year (Table A-1).

    Examples
    --------
    >>> shield, _ = staged_asset_lines([100.0, 50.0], [0, 2], [4, 4], 6, method="macrs", recovery_years=3)
    >>> shield.round(3).tolist()    # 3-year MACRS 33.33/44.45/14.81/7.41 %, each from its own period
    [[0.0, 33.33, 44.45, 14.81, 7.41, 0.0], [0.0, 0.0, 0.0, 16.665, 33.335, 0.0]]
    """
    c = np.asarray(cost, dtype=float)
    if c.ndim != 1:
        raise ValueError(f"cost must have shape (R,), got {c.shape}")
    r = c.shape[0]
    T = _dep._check_int(n_periods, "n_periods", minimum=2)
    k = _as_int_vector(period, r, "period", 0)
    N = _as_int_vector(disposal, r, "disposal", 0)
    if np.any(N > T - 1) or np.any(k > N):
        raise ValueError(f"each asset needs period <= disposal <= n_periods - 1 = {T - 1}")
    methods = np.asarray(method, dtype=object)
    methods = np.full(r, methods.item(), dtype=object) if methods.ndim == 0 else methods
    rec = _as_int_vector(recovery_years, r, "recovery_years", 1)
    salv = _as_vector(salvage, r, "salvage")
    itc = _as_vector(itc_rate, r, "itc_rate")
    shield = np.zeros((r, T))
    credit = np.zeros((r, T))
    at_once = N == k
    shield[np.flatnonzero(at_once), k[at_once]] = c[at_once]
    for start in np.unique(k[~at_once]):    # loop over distinct service periods, not assets
        rows = np.flatnonzero((k == start) & ~at_once)
        lines = after_tax_lines(c[rows], N[rows] - start, T - start, method=methods[rows], recovery_years=rec[rows],
                                salvage=salv[rows], convention=convention, quarter=quarter, itc_rate=itc[rows],
                                itc_period=min(int(itc_period), T - start - 1))
        shield[rows, start:] = lines[("nominal", 0.0, "tax")]
        if ("nominal", 0.0, "one") in lines:
            credit[rows, start:] = lines[("nominal", 0.0, "one")]
    return shield, credit


def tax_immediate_offset(taxable_income, tax_rate):
    """Tax of each year when losses offset the firm's other income at once.

    Parameters
    ----------
    taxable_income : array_like, shape (P, S, T) [nominal currency]
    tax_rate : array_like, shape (S,) [fraction]

    Returns
    -------
    ndarray, shape (P, S, T) [nominal currency]
        tau_s * taxable income; negative = tax saved elsewhere in the firm.

    Examples
    --------
    >>> tax_immediate_offset([[[100.0, -40.0]]], [0.25]).tolist()
    [[[25.0, -10.0]]]
    """
    x = np.asarray(taxable_income, dtype=float)
    t = _check_tax_rate(tax_rate)
    if x.ndim != 3 or t.shape != (x.shape[1],):
        raise ValueError(f"taxable_income must be (P, S, T) and tax_rate (S,), got {x.shape} and {t.shape}")
    return x * t[None, :, None]


def after_tax_cash_flows_carry_forward(taxable_income, tax_rate, *, offset_limit=1.0, initial_loss=0.0):
    """Tax paid each year when a project's losses are carried forward.

    For a stand-alone project (no other income to absorb its losses), a loss
    is not refunded: it is carried forward, without expiry, and deducted
    from the next years' positive taxable income. Vectorised over projects
    and scenarios; the loop runs over years only.

    Parameters
    ----------
    taxable_income : array_like, shape (P, S, T) [nominal currency]
        Taxable income of each project, scenario and year (operating income
        minus depreciation, interest, ... in then-current money).
    tax_rate : array_like, shape (S,) [fraction]
    offset_limit : float in (0, 1]
        Largest share of a year's positive income that carried losses may
        offset (1 = unlimited; 0.8 mimics an 80 % limitation).
    initial_loss : float or array_like broadcasting to (P, S) [currency]
        Loss already carried into year 0.

    Returns
    -------
    ndarray, shape (P, S, T) [nominal currency]
        Tax paid, >= 0 every year.

    Notes
    -----
    With carry c_{t-1} >= 0: used_t = min(c_{t-1}, limit * max(x_t, 0)),
    tax_t = tau * max(x_t - used_t, 0) and c_t = c_{t-1} - used_t + max(-x_t, 0).
    Compared with immediate offset (tax = tau x_t), cumulative tax paid is
    never lower at any year, so total tax and its present worth at a positive
    discount rate are never lower either.

    References
    ----------
    Internal Revenue Code section 172 (net operating loss deduction), as a
    description of the carry-forward mechanism only (common practice).

    Examples
    --------
    >>> x = [[[-100.0, 60.0, 60.0]]]
    >>> after_tax_cash_flows_carry_forward(x, [0.25]).tolist()
    [[[0.0, 0.0, 5.0]]]
    """
    x = np.asarray(taxable_income, dtype=float)
    t = _check_tax_rate(tax_rate)
    if x.ndim != 3:
        raise ValueError(f"taxable_income must have shape (P, S, T), got {x.shape}")
    if t.shape != (x.shape[1],):
        raise ValueError(f"tax_rate must have shape (S,) = ({x.shape[1]},), got {t.shape}")
    if np.any(~np.isfinite(x)):
        raise ValueError("taxable_income must be finite")
    limit = float(offset_limit)
    if not 0.0 < limit <= 1.0:
        raise ValueError(f"offset_limit must be in (0, 1], got {offset_limit!r}")
    carry = np.broadcast_to(np.asarray(initial_loss, dtype=float), x.shape[:2]).copy()
    if np.any(carry < 0):
        raise ValueError("initial_loss must be >= 0")
    paid = np.empty_like(x)
    rate = t[None, :]
    for k in range(x.shape[2]):  # loop over years only
        income = x[:, :, k]
        used = np.minimum(carry, limit * np.maximum(income, 0.0))
        paid[:, :, k] = rate * np.maximum(income - used, 0.0)
        carry = carry - used + np.maximum(-income, 0.0)
    return paid


def carried_loss_streams(amounts, classes, exponents, inflation, multipliers):
    """Then-current tax deferral (tau x_t - tax paid_t) (P, U, T) of stand-alone projects that
    carry their losses forward, at each of U points (inflation, tax rate, scaling multipliers).

    Under the engine's linear tax a loss x_t < 0 saves tau |x_t| at once; carried forward
    (:func:`after_tax_cash_flows_carry_forward`), the saving waits for the project's own later
    profits. Adding this stream to the linear after-tax then-current stream gives the stand-alone
    project's after-tax stream; its present worth is :func:`carry_forward_adjustment`.

    Parameters
    ----------
    amounts : (C, P, T) [currency] lines by class (after-tax lines included).
    classes : C ``LineClass``; a class whose multiplier contains ``after_tax`` is taxable income
        (times its other multiplier parts), one whose multiplier contains ``tax`` a deduction; others
        (investment, loan principal, working capital, tax credits) are not taxable. Each class
        grows to then-current money as the present worth grows it
        (:meth:`LineClass.then_current_growth`: real lines with inflation and escalation, nominal
        lines by their contractual escalation only).
    exponents : (T,) [years]; inflation : (U,) [fraction per year].
    multipliers : name -> (U,) values, with ``tax`` (the income-tax rate, fraction).

    Returns
    -------
    ndarray (P, U, T) [then-current currency], >= 0 (tax paid later than the linear tax assumes).
    """
    from .compiled import class_weighted_streams

    A = np.asarray(amounts, dtype=float)
    f = np.atleast_1d(np.asarray(inflation, dtype=float))
    tax = np.broadcast_to(np.asarray(multipliers["tax"], dtype=float), f.shape)
    weight = _taxable_weights(classes, exponents, f, multipliers)          # (C, U, T)
    income = class_weighted_streams(A, weight).transpose(1, 0, 2)          # (P, U, T)
    paid = after_tax_cash_flows_carry_forward(income, tax)
    return income * tax[None, :, None] - paid


def _taxable_weights(classes, exponents, inflation, multipliers, escalation_shift=0.0):
    """(C, n, T) weights turning each class's amounts into taxable income (then-current money) at n
    points: +growth times the other multiplier parts for taxable (``after_tax``) classes, -growth
    for deductions (``tax``), 0 for lines that are not taxable."""
    from .kernel import multiplier_values

    tau = np.asarray(exponents, dtype=float)
    n = inflation.size
    weight = np.zeros((len(classes), n, tau.size))
    for c, cls in enumerate(classes):                    # a handful of classes
        parts = cls.multiplier.split("*")
        if "after_tax" in parts:
            sign = multiplier_values("*".join(p for p in parts if p != "after_tax") or "one", multipliers, (n,))
        elif "tax" in parts:                             # a deduction (times its asset's cost multiplier)
            sign = -multiplier_values("*".join(p for p in parts if p != "tax") or "one", multipliers, (n,))
        else:
            continue
        weight[c] = sign[:, None] * cls.then_current_growth(inflation, tau, escalation_shift)
    return weight


def carried_loss_worth_per_project(amounts, classes, exponents, nominal_rate, inflation, multipliers,
                                   escalation_shift=0.0):
    """Worth (P,) to add to each project's linear after-tax worth when its losses are carried
    forward, with project p at its own point (nominal rate i_p, inflation f_p, escalation shift s_p):
    the one-at-a-time sensitivity's form of :func:`carry_forward_adjustment`.

    Parameters
    ----------
    amounts : (C, P, T) [currency], already scaled by the point's cost and benefit multipliers.
    classes, exponents : as :func:`carried_loss_streams`.
    nominal_rate, inflation : (P,) [fraction per year]; escalation_shift : scalar or (P,).
    multipliers : name -> scalar or (P,), with ``tax``.

    Returns
    -------
    ndarray (P,) [currency at time 0].
    """
    A = np.asarray(amounts, dtype=float)
    P = A.shape[1]
    f = np.broadcast_to(np.asarray(inflation, dtype=float), (P,))
    i = np.broadcast_to(np.asarray(nominal_rate, dtype=float), (P,))
    point = {k: np.broadcast_to(np.asarray(v, dtype=float), (P,)) for k, v in multipliers.items()}
    weight = _taxable_weights(classes, exponents, f, point, escalation_shift)   # (C, P, T): project p at point p
    income = np.einsum("cpt,cpt->pt", A, weight)
    tax = point["tax"]
    paid = after_tax_cash_flows_carry_forward(income[None], tax)[0]         # the points as the rate axis
    extra = income * tax[:, None] - paid
    return np.sum(extra * np.exp(-np.multiply.outer(np.log1p(i), np.asarray(exponents, dtype=float))), axis=1)


def carry_forward_adjustment(amounts, classes, exponents, discount_rate, inflation, multipliers):
    """Present worth (S, P) to add to the linear after-tax worth when losses are carried forward:
    the present worth of :func:`carried_loss_streams`.

    Parameters
    ----------
    amounts, classes, exponents : as :func:`carried_loss_streams`.
    discount_rate, inflation : (S,) nominal rate and inflation [fractions per year].
    multipliers : name -> (S,) per-scenario values, with ``tax``.

    Returns
    -------
    ndarray (S, P) [currency at time 0], <= 0 where the discount rate is positive.

    Notes
    -----
    Taxable income depends on the scenario only through inflation, the tax rate and the scaling
    multipliers; the streams are built once per distinct combination U of these, carried forward
    with a loop over periods, and discounted for every scenario of its combination by one matrix
    product (a loop over U, vectorised over projects and scenarios).
    """
    i = np.asarray(discount_rate, dtype=float)
    f = np.asarray(inflation, dtype=float)
    S = i.size
    names = sorted({part for c in classes for part in c.multiplier.split("*")} - {"one", "after_tax", "tax"})
    keys = np.column_stack([f, np.broadcast_to(np.asarray(multipliers["tax"], dtype=float), (S,))]
                           + [np.broadcast_to(np.asarray(multipliers[n], dtype=float), (S,)) for n in names])
    combos, which = np.unique(keys, axis=0, return_inverse=True)
    which = which.ravel()
    point = {"tax": combos[:, 1], **{n: combos[:, 2 + k] for k, n in enumerate(names)}}
    extra = carried_loss_streams(amounts, classes, exponents, combos[:, 0], point)   # (P, U, T)
    V = np.exp(-np.multiply.outer(np.log1p(i), np.asarray(exponents, dtype=float)))  # (S, T)
    P = extra.shape[0]
    out = np.empty((S, P))
    for u in range(combos.shape[0]):                                         # distinct (inflation, tax, ...) levels
        rows = np.flatnonzero(which == u)
        out[rows] = V[rows] @ extra[:, u, :].T
    return out
